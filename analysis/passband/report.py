"""The whole passband job: fit a measured gain curve, check a target band, plan the retuning.

Combines :func:`analysis.passband.fit.fit_passband` and :func:`analysis.passband.fit.coverage` with the
maximally flat stagger design of :func:`analysis.passband.stagger.design_stagger`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.passband.fit import MAX_CIRCUITS, Coverage, PassbandFit, check_target, coverage, fit_passband
from analysis.passband.stagger import design_stagger, shrinkage_factor

@dataclass(frozen=True)
class PassbandReport:
    """Fit, coverage and retuning advice for one measured gain curve.

    ``curve`` is the :class:`analysis.passband.data.GainCurve` fitted; ``plan`` the
    :class:`analysis.passband.stagger.StaggerPlan` for the target with the same number of circuits.
    """

    curve: object
    fit: PassbandFit
    coverage: Coverage
    plan: object

    def verdict(self) -> str:
        """One plain-words sentence: width, centre, stations covered, covered or not."""
        fit, cov = self.fit, self.coverage
        lo, hi = cov.target_hz
        parts = [
            f"passband {fit.bw_6db_hz / 1e6:.1f} MHz wide at -6 dB ({fit.bw_3db_hz / 1e6:.1f} MHz at -3 dB) "
            f"around {fit.peak_hz / 1e6:.1f} MHz"
        ]
        n_in = len(cov.stations_in_target_hz)
        if n_in:
            parts.append(f"covers {len(cov.covered_stations_hz)} of {n_in} stations in {lo / 1e6:g}-{hi / 1e6:g} MHz")
        else:
            parts.append(f"no station list for {lo / 1e6:g}-{hi / 1e6:g} MHz")
        parts.append("covered" if cov.target_covered else "not covered")
        return "; ".join(parts)

    def to_dict(self) -> dict:
        """JSON-ready dict (Hz, dB); the keys of the ``passband --json`` output."""
        fit, cov, plan, curve = self.fit, self.coverage, self.plan, self.curve
        return {
            "verdict": self.verdict(),
            "source": curve.source,
            "gain_relative": bool(curve.relative),
            "dense": bool(curve.dense),
            "n_points": fit.n_points,
            "peak_hz": fit.peak_hz,
            "peak_gain_db": fit.peak_gain_db,
            "bw_3db_hz": fit.bw_3db_hz,
            "edges_3db_hz": list(fit.edges_3db_hz),
            "bw_6db_hz": fit.bw_6db_hz,
            "edges_6db_hz": list(fit.edges_6db_hz),
            "n_circuits": fit.n_circuits,
            "shape": fit.shape,
            "stages": [{"f0_hz": s.f0_hz, "q": s.q, "bw_hz": s.bw_hz} for s in fit.stages],
            "residual_rms_db": fit.residual_rms_db,
            "residual_max_db": fit.residual_max_db,
            "criterion": fit.criterion,
            "candidates": [c.to_dict() for c in fit.candidates],
            "edges_extrapolated": fit.edges_extrapolated,
            "target_hz": list(cov.target_hz),
            "target_covered": cov.target_covered,
            "ripple_db": cov.ripple_db,
            "worst_in_target_db": cov.worst_db,
            "stations_in_target_hz": list(cov.stations_in_target_hz),
            "uncovered_stations_hz": list(cov.uncovered_stations_hz),
            "stagger_plan": [{"f0_hz": s.f0_hz, "q": s.q, "bw_hz": s.bw_hz} for s in plan.stages],
            "stagger_center_hz": plan.center_hz,
            "stagger_center_kind": plan.center_kind,
            "stagger_edge_atten_db": list(plan.edge_atten_db),
            "stagger_ripple_db": plan.ripple_db,
            "stagger_peak_gain_change_db": plan.peak_gain_change_db,
            "stagger_insertion_loss_db": list(plan.insertion_loss_db),
            "stagger_q_unloaded": plan.q_unloaded,
            "stagger_q_unloaded_assumed": plan.q_unloaded_assumed,
            "synchronous_shrinkage": shrinkage_factor(fit.n_circuits),
            "points": [{"freq_hz": float(f), "gain_db": float(g)} for f, g in zip(curve.freqs_hz, curve.gain_db)],
            "notes": list(curve.notes) + list(fit.notes),
        }


def analyse_passband(curve, target_hz: tuple[float, float], *, max_circuits: int = MAX_CIRCUITS,
                     seed: int = 0, circuits: int | None = None, q_unloaded: float | None = None) -> PassbandReport:
    """Fit ``curve`` (a :class:`analysis.passband.data.GainCurve`), check the target, plan retuning.

    The stagger plan (:func:`analysis.passband.stagger.design_stagger`) has the fitted number of circuits
    and the target's width; its peak-gain change is against the fitted circuits.
    """
    target = check_target(*target_hz)
    fit = fit_passband(
        curve.freqs_hz, curve.gain_db, weights=1.0 / np.asarray(curve.sigma_db, dtype=np.float64),
        relative=curve.relative, max_circuits=max_circuits, seed=seed,
        floor_offset=curve.source.startswith("noise-floor"), circuits=circuits,
    )
    cov = coverage(fit, target, curve.stations_hz)
    plan = design_stagger(target, fit.n_circuits, measured_stages=fit.stages, q_unloaded=q_unloaded)
    return PassbandReport(curve=curve, fit=fit, coverage=cov, plan=plan)
