"""Allow ``python -m bandcensus``."""
import sys

from bandcensus.cli import main

if __name__ == "__main__":
    sys.exit(main())
