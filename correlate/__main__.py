"""`python -m correlate` runs the command line."""

import sys

from correlate.commands.cli import main

sys.exit(main())
