"""Commands: argument parsing, one module per command, printing and exit codes.
"""
