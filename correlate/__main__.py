"""`python -m correlate` runs the command line."""

import sys

from correlate.cli import main

sys.exit(main())
