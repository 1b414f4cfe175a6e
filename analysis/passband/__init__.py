"""Passband of a preamp: gain curve from the survey, tuned-circuit fit, stagger tuning advice.

Cheap pure functions for a live tuning display: :func:`fit_passband` (fit tuned circuits to
a gain curve), :func:`cascade_response_db` (response of given circuits) and
:func:`design_stagger` (retuning plan for a target band).
"""

from analysis.passband.fit import (
    Coverage,
    PassbandFit,
    TunedStage,
    cascade_response_db,
    check_target,
    coverage,
    curve_features,
    fit_passband,
)
from analysis.passband.stagger import StaggerPlan, design_stagger

__all__ = ["Coverage", "PassbandFit", "StaggerPlan", "TunedStage", "cascade_response_db", "check_target",
           "coverage", "curve_features", "design_stagger", "fit_passband"]
