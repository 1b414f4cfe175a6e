"""Passband of a preamp: gain curve from the survey, tuned-circuit fit, stagger tuning advice.

Cheap pure functions for a live tuning display: :func:`fit_passband` (fit tuned circuits to
a gain curve, ``circuits=N`` when known), :func:`fit_trust` (may the fit be headlined),
:func:`cascade_response_db` (response of given circuits), :func:`butterworth_bandpass_stages`
(the maximally flat circuits for a band), :func:`design_stagger` (the checked retuning plan)
and :func:`insertion_loss_db` (passive circuit loss from loaded and unloaded Q).
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
    fit_trust,
)
from analysis.passband.stagger import StaggerPlan, butterworth_bandpass_stages, design_stagger, insertion_loss_db

__all__ = ["Coverage", "PassbandFit", "StaggerPlan", "TunedStage", "butterworth_bandpass_stages",
           "cascade_response_db", "check_target", "coverage", "curve_features", "design_stagger", "fit_passband",
           "fit_trust", "insertion_loss_db"]
