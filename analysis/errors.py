"""Errors of the analysis side. Every message names the problem and the remedy.

The command line turns any :class:`AnalysisError` into one line ``Error: ...`` and exit code 1.
"""


class AnalysisError(Exception):
    """Base class of every error raised by the analysis side."""


class NoDataError(AnalysisError):
    """The database holds no sweeps matching the selection (label, input, time range)."""


class MismatchError(AnalysisError):
    """Two selections cannot be compared (different channel bandwidth, band plan, ...)."""


class MissingInputError(AnalysisError):
    """A workflow needs a run that is not in the database (e.g. noise-hot without noise-cold)."""


class BadParameterError(AnalysisError):
    """A user-supplied parameter or file (ENR table, readings CSV, target band) is invalid."""


class FitError(AnalysisError):
    """A model fit did not converge or the data cannot constrain it."""
