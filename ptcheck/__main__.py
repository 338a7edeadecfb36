"""``python -m ptcheck``: the command line (see :mod:`ptcheck.cli`)."""

import sys

from .cli import main

if __name__ == "__main__":
    sys.exit(main())
