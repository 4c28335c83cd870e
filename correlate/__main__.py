"""`python -m correlate` runs the command line."""


from correlate.commands.cli import entry

entry()
