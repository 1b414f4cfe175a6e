"""Errors of the capture side. Every message says what went wrong and how to fix it.

The command line turns any :class:`SurveyError` into one line ``Error: ...`` and exit code 1.
"""


class SurveyError(Exception):
    """Base class of every error raised by the capture side."""


class PlanError(SurveyError):
    """A band plan or hop plan cannot be built from the settings given."""


class RecordingError(SurveyError):
    """A SigMF recording is missing, malformed, truncated or of an unsupported kind."""


class ReceiverError(SurveyError):
    """The receiver is missing, busy, refused a setting or failed mid-run."""


class ReceiverStalled(ReceiverError):
    """The receiver stopped delivering samples (no heartbeat within the stall timeout)."""


class StoreError(SurveyError):
    """The database cannot be opened, is of another schema, or a write failed."""


class SceneError(SurveyError):
    """A simulated-scene file is malformed or physically inconsistent."""


class ScheduleError(SurveyError):
    """A schedule (duration, end time, interval, switch command) is invalid or failed."""


class NamesFileError(SurveyError):
    """A station names file (``freq_mhz,name`` CSV) is missing or malformed."""
