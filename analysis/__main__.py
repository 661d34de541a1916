"""``python -m analysis``: the command line."""

import sys

from analysis.cli import main

if __name__ == "__main__":
    # guarded so that worker processes importing this module do not run the command again
    sys.exit(main())
