"""Readers: files to standard records (study, FE results and fields, gauge map, readings, run folder).
"""
