"""Allow ``python -m bandcensus``."""
import sys

from bandcensus.cli import main

sys.exit(main())
