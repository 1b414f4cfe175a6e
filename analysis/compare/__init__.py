"""A/B comparison of two configurations: pairing, intervals, verdicts, figures.

Modules: :mod:`~analysis.compare.core` (the comparison and its records),
:mod:`~analysis.compare.estimators` (pairing and robust estimators),
:mod:`~analysis.compare.plots` (figures, matplotlib only there).
"""

from analysis.compare.core import ChannelDelta, Comparison, compare_configurations, compare_matrices

__all__ = ["ChannelDelta", "Comparison", "compare_configurations", "compare_matrices"]
