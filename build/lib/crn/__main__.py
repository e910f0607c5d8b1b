"""Run the command line as ``python -m crn``."""

import sys

from crn.cli import main

sys.exit(main())
