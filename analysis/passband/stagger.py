"""Retuning advice: maximally flat (Butterworth) stagger tuning and synchronous-tuning shrinkage.

Published forms
---------------
* ``n`` identical synchronously tuned circuits, each of -3 dB width ``BW_1``, have an overall
  width ``BW_n = BW_1 sqrt(2^(1/n) - 1)`` (factors 0.6436, 0.5098, 0.4350 for n = 2, 3, 4;
  standard textbook result).
* Maximally flat stagger tuning for an overall -3 dB bandwidth ``B`` with ``n`` circuits:
  circuit ``k`` has half-bandwidth ``(B/2) sin theta_k`` and sits ``(B/2) cos theta_k`` from the
  centre, ``theta_k = (2k - 1) pi / (2n)`` (the narrowband lowpass-to-bandpass form of the
  Butterworth poles; attributed to Valley & Wallman, *Vacuum Tube Amplifiers*, MIT Radiation
  Laboratory Series vol. 18, 1948, from memory). Pair: each circuit ``B/sqrt 2`` wide at
  ``f0 +- 0.354 B``; triple: one at ``f0`` with ``B``, two at ``f0 +- 0.433 B`` with ``B/2``.

The narrowband form is exact only for a vanishing fractional bandwidth; at 12 MHz around
94 MHz (13 %) it is an approximation, so every plan is checked here with the exact circuit
response ``1/(1 + Q^2 (f/f_k - f_k/f)^2)`` and the actual edge attenuation and ripple are
reported. The plan is centred on the **geometric** centre ``sqrt(f_lo f_hi)`` of the target (a
tuned circuit's response is symmetric in ``f/f0``, so the geometric centre balances the edges);
offsets are added arithmetically to it.

Gain cost
---------
A tuned stage's voltage gain times its bandwidth is fixed by the device and the circuit
capacitance (``A_v BW = g_m / (2 pi C)``), so widening a stage from ``BW`` to ``BW'`` changes
its power gain by ``20 log10(BW / BW')`` dB. A staggered cascade also loses gain at its peak,
because no circuit is at resonance there: the product of the normalised circuit responses peaks
at ``prod(sin^2 theta_k)`` in the narrowband form (-6.02 dB for a pair, -12.04 dB for a triple),
computed here exactly.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Sequence

import numpy as np
from scipy.optimize import least_squares

from analysis.errors import BadParameterError
from analysis.passband.fit import TunedStage, cascade_response_db, check_target

#: Largest number of circuits a plan is made for.
MAX_STAGGER = 6


def shrinkage_factor(n: int) -> float:
    """Bandwidth shrinkage of ``n`` identical synchronously tuned circuits, ``sqrt(2^(1/n) - 1)``."""
    if int(n) != n or n < 1:
        raise BadParameterError(f"number of circuits must be a whole number >= 1, got {n}")
    return float(np.sqrt(2.0 ** (1.0 / n) - 1.0))


def synchronous_bandwidth_hz(single_bw_hz: float, n: int) -> float:
    """Overall -3 dB width of ``n`` identical circuits each ``single_bw_hz`` wide, Hz."""
    return float(single_bw_hz) * shrinkage_factor(n)


def stagger_normalised(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Maximally flat stagger tuning in units of the overall bandwidth ``B``.

    Returns ``(offsets, widths)``: circuit ``k`` sits ``offsets[k] * B`` from the centre and is
    ``widths[k] * B`` wide at -3 dB (``offset = cos(theta_k)/2``, ``width = sin(theta_k)``,
    ``theta_k = (2k-1) pi/(2n)``), ordered from the lowest to the highest frequency.
    """
    if int(n) != n or not 1 <= n <= MAX_STAGGER:
        raise BadParameterError(f"stagger plans are made for 1..{MAX_STAGGER} circuits, got {n}")
    k = np.arange(1, n + 1)
    theta = (2 * k - 1) * np.pi / (2 * n)
    offsets = 0.5 * np.cos(theta)
    widths = np.sin(theta)
    offsets = np.where(np.abs(offsets) < 1e-15, 0.0, offsets)
    order = np.argsort(offsets)
    return offsets[order], widths[order]


def narrowband_response_db(offset_hz: np.ndarray | float, n: int, bandwidth_hz: float,
                           normalise: bool = True) -> np.ndarray:
    """Narrowband (lowpass-equivalent) response of the maximally flat stagger plan, dB.

    Each circuit contributes ``1/(1 + ((d - d_k)/a_k)^2)`` with ``d`` the offset from the
    centre, ``d_k`` its offset and ``a_k`` its half-bandwidth. With ``normalise`` the product is
    divided by its value at the centre, which makes it the Butterworth ``1/(1 + (2d/B)^(2n))``.
    """
    d = np.asarray(offset_hz, dtype=np.float64)
    offs, widths = stagger_normalised(n)
    out = np.zeros(d.shape)
    centre = 0.0
    for o, w in zip(offs * bandwidth_hz, widths * bandwidth_hz / 2.0):
        out = out - 10.0 * np.log10(1.0 + ((d - o) / w) ** 2)
        centre -= 10.0 * np.log10(1.0 + (o / w) ** 2)
    return out - centre if normalise else out


@dataclass(frozen=True)
class StaggerPlan:
    """A maximally flat stagger plan for a target band, checked with the exact response.

    Frequencies in Hz, levels in dB. ``edge_atten_db`` is the exact cascade's level at the
    target's lower and upper edges relative to the cascade's own peak (the narrowband form gives
    -3.01 dB at both); ``ripple_db`` is max minus min over the target; ``cascade_peak_db`` is the
    exact cascade's peak relative to every circuit at its own resonance (0 dB for one circuit).
    ``peak_gain_change_db`` compares the plan's peak gain with the measured circuits' at a fixed
    gain-bandwidth product per stage (None when no measured circuits were given).
    """

    n_circuits: int
    center_hz: float
    center_kind: str
    bandwidth_hz: float
    target_hz: tuple[float, float]
    stages: tuple[TunedStage, ...]
    offsets_hz: tuple[float, ...]
    edge_atten_db: tuple[float, float]
    ripple_db: float
    worst_db: float
    cascade_peak_db: float
    narrowband_cascade_peak_db: float
    peak_gain_change_db: float | None

    def response_db(self, freq_hz: np.ndarray | float, relative_to_peak: bool = True) -> np.ndarray:
        """Exact response of the plan in dB (relative to its own peak by default)."""
        out = cascade_response_db(freq_hz, self.stages, 0.0)
        return out - self.cascade_peak_db if relative_to_peak else out

    def to_dict(self) -> dict:
        """JSON-ready dict; ``stages`` as ``{f0_hz, q, bw_hz}``."""
        return {
            "n_circuits": self.n_circuits,
            "center_hz": self.center_hz,
            "center_kind": self.center_kind,
            "bandwidth_hz": self.bandwidth_hz,
            "target_hz": list(self.target_hz),
            "stages": [s.to_dict() for s in self.stages],
            "offsets_hz": list(self.offsets_hz),
            "edge_atten_db": list(self.edge_atten_db),
            "ripple_db": self.ripple_db,
            "worst_db": self.worst_db,
            "cascade_peak_db": self.cascade_peak_db,
            "narrowband_cascade_peak_db": self.narrowband_cascade_peak_db,
            "peak_gain_change_db": self.peak_gain_change_db,
        }


def _peak_db(stages: Sequence[TunedStage]) -> float:
    f0s = np.array([s.f0_hz for s in stages])
    widths = np.array([s.bw_hz for s in stages])
    grid = np.linspace(f0s.min() - widths.max(), f0s.max() + widths.max(), 40001)
    grid = grid[grid > 0]
    return float(np.max(cascade_response_db(grid, stages, 0.0)))


def peak_gain_change_db(new_stages: Sequence[TunedStage], old_stages: Sequence[TunedStage]) -> float:
    """Peak-gain change (dB) from ``old_stages`` to ``new_stages`` at fixed gain-bandwidth per stage.

    ``sum 20 log10(BW_old,k) - sum 20 log10(BW_new,k) + peak_new - peak_old``, where ``peak`` is
    the exact cascade peak relative to every circuit at resonance. The circuit counts must match.
    """
    if len(new_stages) != len(old_stages) or not new_stages:
        raise BadParameterError(
            f"gain comparison needs the same number of circuits ({len(new_stages)} vs {len(old_stages)})"
        )
    width_term = sum(20.0 * np.log10(o.bw_hz) for o in old_stages) - sum(
        20.0 * np.log10(s.bw_hz) for s in new_stages
    )
    return float(width_term + _peak_db(new_stages) - _peak_db(old_stages))


def _plan_from(center: float, bandwidth: float, target: tuple[float, float], n_circuits: int,
               measured_stages: Sequence[TunedStage] | None) -> StaggerPlan:
    lo, hi = target
    offs, widths = stagger_normalised(n_circuits)
    stages = []
    for o, w in zip(offs, widths):
        f0 = center + o * bandwidth
        stages.append(TunedStage(f0_hz=float(f0), q=float(f0 / (w * bandwidth))))
    peak = _peak_db(stages)
    grid = np.linspace(lo, hi, 4001)
    resp = cascade_response_db(grid, stages, 0.0) - peak
    edges = tuple(float(v) for v in cascade_response_db(np.array([lo, hi]), stages, 0.0) - peak)
    change = None
    if measured_stages is not None:
        change = peak_gain_change_db(stages, measured_stages)
    return StaggerPlan(
        n_circuits=int(n_circuits),
        center_hz=float(center),
        center_kind="geometric",
        bandwidth_hz=float(bandwidth),
        target_hz=(lo, hi),
        stages=tuple(stages),
        offsets_hz=tuple(float(o * bandwidth) for o in offs),
        edge_atten_db=(edges[0], edges[1]),
        ripple_db=float(resp.max() - resp.min()),
        worst_db=float(resp.min()),
        cascade_peak_db=peak,
        narrowband_cascade_peak_db=float(np.sum(10.0 * np.log10(widths ** 2))),
        peak_gain_change_db=change,
    )


def design_stagger(
    target_hz: tuple[float, float],
    n_circuits: int,
    measured_stages: Sequence[TunedStage] | None = None,
    *,
    refine: bool = False,
) -> StaggerPlan:
    """Maximally flat stagger plan whose overall -3 dB width equals the target's width.

    Parameters
    ----------
    target_hz : (float, float)
        Target band edges, Hz.
    n_circuits : int
        Number of tuned circuits (the same as the preamp has).
    measured_stages : sequence of TunedStage, optional
        The fitted circuits of the preamp; when given, the plan's peak-gain change at a fixed
        gain-bandwidth product per stage is computed.
    refine : bool
        Keep the maximally flat proportions but shift the centre and scale the bandwidth
        (numerically, a 2 x 2 least-squares solve) until the *exact* response is -3.01 dB at
        both target edges; ``center_kind`` becomes ``"refined"``.

    Returns
    -------
    StaggerPlan
        Circuits at ``f_c + offset_k`` with ``Q_k = f_k / BW_k``; exact edge attenuation and
        ripple over the target.
    """
    lo, hi = check_target(*target_hz)
    plan = _plan_from(float(np.sqrt(lo * hi)), hi - lo, (lo, hi), n_circuits, measured_stages)
    if not refine:
        return plan
    half_power = -10.0 * np.log10(2.0)

    def miss(p: np.ndarray) -> np.ndarray:
        trial = _plan_from(plan.center_hz * (1.0 + p[0]), plan.bandwidth_hz * np.exp(p[1]), (lo, hi), n_circuits, None)
        return np.asarray(trial.edge_atten_db) - half_power

    res = least_squares(miss, np.zeros(2), bounds=([-0.2, -1.0], [0.2, 1.0]), xtol=1e-12, ftol=1e-12)
    refined = _plan_from(plan.center_hz * (1.0 + res.x[0]), plan.bandwidth_hz * np.exp(res.x[1]), (lo, hi),
                         n_circuits, measured_stages)
    return replace(refined, center_kind="refined")
