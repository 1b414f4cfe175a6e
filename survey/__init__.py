"""Capture side of bandcensus: band plans, hop planning, IQ sources, DSP, sweeps and storage."""

from survey.version import __version__

__all__ = ["__version__"]
