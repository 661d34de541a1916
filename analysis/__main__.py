"""``python -m analysis``: the command line."""

import sys

from analysis.cli import main

sys.exit(main())
