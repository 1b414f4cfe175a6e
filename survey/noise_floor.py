"""Local noise floor of a hop: a smooth curve fitted to the log-PSD under the signals.

Split from :mod:`survey.dsp`, which re-exports :func:`local_noise_floor` and
:func:`log_average_bias_db` (``from survey.dsp import local_noise_floor`` keeps working).
The method, its tuning and its measured bias are described in :func:`local_noise_floor`.

References
----------
.. [1] P. D. Welch, "The use of fast Fourier transform for the estimation of power spectra: a
   method based on time averaging over short, modified periodograms," IEEE Trans. Audio
   Electroacoust., vol. AU-15, no. 2, pp. 70-73, 1967.
.. [2] P. H. C. Eilers and H. F. M. Boelens, "Baseline correction with asymmetric least squares
   smoothing," Leiden University Medical Centre report, 2005.
.. [3] P. H. C. Eilers, "A perfect smoother," Anal. Chem., vol. 75, pp. 3631-3636, 2003
   (Whittaker smoother solved as a banded linear system).
.. [4] J. R. Carson, "Notes on the theory of modulation," Proc. IRE, vol. 10, pp. 57-64, 1922
   (occupied bandwidth of FM, ``2 (deviation + highest modulating frequency)``).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import Sequence

import numpy as np
import scipy.special

from survey.errors import PlanError
from survey.floor_rows import fit_rows, occupied_rows, whittaker_rows
from survey.floor_shape import FloorShape, fit_floor_shape
from survey.units import db_to_ratio, ratio_to_db

_DB_PER_NEPER = 10.0 / np.log(10.0)  # 10 log10(e): converts a natural-log variance/mean to dB
_ALS_ROUNDS = 4  # asymmetric least-squares reweightings for the starting envelope (at most)
_MASK_ROUNDS = 8  # occupancy-mask refits (at most)
_OCCUPIED_SEEN: dict = {}  # recent answers of _occupied (read-only arrays), oldest first


@lru_cache(maxsize=16)
def _hann64(fft_size: int) -> np.ndarray:
    """Periodic Hann window (Harris 1978), float64; the same as ``scipy.signal.get_window('hann')``."""
    n = np.arange(fft_size, dtype=np.float64)
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * n / fft_size)


def log_average_bias_db(effective_averages: float) -> float:
    """Mean of ``10 log10(chi2(2K)/(2K))`` in dB: the bias of averaging log-periodogram values.

    ``E[ln(chi2(nu)/nu)] = psi(nu/2) - ln(nu/2)`` (digamma ``psi``), negative: about
    ``-4.343/(2K)`` dB for large ``K`` (-0.019 dB at K = 117; -2.5 dB at K = 1).
    """
    k = float(effective_averages)
    return float(_DB_PER_NEPER * (scipy.special.digamma(k) - np.log(k)))


def _stiffness(period_hz: float, step_hz: float) -> float:
    """Whittaker ``lam`` whose half-power period is ``period_hz`` on a grid of ``step_hz``.

    The smoother's transfer function is ``1 / (1 + lam (2 sin(w/2))^4)``, half power at
    ``w = lam^(-1/4)`` radians per point.
    """
    return float((period_hz / step_hz / (2.0 * np.pi)) ** 4)


def _penalty_bands(curve: np.ndarray, tension: np.ndarray) -> np.ndarray:
    """Upper banded form of ``D2' diag(curve) D2 + D1' diag(tension) D1`` for ``solveh_banded``.

    ``D1``, ``D2`` are first- and second-difference matrices on ``n`` points; ``curve`` has
    ``n - 2`` and ``tension`` ``n - 1`` per-row stiffnesses.
    """
    n = curve.size + 2
    ab = np.zeros((3, n))
    ab[2, :-2] += curve
    ab[2, 1:-1] += 4.0 * curve
    ab[2, 2:] += curve
    ab[1, 1:-1] -= 2.0 * curve
    ab[1, 2:] -= 2.0 * curve
    ab[0, 2:] += curve
    ab[2, :-1] += tension
    ab[2, 1:] += tension
    ab[1, 1:] -= tension
    return ab


def _whittaker(y: np.ndarray, weight: np.ndarray, penalty: np.ndarray) -> np.ndarray:
    """Minimise ``sum w (y - z)^2 + z' P z`` for the banded penalty ``P`` (Whittaker [3]_).

    Solved with LAPACK's banded Cholesky (``pbsv``, as ``scipy.linalg.solveh_banded`` does,
    without its per-call checks); a tiny ridge keeps the system definite where no weight is.
    One row of :func:`survey.floor_rows.whittaker_rows`.
    """
    return whittaker_rows(y[np.newaxis], np.broadcast_to(weight, y.shape)[np.newaxis], penalty)[0]


@lru_cache(maxsize=32)
def _group_variance_factor(fft_size: int, group: int) -> float:
    """Variance of a mean of ``group`` adjacent bins relative to one bin.

    Adjacent bins of a Hann-windowed periodogram are correlated; for white Gaussian noise the
    power correlation at lag ``j`` is ``|W2(j)|^2 / W2(0)^2`` with ``W2`` the DFT of ``w^2``
    (4/9 at lag 1, 1/36 at lag 2 for Hann).
    """
    w2 = _hann64(fft_size) ** 2
    rho2 = np.abs(np.fft.fft(w2)[1:group]) ** 2 / np.sum(w2) ** 2
    lags = np.arange(1, group)
    return float((1.0 + 2.0 * np.sum((1.0 - lags / group) * rho2)) / group)


def group_variance_factor(fft_size: int, group: int) -> float:
    """Variance of the mean of ``group`` adjacent Hann-periodogram bins relative to one bin
    (white Gaussian noise; see :func:`_group_variance_factor`)."""
    return _group_variance_factor(int(fft_size), int(group))


def _occupied(resid_db: np.ndarray, sigma_db: float, usable: np.ndarray, core_sigma: float,
              skirt_sigma: float, reach: int, skirt_max: int, carrier_db: float, peak_half: int,
              occupancy: int, occupancy_per_db: float, body_half: int = 0) -> np.ndarray:
    """Groups holding signal, from the residual above the current floor (signals only add power).

    1. Cores: groups more than ``core_sigma`` sigmas above the floor.
    2. Skirts: a core claims the contiguous groups whose 3-group running mean stays above
       ``skirt_sigma`` sigmas of that mean, but at most ``skirt_max`` groups beyond a core (a
       floor that bends away from the fit must not be swallowed by a neighbouring station).
    3. Carriers: cores whose residual is the largest within ``peak_half`` groups and whose
       running mean is at least ``carrier_db`` above the floor (a CW line one group wide counts). A claim holds only within ``occupancy`` groups (plus
       ``occupancy_per_db`` per dB of the carrier's height above 10 dB) of a carrier: an FM
       broadcast signal occupies about +-90 to +-128 kHz (Carson's rule [4]_: 180-256 kHz), its
       skirts a little more when strong. A shelf of noise 1 dB above a too-straight fit holds no
       carrier and is left to the fit.
    With ``body_half`` > 0 each carrier also claims ``body_half`` groups (grown like the
    occupancy with its height) either side, skirt test or not.
    4. Everything claimed grows by ``reach`` groups.
    """
    key = (np.ascontiguousarray(resid_db, dtype=np.float64).tobytes(), float(sigma_db),
           np.ascontiguousarray(usable, dtype=bool).tobytes(), core_sigma, skirt_sigma, reach, skirt_max, carrier_db,
           peak_half, occupancy, occupancy_per_db, body_half)
    found = _OCCUPIED_SEEN.get(key)
    if found is None:  # a pure function of its arguments: the same residual asked twice is answered once
        found = occupied_rows(resid_db[np.newaxis], sigma_db, usable, core_sigma, skirt_sigma, reach, skirt_max,
                              carrier_db, peak_half, occupancy, occupancy_per_db, body_half)[0]
        found.setflags(write=False)
        _OCCUPIED_SEEN[key] = found
        while len(_OCCUPIED_SEEN) > 256:
            _OCCUPIED_SEEN.pop(next(iter(_OCCUPIED_SEEN)))
    return found.copy()


@dataclass(frozen=True)
class _Layout:
    """Grouping and smoother tables of one (bin grid, usable mask, tuning): built once, reused."""

    lo: int
    hi: int
    group: int
    pad: int
    mask_bins: np.ndarray  # (n_groups, group) float64, 1 where the bin is usable
    count: np.ndarray
    has_data: np.ndarray
    weight: np.ndarray
    centers_hz: np.ndarray
    step_hz: float
    penalty: np.ndarray
    stiff: np.ndarray
    variance_factor: float


@lru_cache(maxsize=32)
def _layout(n_bins: int, first_hz: float, bin_hz: float, mask_bytes: bytes, group_hz: float,
            smooth_hz: float, tension_hz: float, envelope_stiffness: float, edge_fraction: float,
            edge_limber: float) -> _Layout:
    mask = np.frombuffer(mask_bytes, dtype=bool)
    idx = np.flatnonzero(mask)
    lo, hi = int(idx[0]), int(idx[-1]) + 1
    group = max(1, int(round(group_hz / bin_hz)))
    n_groups = -(-(hi - lo) // group)
    pad = n_groups * group - (hi - lo)
    mask_bins = np.pad(mask[lo:hi].astype(np.float64), (0, pad)).reshape(n_groups, group)
    count = mask_bins.sum(axis=1)
    centers = first_hz + (lo + np.arange(n_groups) * group + (group - 1) / 2.0) * bin_hz
    step_hz = group * bin_hz
    curve = _stiffness(smooth_hz, step_hz)
    tension = curve * (step_hz / tension_hz) ** 2  # decay length of a bridge's slope
    # the receiver's anti-alias roll-off lives near the hop edges: let the floor bend there
    limber = np.where(np.abs(centers) > edge_fraction * bin_hz * n_bins, edge_limber, 1.0)
    curve_rows = curve * np.minimum(np.minimum(limber[:-2], limber[1:-1]), limber[2:])
    tension_rows = tension * np.minimum(limber[:-1], limber[1:])
    penalty = _penalty_bands(curve_rows, tension_rows)
    for a in (mask_bins, count, centers, penalty):
        a.setflags(write=False)
    return _Layout(lo, hi, group, pad, mask_bins, count, count > 0, count / group, centers, step_hz,
                   penalty, envelope_stiffness * penalty, _group_variance_factor(n_bins, group))


@lru_cache(maxsize=64)
def _sigma_and_bias_db(effective_averages: float, variance_factor: float) -> tuple[float, float]:
    sigma_bin_db = _DB_PER_NEPER * np.sqrt(float(scipy.special.polygamma(1, effective_averages)))
    return float(sigma_bin_db * np.sqrt(variance_factor)), log_average_bias_db(effective_averages)


@dataclass(frozen=True)
class HopGroups:
    """The grouped log-PSD of one hop as :func:`local_noise_floor` fitted it (for a sweep fit).

    ``centers_hz`` are group centres relative to the hop centre; ``y`` the group means (dB, the
    biased log-PSD mean); ``fit_db`` the hop's own floor (dB, bias removed); ``lo``/``hi`` the
    bin span the groups cover.
    """

    centers_hz: np.ndarray
    y: np.ndarray
    weight: np.ndarray
    has_data: np.ndarray
    sigma_db: float
    bias_db: float
    occupancy_args: tuple
    fit_db: np.ndarray
    lo: int
    hi: int


def local_noise_floor(
    offsets_hz: np.ndarray,
    psd: np.ndarray,
    usable_mask: np.ndarray,
    *,
    effective_averages: float,
    smooth_hz: float = 150_000.0,
    tension_hz: float = 80_000.0,
    group_hz: float = 8_000.0,
    core_sigma: float = 4.0,
    skirt_sigma: float = 1.0,
    reach_hz: float = 8_000.0,
    asymmetry: float = 0.01,
    envelope_stiffness: float = 1.0,
    edge_fraction: float = 0.38,
    edge_limber: float = 0.01,
    skirt_max_hz: float = 24_000.0,
    carrier_db: float = 1.4,
    peak_hz: float = 40_000.0,
    occupancy_hz: float = 140_000.0,
    occupancy_per_db_hz: float = 2_000.0,
    body_hz: float = 90_000.0,
    blind_skirt_db: float = 0.25,
    groups_out: list | None = None,
) -> np.ndarray:
    """Local noise-floor density per bin, FS^2/Hz, from a smooth fit to the log-PSD below signals.

    Method
    ------
    1. ``y = 10 log10(psd)`` over the span of usable bins is averaged in groups of about
       ``group_hz`` (unusable bins, e.g. the DC guard, get no weight). The group standard
       deviation ``sigma`` follows from ``K_eff`` (the trigamma function gives the variance of
       ``ln chi2(2K)/(2K)``) and the Hann correlation of adjacent bins; it is not estimated
       from the data.
    2. Start: asymmetric least squares [2]_, a Whittaker smoother [3]_ refitted with weight
       ``asymmetry`` above it and ``1 - asymmetry`` below, which slides under the signals.
    3. Repeat until the classification settles: mark groups holding signal from the residual
       above the current floor (see :func:`_occupied`: cores above ``core_sigma`` sigmas, grown
       through their skirts while a 3-group running mean stays above ``skirt_sigma`` of its
       sigma but by at most ``skirt_max_hz``, kept only within ``occupancy_hz`` (+
       ``occupancy_per_db_hz`` per dB above 10 dB) of a carrier at least ``carrier_db`` high,
       then widened by ``reach_hz``; with few averages, when the skirt test cannot see a
       skirt ``blind_skirt_db`` above the floor (``skirt_sigma sigma / sqrt(3)`` larger than it:
       K_eff below about 25 at 8 kHz groups), each carrier also claims its body, ``body_hz``
       (+ ``occupancy_per_db_hz`` per dB above 10 dB) either side: the +-90 kHz of a mono FM
       broadcast signal by Carson's rule [4]_, whose outer sidebands lie within the scatter
       of 5 averages and otherwise raise the floor under the station, 0.1-1 dB at K_eff = 5
       (measured: tests/test_census_bias.py); refit the smoother with equal weights on the other groups.
       Nothing is rejected for lying *below* the floor: signals only ever add power. The
       smoother penalises curvature on a scale ``smooth_hz`` (it follows a tuned-circuit peak)
       and slope on a scale ``tension_hz``, so occupied stretches are bridged by a gently
       curved line that keeps part of the slope on both sides, and an occupied hop edge is
       continued with a slope that decays over ``tension_hz``. Beyond ``edge_fraction * fs``
       from the centre both penalties are scaled by ``edge_limber``: the receiver's anti-alias
       roll-off lives there, and the floor must be free to fall with it.
    4. Bias correction: the fit estimates the mean of the log-periodogram, which for Gaussian
       noise lies :func:`log_average_bias_db` (``10 log10(e) (psi(K_eff) - ln K_eff)``) below
       the log of the true density [1]_; this is removed.

    The grouping and penalty tables depend only on the bin grid, the usable mask and the tuning,
    and are cached (one build per hop geometry of a sweep).

    Bias and limits (measured on simulated hops like those of tests/test_dsp.py: 0.1 s at
    2.4 MS/s, FFT 2048, 200 kHz channels, half of them holding FM signals 180-256 kHz wide at
    C/N 10-40 dB, 12 layouts per floor shape): on pure white noise the mean error is below
    0.02 dB for K_eff from 4 to 117. Channel floor within 0.4 dB of truth on a flat floor and
    behind a Q = 40 tuned circuit; behind three tuned circuits of Q 36 (over 10 dB of floor
    change within 1.5 MHz) within 0.45 dB, except where three adjacent stations cover the
    resonance peak itself (bridged too straight: up to 0.7 dB low). On the simulated crowded
    band of tests/test_simulated_source.py (100 kHz raster, 26 stations, seeds 21-26, with and
    without the sharp preamp: 216 hops, 2472 channel readings) the largest error was 0.7 dB
    (C/N 0.84 dB), for one channel at a hop edge whose station covers the edge (floor
    extrapolated from one side); median absolute error 0.04 dB. Skirt power
    below the hysteresis threshold is kept and raises the floor locally (a few hundredths of a
    dB for C/N above 35 dB).

    5. A sweep-wide floor (:func:`sweep_floors`) can replace the hop's own: ``groups_out``
       receives the hop's groups (:class:`HopGroups`) for it.

    Parameters
    ----------
    offsets_hz, psd : numpy.ndarray
        Output of :func:`survey.dsp.averaged_psd`.
    usable_mask : numpy.ndarray
        Bins that may be used (:func:`survey.dsp.usable_bins`).
    effective_averages : float
        ``K_eff`` of the PSD (:func:`survey.dsp.welch_effective_averages`).
    smooth_hz, tension_hz, group_hz, core_sigma, skirt_sigma, reach_hz, asymmetry,
    envelope_stiffness, edge_fraction, edge_limber, skirt_max_hz, carrier_db, peak_hz,
    occupancy_hz, occupancy_per_db_hz, body_hz, blind_skirt_db : float
        Tuning of the steps above (defaults chosen on the simulated hops; keep them fixed
        for sweeps that are to be compared).

    Returns
    -------
    numpy.ndarray
        float64 density per bin, FS^2/Hz; valid on usable bins, interpolated across the DC
        guard, held one bin beyond the outer usable bins, NaN elsewhere.

    Raises
    ------
    PlanError
        No usable bin.
    """
    tuning = FloorTuning(
        smooth_hz=smooth_hz, tension_hz=tension_hz, group_hz=group_hz, core_sigma=core_sigma,
        skirt_sigma=skirt_sigma, reach_hz=reach_hz, asymmetry=asymmetry, envelope_stiffness=envelope_stiffness,
        edge_fraction=edge_fraction, edge_limber=edge_limber, skirt_max_hz=skirt_max_hz, carrier_db=carrier_db,
        peak_hz=peak_hz, occupancy_hz=occupancy_hz, occupancy_per_db_hz=occupancy_per_db_hz, body_hz=body_hz,
        blind_skirt_db=blind_skirt_db,
    )
    return local_noise_floors([offsets_hz], [psd], [usable_mask], effective_averages=[effective_averages],
                              tuning=tuning, groups_out=groups_out)[0]


@dataclass(frozen=True)
class FloorTuning:
    """The tuning of :func:`local_noise_floor` (same names, units and defaults), for
    :func:`local_noise_floors`."""

    smooth_hz: float = 150_000.0
    tension_hz: float = 80_000.0
    group_hz: float = 8_000.0
    core_sigma: float = 4.0
    skirt_sigma: float = 1.0
    reach_hz: float = 8_000.0
    asymmetry: float = 0.01
    envelope_stiffness: float = 1.0
    edge_fraction: float = 0.38
    edge_limber: float = 0.01
    skirt_max_hz: float = 24_000.0
    carrier_db: float = 1.4
    peak_hz: float = 40_000.0
    occupancy_hz: float = 140_000.0
    occupancy_per_db_hz: float = 2_000.0
    body_hz: float = 90_000.0
    blind_skirt_db: float = 0.25


def local_noise_floors(offsets_hz: Sequence[np.ndarray], psds: Sequence[np.ndarray], usable_masks: Sequence[np.ndarray],
                       *, effective_averages: Sequence[float], tuning: FloorTuning = FloorTuning(),
                       groups_out: list | None = None) -> list[np.ndarray]:
    """:func:`local_noise_floor` of many hops, fitted together (one result per hop, in order).

    Hops with the same bin grid, usable mask and ``K_eff`` (every hop of a sweep, as a rule)
    are fitted as rows of one array (:mod:`survey.floor_rows`): one banded solve per round for
    all of them, each hop's iterations stopping when its own classification settles, so each
    floor equals the hop's own :func:`local_noise_floor`.

    ``groups_out`` receives one :class:`HopGroups` per hop, in order.
    """
    n_hops = len(psds)
    if not (len(offsets_hz) == len(usable_masks) == len(effective_averages) == n_hops):
        raise ValueError("offsets_hz, psds, usable_masks and effective_averages need one entry per hop")
    t = tuning
    batches: dict = {}
    prepared = []
    for k in range(n_hops):
        mask = np.ascontiguousarray(usable_masks[k], dtype=bool).reshape(-1)
        if not mask.any():
            raise PlanError("no usable bins in the hop; raise usable_fraction or lower dc_guard_hz")
        offsets = offsets_hz[k]
        bin_hz = float(offsets[1] - offsets[0])
        layout_key = (mask.size, float(offsets[0]), bin_hz, mask.tobytes(), float(t.group_hz), float(t.smooth_hz),
                      float(t.tension_hz), float(t.envelope_stiffness), float(t.edge_fraction), float(t.edge_limber))
        lay = _layout(*layout_key)
        k_eff = float(effective_averages[k])
        prepared.append((lay, layout_key, k_eff))
        batches.setdefault((layout_key, k_eff), []).append(k)
    results: list = [None] * n_hops
    groups: list = [None] * n_hops
    for (layout_key, k_eff), members in batches.items():
        lay = prepared[members[0]][0]
        n_groups = lay.count.size
        tiny = float(np.finfo(np.float32).tiny)
        linear = np.ones((len(members), n_groups * lay.group))  # the padding bins read 0 dB and carry no weight
        for row, k in enumerate(members):
            np.maximum(np.asarray(psds[k][lay.lo : lay.hi], dtype=np.float64), tiny, out=linear[row, : lay.hi - lay.lo])
        y_bins = np.asarray(ratio_to_db(linear)).reshape(len(members), n_groups, lay.group)
        y = np.einsum("rij,ij->ri", y_bins, lay.mask_bins) / np.maximum(lay.count, 1.0)
        weight = np.broadcast_to(lay.weight, y.shape)
        sigma_db, bias_db = _sigma_and_bias_db(k_eff, lay.variance_factor)
        step_hz = lay.step_hz
        occupancy_args = (
            int(round(t.reach_hz / step_hz)), int(min(round(t.skirt_max_hz / step_hz), 10**6)), float(t.carrier_db),
            int(round(t.peak_hz / step_hz)), int(round(t.occupancy_hz / step_hz)), t.occupancy_per_db_hz / step_hz,
            int(round(t.body_hz / step_hz)) if t.skirt_sigma * sigma_db / np.sqrt(3.0) > t.blind_skirt_db else 0,
        )
        fitted = fit_rows(y, weight, lay.has_data, lay.stiff, lay.penalty, sigma_db, occupancy_args,
                          core_sigma=t.core_sigma, skirt_sigma=t.skirt_sigma, asymmetry=t.asymmetry,
                          als_rounds=_ALS_ROUNDS, mask_rounds=_MASK_ROUNDS)
        for row, k in enumerate(members):
            floor_db = fitted[row] - bias_db
            groups[k] = HopGroups(lay.centers_hz, y[row], lay.weight, lay.has_data, sigma_db, bias_db,
                                  occupancy_args, floor_db, lay.lo, lay.hi)
            out = np.full(np.shape(psds[k]), np.nan)
            span = slice(max(lay.lo - 1, 0), min(lay.hi + 1, out.size))
            out[span] = db_to_ratio(np.interp(offsets_hz[k][span], lay.centers_hz, floor_db))
            results[k] = out
    if groups_out is not None:
        groups_out.extend(groups)
    return results


def sweep_floors(groups: list[HopGroups], centers_hz: list[float], offsets_hz: list[np.ndarray], *,
                 smooth_hz: float = 150_000.0, tension_hz: float = 80_000.0, core_sigma: float = 4.0,
                 skirt_sigma: float = 1.0, rounds: int = 4, support_hz: float = 300_000.0,
                 shape_prior: bool = True, bridge_hz: float = 600_000.0) -> list[np.ndarray]:
    """One floor for the whole sweep, fitted on absolute frequency to every hop's free groups.

    Within the usable span the receiver's own response is flat (its anti-alias roll-off lies
    beyond it), so the floor is a function of absolute frequency alone, the same in every hop.
    The hops' group means (bias removed) go on one grid of the group step; the same smoother as
    :func:`local_noise_floor` (curvature on ``smooth_hz``, slope on ``tension_hz``) is fitted to
    the groups no hop marks as holding signal (a station just beyond one hop's usable edge
    raises that hop's edge groups with its skirt; the neighbouring hop sees its carrier), and
    each hop's groups are classified again against the sweep fit, ``rounds`` times at most. A
    hop edge crowded with stations is then bridged between the free stretches of both
    neighbouring hops instead of extrapolated.

    With ``shape_prior``, where the free floor of the whole sweep has a gap longer than
    ``bridge_hz`` (several consecutive channels occupied: 70-90 % of a band), the sweep fit is
    built on a tuned-preamp floor model (:mod:`survey.floor_shape`: receiver noise plus antenna
    and preamp noise through 1-3 identical tuned circuits, one flat term per hop for the 8-bit
    quantisation noise), fitted to the free groups with the occupied groups as upper bounds,
    and used only when it fits the free groups within their uncertainty (otherwise the plain
    smoother, as without it). A smoother bridging a resonance peak from its tails comes out
    several dB low; the model follows the peak.

    Each hop keeps its own floor (:func:`local_noise_floor`) where that is interpolated: where
    it has a free group of its own within ``support_hz`` on each side (a side beyond which no
    other hop reaches needs none). The sweep-wide floor replaces it only where it would be
    extrapolated or bridged over a longer occupied stretch.

    Returns per hop the floor density (FS^2/Hz) on its bins (``offsets_hz[k]``), NaN outside
    the span its groups cover, like :func:`local_noise_floor`.
    """
    if not groups:
        return []
    step = float(groups[0].centers_hz[1] - groups[0].centers_hz[0]) if groups[0].centers_hz.size > 1 else 8e3
    absolute = [c + g.centers_hz for c, g in zip(centers_hz, groups)]
    g0 = min(float(a.min()) for a in absolute)
    index = [np.rint((a - g0) / step).astype(np.int64) for a in absolute]
    n = int(max(int(i.max()) for i in index)) + 1
    curve = _stiffness(smooth_hz, step)
    penalty = _penalty_bands(np.full(max(n - 2, 0), curve), np.full(max(n - 1, 0), curve * (step / tension_hz) ** 2))
    grid = g0 + step * np.arange(n)
    free = []
    for g in groups:
        busy = _occupied(g.y - (g.fit_db + g.bias_db), g.sigma_db, g.has_data, core_sigma, skirt_sigma,
                         *g.occupancy_args)
        free.append(~busy & g.has_data)
    fit = None
    shape = None
    for _ in range(rounds):
        total = np.zeros(n)
        weight = np.zeros(n)
        busy_any = np.zeros(n, dtype=bool)  # a signal seen by any hop (e.g. a carrier beyond another's edge)
        for g, idx, f in zip(groups, index, free):
            busy_any[idx[g.has_data & ~f]] = True
        for g, idx, f in zip(groups, index, free):
            w = g.weight * (f & ~busy_any[idx])
            np.add.at(total, idx, w * (g.y - g.bias_db))
            np.add.at(weight, idx, w)
        if not weight.any() or n < 4:
            return [local_floor_from_db(off, g, g.fit_db) for off, g in zip(offsets_hz, groups)]
        y = np.where(weight > 0, total / np.maximum(weight, 1e-300), 0.0)
        fit = _whittaker(y, weight, penalty)
        adjust = None
        if shape_prior:
            fit, adjust, shape = _shaped(grid, y, weight, fit, penalty, groups, absolute, index, free, busy_any,
                                         bridge_hz, shape)
        changed = False
        for k, (g, a) in enumerate(zip(groups, absolute)):
            hop_fit = np.interp(a, grid, fit) + (0.0 if adjust is None else adjust[k])
            busy = _occupied(g.y - (hop_fit + g.bias_db), g.sigma_db, g.has_data, core_sigma, skirt_sigma,
                             *g.occupancy_args)
            now = ~busy & g.has_data
            changed |= bool((now != free[k]).any())
            free[k] = now
        if not changed:
            break
    lo_all = [float(a.min()) for a in absolute]
    hi_all = [float(a.max()) for a in absolute]
    out = []
    for k, (off, g, a) in enumerate(zip(offsets_hz, groups, absolute)):
        sweep_db = np.interp(a, grid, fit) + (0.0 if adjust is None else adjust[k])
        own_free = free[k] & ~_occupied(g.y - (g.fit_db + g.bias_db), g.sigma_db, g.has_data, core_sigma,
                                        skirt_sigma, *g.occupancy_args)  # free by both fits
        beyond_lo = any(lo < lo_all[k] for j, lo in enumerate(lo_all) if j != k)
        beyond_hi = any(hi > hi_all[k] for j, hi in enumerate(hi_all) if j != k)
        supported = _supported(a, own_free, support_hz, beyond_lo, beyond_hi)
        out.append(local_floor_from_db(off, g, np.where(supported, g.fit_db, sweep_db)))
    return out


def _shaped(grid: np.ndarray, y: np.ndarray, weight: np.ndarray, fit: np.ndarray, penalty: np.ndarray,
            groups: list[HopGroups], absolute: list[np.ndarray], index: list[np.ndarray],
            free: list[np.ndarray], busy_any: np.ndarray, bridge_hz: float,
            start: FloorShape | None, outlier_db: float = 0.5,
            residual_smooth_hz: float = 1_000_000.0) -> tuple[np.ndarray, list | None, FloorShape | None]:
    """The sweep fit on a tuned-preamp floor model (:mod:`survey.floor_shape`), where the free
    floor has a gap longer than ``bridge_hz``: the model plus a smoother fitted to the residuals
    of the free groups, so a long occupied stretch is bridged along the model's curve. A free
    group more than ``outlier_db`` + 3 sigma above the model, or free alone between occupied
    ones, is left out of that smoother (the skirts of two stations meeting between them; signals
    only add power).

    Returns the grid fit, per hop the model's offset from its mean flat term (dB, on the hop's
    groups) and the model (``start``: the previous round's, to start from), or ``(fit, None,
    None)`` unchanged where no gap is that long or the model does not fit the free groups
    within their uncertainty.
    """
    step = float(grid[1] - grid[0])
    where = np.flatnonzero(weight > 0)
    if where.size < 2 or np.max(np.diff(where)) * step <= bridge_hz:
        return fit, None, None
    floor_db, sigma_db, upper_db = [], [], []
    for g, idx, f in zip(groups, index, free):
        use = f & ~busy_any[idx]
        floor_db.append(np.where(use, g.y - g.bias_db, np.nan))
        sigma_db.append(g.sigma_db / np.sqrt(np.maximum(g.weight, 1e-6)))
        upper_db.append(np.where(g.has_data & ~f, g.y - g.bias_db, np.nan))
    shape = fit_floor_shape(absolute, floor_db, sigma_db, upper_db, grid, fit, start=start)
    if shape is None:
        return fit, None, None
    common = [shape.db(a) for a in absolute]
    adjust = [shape.db(a, k) - c for k, (a, c) in enumerate(zip(absolute, common))]
    total = np.zeros(grid.size)
    resid_w = np.zeros(grid.size)
    for g, idx, fl, sd, c, d in zip(groups, index, floor_db, sigma_db, common, adjust):
        resid = np.where(np.isfinite(fl), fl - c - d, np.inf)
        use = resid <= outlier_db + 3.0 * sd  # far above the model: a skirt, not floor (signals add power)
        use[1:-1] &= use[:-2] | use[2:]  # a lone free group between signals: the saddle of two skirts
        w = g.weight * use
        np.add.at(total, idx, w * np.where(use, resid, 0.0))
        np.add.at(resid_w, idx, w)
    r = np.where(resid_w > 0, total / np.maximum(resid_w, 1e-300), 0.0)
    n = grid.size
    curve = _stiffness(residual_smooth_hz, step)
    stiff = _penalty_bands(np.full(n - 2, curve), np.full(n - 1, curve * (step / residual_smooth_hz) ** 2))
    return shape.db(grid) + _whittaker(r, resid_w, stiff), adjust, shape


def _supported(centers_hz: np.ndarray, free: np.ndarray, reach_hz: float, beyond_lo: bool,
               beyond_hi: bool) -> np.ndarray:
    """Groups whose own floor is interpolated: a free group within ``reach_hz`` on each side (a
    side with no other hop beyond it needs none: the sweep knows no more there)."""
    where = centers_hz[free]
    if where.size == 0:
        return np.zeros(centers_hz.size, dtype=bool)
    i = np.searchsorted(where, centers_hz, side="right")
    below = np.where(i > 0, centers_hz - where[np.maximum(i - 1, 0)], np.inf)
    j = np.searchsorted(where, centers_hz, side="left")
    above = np.where(j < where.size, where[np.minimum(j, where.size - 1)] - centers_hz, np.inf)
    left_ok = (below <= reach_hz) | (not beyond_lo and np.isinf(below))
    right_ok = (above <= reach_hz) | (not beyond_hi and np.isinf(above))
    return left_ok & right_ok


def local_floor_from_db(offsets_hz: np.ndarray, g: HopGroups, floor_db: np.ndarray) -> np.ndarray:
    """Group floor values (dB) to a per-bin density (FS^2/Hz), as :func:`local_noise_floor` returns."""
    out = np.full(np.shape(offsets_hz), np.nan)
    span = slice(max(g.lo - 1, 0), min(g.hi + 1, out.size))
    out[span] = db_to_ratio(np.interp(offsets_hz[span], g.centers_hz, floor_db))
    return out
