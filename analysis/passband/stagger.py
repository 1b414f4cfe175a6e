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

Exact bandpass design
---------------------
The plan itself is the maximally flat (Butterworth) bandpass by the exact lowpass-to-bandpass
transform ``S = (s^2 + w0^2) / (B s)`` with ``w0 = 2 pi sqrt(f_lo f_hi)`` and ``B = 2 pi (f_hi -
f_lo)``: each Butterworth pole ``S_k = exp(j pi (2k + n - 1) / (2n))`` gives the bandpass poles
``s = (S_k B +- sqrt(S_k^2 B^2 - 4 w0^2)) / 2``; the ``n`` poles in the upper half plane are the
``n`` tuned circuits, each with ``f0 = |s| / 2 pi`` and loaded ``Q = |s| / (2 |Re s|)``. A tuned
circuit is a bandpass section ``s / (s^2 + s w0/Q + w0^2)``, so the cascade's magnitude is the
Butterworth bandpass ``1 / (1 + ((f^2 - f0^2) / (f (f_hi - f_lo)))^(2n))`` exactly: -3.01 dB at
both target edges. For 88-100 MHz and three circuits this gives 88.753, 93.808 and 99.151 MHz
with Q 15.66, 7.82 and 15.66 (the check in the tests). The narrowband form above is kept for
its published offsets and widths.

Gain cost with passive tuned circuits
-------------------------------------
A VHF preamp's selectivity comes from passive tuned circuits. A circuit of unloaded Q ``Qu``
loaded to ``Ql`` passes ``1 - Ql/Qu`` of the voltage at resonance: insertion loss
``IL = -20 log10(1 - Ql/Qu)`` dB (standard filter result). A staggered cascade also loses at
its peak because no circuit is at resonance there (the product of the normalised circuit
responses, computed exactly). ``Qu`` is the user's figure, or an assumed 150 (a typical air-core
VHF coil; common practice, no source) flagged in the plan.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from analysis.errors import BadParameterError
from analysis.passband.fit import TunedStage, cascade_response_db, check_target

#: Largest number of circuits a plan is made for.
MAX_STAGGER = 6
#: Unloaded Q assumed for a VHF tuned circuit when none is given (common practice, no source).
ASSUMED_Q_UNLOADED = 150.0


def insertion_loss_db(q_loaded: float, q_unloaded: float) -> float:
    """Insertion loss at resonance of a tuned circuit loaded to ``q_loaded``, ``-20 log10(1 - Ql/Qu)`` dB."""
    if not (0 < q_loaded < q_unloaded):
        raise BadParameterError(
            f"a circuit loaded to Q {q_loaded:.3g} needs an unloaded Q above it (got {q_unloaded:.3g}); "
            "give the coil's unloaded Q"
        )
    return float(-20.0 * np.log10(1.0 - q_loaded / q_unloaded))


def butterworth_bandpass_stages(target_hz: tuple[float, float], n: int) -> tuple[TunedStage, ...]:
    """The ``n`` tuned circuits of the maximally flat bandpass for ``target_hz`` (exact transform,
    see the module notes), lowest frequency first. Pure and cheap (a live display may call it)."""
    if int(n) != n or not 1 <= n <= MAX_STAGGER:
        raise BadParameterError(f"stagger plans are made for 1..{MAX_STAGGER} circuits, got {n}")
    lo, hi = check_target(*target_hz)
    w0 = 2.0 * np.pi * np.sqrt(lo * hi)
    bw = 2.0 * np.pi * (hi - lo)
    k = np.arange(1, n + 1)
    lp = np.exp(1j * np.pi * (2 * k + n - 1) / (2 * n))  # left-half-plane Butterworth poles
    disc = np.sqrt(lp * lp * bw * bw - 4.0 * w0 * w0 + 0j)
    poles = np.concatenate([(lp * bw + disc) / 2.0, (lp * bw - disc) / 2.0])
    upper = poles[poles.imag > 0]
    stages = [TunedStage(f0_hz=float(abs(p) / (2 * np.pi)), q=float(abs(p) / (2.0 * abs(p.real)))) for p in upper]
    return tuple(sorted(stages, key=lambda st: st.f0_hz))


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
    ``insertion_loss_db`` is each circuit's loss at resonance for unloaded Q ``q_unloaded``
    (``q_unloaded_assumed``: not given, :data:`ASSUMED_Q_UNLOADED` used);
    ``peak_gain_change_db`` compares the plan's peak gain with the measured circuits' for passive
    circuits of that unloaded Q (None when no measured circuits were given).
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
    q_unloaded: float = ASSUMED_Q_UNLOADED
    q_unloaded_assumed: bool = True
    insertion_loss_db: tuple[float, ...] = ()

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
            "q_unloaded": self.q_unloaded,
            "q_unloaded_assumed": self.q_unloaded_assumed,
            "insertion_loss_db": list(self.insertion_loss_db),
        }


def _peak_db(stages: Sequence[TunedStage]) -> float:
    f0s = np.array([s.f0_hz for s in stages])
    widths = np.array([s.bw_hz for s in stages])
    grid = np.linspace(f0s.min() - widths.max(), f0s.max() + widths.max(), 40001)
    grid = grid[grid > 0]
    return float(np.max(cascade_response_db(grid, stages, 0.0)))


def peak_gain_change_db(new_stages: Sequence[TunedStage], old_stages: Sequence[TunedStage],
                        q_unloaded: float = ASSUMED_Q_UNLOADED) -> float:
    """Peak-gain change (dB) from ``old_stages`` to ``new_stages`` built from passive circuits of
    unloaded Q ``q_unloaded``: ``sum IL_old - sum IL_new + peak_new - peak_old``, with ``IL`` the
    insertion loss of each circuit (:func:`insertion_loss_db`) and ``peak`` the exact cascade peak
    relative to every circuit at resonance. The circuit counts must match.
    """
    if len(new_stages) != len(old_stages) or not new_stages:
        raise BadParameterError(
            f"gain comparison needs the same number of circuits ({len(new_stages)} vs {len(old_stages)})"
        )
    loss_old = sum(insertion_loss_db(o.q, q_unloaded) for o in old_stages)
    loss_new = sum(insertion_loss_db(s.q, q_unloaded) for s in new_stages)
    return float(loss_old - loss_new + _peak_db(new_stages) - _peak_db(old_stages))


def _plan_from(stages: Sequence[TunedStage], center: float, bandwidth: float, target: tuple[float, float],
               measured_stages: Sequence[TunedStage] | None, q_unloaded: float | None) -> StaggerPlan:
    lo, hi = target
    n_circuits = len(stages)
    _offs, widths = stagger_normalised(n_circuits)
    peak = _peak_db(stages)
    grid = np.linspace(lo, hi, 4001)
    resp = cascade_response_db(grid, stages, 0.0) - peak
    edges = tuple(float(v) for v in cascade_response_db(np.array([lo, hi]), stages, 0.0) - peak)
    qu = ASSUMED_Q_UNLOADED if q_unloaded is None else float(q_unloaded)
    change = None
    if measured_stages is not None and all(st.q < qu for st in list(stages) + list(measured_stages)):
        change = peak_gain_change_db(stages, measured_stages, qu)
    return StaggerPlan(
        n_circuits=int(n_circuits),
        center_hz=float(center),
        center_kind="geometric",
        bandwidth_hz=float(bandwidth),
        target_hz=(lo, hi),
        stages=tuple(stages),
        offsets_hz=tuple(float(st.f0_hz - center) for st in stages),
        edge_atten_db=(edges[0], edges[1]),
        ripple_db=float(resp.max() - resp.min()),
        worst_db=float(resp.min()),
        cascade_peak_db=peak,
        narrowband_cascade_peak_db=float(np.sum(10.0 * np.log10(widths ** 2))),
        peak_gain_change_db=change,
        q_unloaded=qu,
        q_unloaded_assumed=q_unloaded is None,
        insertion_loss_db=tuple(insertion_loss_db(st.q, qu) if st.q < qu else float("inf") for st in stages),
    )


def design_stagger(
    target_hz: tuple[float, float],
    n_circuits: int,
    measured_stages: Sequence[TunedStage] | None = None,
    *,
    q_unloaded: float | None = None,
) -> StaggerPlan:
    """Maximally flat (Butterworth) stagger plan whose -3 dB edges are the target's edges.

    Parameters
    ----------
    target_hz : (float, float)
        Target band edges, Hz.
    n_circuits : int
        Number of tuned circuits (the same as the preamp has).
    measured_stages : sequence of TunedStage, optional
        The fitted circuits of the preamp; when given, the plan's peak-gain change with passive
        circuits of unloaded Q ``q_unloaded`` is computed.
    q_unloaded : float, optional
        Unloaded Q of the coils; default :data:`ASSUMED_Q_UNLOADED`, flagged as assumed.

    Returns
    -------
    StaggerPlan
        Circuits of the exact bandpass transform (:func:`butterworth_bandpass_stages`), checked
        with the exact circuit response (edge attenuation, ripple) and their insertion loss.
    """
    lo, hi = check_target(*target_hz)
    stages = butterworth_bandpass_stages((lo, hi), n_circuits)
    return _plan_from(stages, float(np.sqrt(lo * hi)), hi - lo, (lo, hi), measured_stages, q_unloaded)
