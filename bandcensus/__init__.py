"""bandcensus: a logging measurement receiver for the FM broadcast band.

The capture side lives in :mod:`survey` (antenna to database), the analysis side in
:mod:`analysis` (database to conclusion); this package holds the command line and the demo.
"""

from survey.version import __version__

__all__ = ["__version__"]
