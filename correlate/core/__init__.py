"""Core: errors, units, column names and the caution text, progress and stage timings, output folders and writers.

Imports nothing of the package.
"""
