"""Fault diagnosis of a preamp chain: clipping, intermodulation, oscillation, added noise.

Modules: :mod:`~analysis.diagnose.core` (the diagnosis and its record),
:mod:`~analysis.diagnose.data` (channel summaries and the gain model),
:mod:`~analysis.diagnose.checks`, :mod:`~analysis.diagnose.lines`,
:mod:`~analysis.diagnose.noise_checks` (the checks).
"""

from analysis.diagnose.core import DEFAULT_CLIP_THRESHOLD, Diagnosis, diagnose, summarise_findings
from analysis.findings import Finding

__all__ = ["DEFAULT_CLIP_THRESHOLD", "Diagnosis", "Finding", "diagnose", "summarise_findings"]
