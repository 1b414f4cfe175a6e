"""The record every check reports: one fault (or trouble) named with its evidence.

A leaf module (imports only :mod:`analysis.errors`) so that every analysis can report findings
without importing another analysis.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from analysis.errors import BadParameterError

#: Kinds of finding, in the order they are reported.
KINDS = ("clipping", "intermodulation", "oscillation", "added-noise", "passband", "measurement")
#: Severities, mildest first.
SEVERITIES = ("info", "warning", "problem")
@dataclass(frozen=True)
class Finding:
    """One fault named with its evidence.

    Parameters
    ----------
    kind : str
        One of :data:`KINDS`.
    freq_hz : float or None
        Where it is (Hz); None for a broadband finding.
    severity : str
        ``"info"``, ``"warning"`` or ``"problem"``.
    evidence : dict
        Numbers, with their unit in the key (``_hz``, ``_db``, ``_dbfs``, ``_k``, ``_fraction``,
        ``_count``).
    advice : str
        One or two sentences on what to do.
    """

    kind: str
    freq_hz: float | None
    severity: str
    evidence: dict
    advice: str

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise BadParameterError(f"unknown finding kind {self.kind!r}; use one of {', '.join(KINDS)}")
        if self.severity not in SEVERITIES:
            raise BadParameterError(f"unknown severity {self.severity!r}; use one of {', '.join(SEVERITIES)}")

    def to_dict(self) -> dict:
        """JSON-ready dict (non-finite numbers become None)."""
        def clean(v):
            if isinstance(v, float) and not math.isfinite(v):
                return None
            return v

        return {
            "kind": self.kind,
            "freq_hz": None if self.freq_hz is None else clean(float(self.freq_hz)),
            "severity": self.severity,
            "evidence": {k: clean(float(v)) if isinstance(v, (int, float)) else v for k, v in self.evidence.items()},
            "advice": self.advice,
        }
