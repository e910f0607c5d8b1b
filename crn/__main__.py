"""Run the command line as ``python -m crn``."""

import sys

from .cli import main

sys.exit(main())
