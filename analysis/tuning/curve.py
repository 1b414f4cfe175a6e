"""Fast measures of a live gain curve, recomputed on every refresh while a preamp is aligned.

The curve is the preamp's gain against frequency, one point per measured channel, relative to a
reference measured with the same input and without the preamp:

* **noise input** (a noise source, or a termination): the gain is the rise in channel power,
  ``g_k = P_k - P_ref,k`` (dB). With a hot noise source of temperature ``Th`` the rise is
  ``(G (Th + Tp) + Tr) / (Th + Tr)`` (Friis 1944), which follows ``G(f)`` closely when ``Th`` is
  well above the receiver's ``Tr`` (ENR 15 dB: ``Th`` about 9500 K against a few hundred to a
  thousand K), and is compressed towards 0 dB far down the skirts where ``G Th`` falls to ``Tr``.
* **antenna input**: the gain of the signal-only power, ``g_k = (P_k - N_k) - (P - N)_ref,k`` (dB),
  only on channels where a station is received in both measurements; the curve has a point per
  station (the identity ``delta C/N = gain - noise rise`` of the comparison holds for it).

Every measure here is O(number of points) with numpy, so the display keeps its refresh rate:
the peak (a least-squares parabola in reciprocal linear power, ``1/|H|^2 = 1 + x^2`` near a
resonance, through the points within 1.5 dB of the highest one), the
-3 dB edges (linear interpolation in dB between the last point above and the first point below
``peak - 3.01 dB``, walking outward from the peak, so the edges bound the contiguous region around
the peak), the -3 dB width and the fraction of the target band within 3 dB of the peak (the curve
interpolated linearly in dB on a 1 kHz grid over the target).

Precision of one point (radiometer equation, Dicke 1946: relative standard deviation
``1/sqrt(B tau)`` of a noise-power estimate over bandwidth ``B`` and time ``tau``) is given by
:func:`radiometer_sigma_db`; the measured spread is in the README.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from analysis.errors import BadParameterError

#: The half-power level, dB (10 log10 2).
HALF_POWER_DB = 10.0 * np.log10(2.0)
#: Points within this of the highest one take part in the peak parabola, dB.
PEAK_FIT_DB = 1.5
#: Grid step of the target-coverage integral, Hz.
COVERAGE_STEP_HZ = 1_000.0


@dataclass(frozen=True)
class CurveMeasures:
    """What the display shows about one gain curve (Hz, dB).

    ``edge_low_hz``/``edge_high_hz`` are NaN when the curve stays within 3 dB of its peak up to
    the end of the measured span on that side (the edge lies beyond the span); ``width_hz`` is
    then NaN too. ``target_within_3db_fraction`` is the fraction of the target band where the
    curve is within 3.01 dB of its peak. ``stations_inside_hz`` are target stations between the
    edges (an edge beyond the span counts as open), ``stations_outside_hz`` the other target
    stations.
    """

    peak_hz: float
    peak_gain_db: float
    edge_low_hz: float
    edge_high_hz: float
    target_hz: tuple[float, float]
    target_within_3db_fraction: float
    min_gain_in_target_db: float
    stations_inside_hz: tuple[int, ...] = ()
    stations_outside_hz: tuple[int, ...] = ()

    @property
    def width_hz(self) -> float:
        """Width between the -3 dB edges, Hz (NaN when an edge lies beyond the span)."""
        return self.edge_high_hz - self.edge_low_hz

    @property
    def target_width_hz(self) -> float:
        """Width of the target band, Hz."""
        return self.target_hz[1] - self.target_hz[0]

    def to_dict(self) -> dict:
        """JSON-ready dict (NaN stays NaN; the caller's JSON writer turns it into null)."""
        return {
            "peak_hz": self.peak_hz,
            "peak_gain_db": self.peak_gain_db,
            "edge_low_hz": self.edge_low_hz,
            "edge_high_hz": self.edge_high_hz,
            "width_hz": self.width_hz,
            "target_hz": list(self.target_hz),
            "target_within_3db_fraction": self.target_within_3db_fraction,
            "min_gain_in_target_db": self.min_gain_in_target_db,
            "stations_inside_hz": [int(s) for s in self.stations_inside_hz],
            "stations_outside_hz": [int(s) for s in self.stations_outside_hz],
        }


def radiometer_sigma_db(bandwidth_hz: float, dwell_s: float) -> float:
    """Standard deviation (dB) of one noise-power estimate over ``bandwidth_hz`` and ``dwell_s``.

    Radiometer equation ``sigma_P / P = 1 / sqrt(B tau)`` (R. H. Dicke, Rev. Sci. Instrum. 17,
    268, 1946), in dB ``10 log10(e) / sqrt(B tau)`` for small ratios. A gain point is the
    difference of two such estimates: ``sqrt(2)`` times this when the reference is as short, less
    when the reference is averaged over several sweeps.
    """
    if bandwidth_hz <= 0 or dwell_s <= 0:
        raise BadParameterError(f"bandwidth {bandwidth_hz} Hz and dwell {dwell_s} s must both be positive")
    return float(10.0 * np.log10(np.e) / np.sqrt(bandwidth_hz * dwell_s))


def noise_gain_db(power_dbfs: np.ndarray, reference_power_dbfs: np.ndarray) -> np.ndarray:
    """Gain from a noise input: the rise of channel power over the reference, dB (NaN kept)."""
    return np.asarray(power_dbfs, dtype=np.float64) - np.asarray(reference_power_dbfs, dtype=np.float64)


def station_gain_db(power_dbfs: np.ndarray, noise_dbfs: np.ndarray, received: np.ndarray,
                    reference_power_dbfs: np.ndarray, reference_noise_dbfs: np.ndarray,
                    reference_received: np.ndarray) -> np.ndarray:
    """Gain from the stations on air: ratio of signal-only powers ``(P - N)``, dB.

    NaN where a channel is not received in both the current and the reference measurement.
    """
    def signal_db(p, n):
        p_lin = np.power(10.0, np.asarray(p, np.float64) / 10.0)
        n_lin = np.power(10.0, np.asarray(n, np.float64) / 10.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            return 10.0 * np.log10(p_lin - n_lin)

    both = np.asarray(received, bool) & np.asarray(reference_received, bool)
    with np.errstate(invalid="ignore"):
        g = signal_db(power_dbfs, noise_dbfs) - signal_db(reference_power_dbfs, reference_noise_dbfs)
    return np.where(both & np.isfinite(g), g, np.nan)


def _peak(f: np.ndarray, g: np.ndarray) -> tuple[int, float, float]:
    """Index of the highest point and the parabola vertex (Hz, dB) through points near it."""
    i = int(np.argmax(g))
    lo = i
    while lo > 0 and g[lo - 1] >= g[i] - PEAK_FIT_DB:
        lo -= 1
    hi = i
    while hi < g.size - 1 and g[hi + 1] >= g[i] - PEAK_FIT_DB:
        hi += 1
    if hi - lo >= 2:
        fi = f[i]
        x = f[lo:hi + 1] / fi - fi / f[lo:hi + 1]  # a tuned circuit is symmetric in f/f0 - f0/f
        inv = np.power(10.0, -(g[lo:hi + 1] - g[i]) / 10.0)  # 1/|H|^2 = 1 + x^2 near one resonance
        a, b, c = np.polyfit(x, inv, 2)
        if a > 0:
            xv = -b / (2.0 * a)
            low = c - b * b / (4.0 * a)
            if x[0] <= xv <= x[-1] and low > 0:
                return i, float(fi * (xv + np.sqrt(xv * xv + 4.0)) / 2.0), float(g[i] - 10.0 * np.log10(low))
    return i, float(f[i]), float(g[i])


def _crossing(f0: float, g0: float, f1: float, g1: float, level: float) -> float:
    """Frequency where the straight line through (f0, g0), (f1, g1) reaches ``level``."""
    if g1 == g0:
        return 0.5 * (f0 + f1)
    return float(f0 + (level - g0) * (f1 - f0) / (g1 - g0))


def measure_curve(freqs_hz: Sequence[float], gain_db: Sequence[float], target_hz: tuple[float, float],
                  stations_hz: Sequence[int] = ()) -> CurveMeasures:
    """Peak, -3 dB edges, width and target coverage of one gain curve (see the module notes).

    Parameters
    ----------
    freqs_hz, gain_db : sequences of float
        The curve's points (any order; NaN gains are skipped). At least two finite points.
    target_hz : (float, float)
        The band the preamp should cover, Hz.
    stations_hz : sequence of int
        Station frequencies to sort into inside / outside the -3 dB passband (those in the target).
    """
    lo_t, hi_t = float(target_hz[0]), float(target_hz[1])
    if not (np.isfinite(lo_t) and np.isfinite(hi_t) and 0 < lo_t < hi_t):
        raise BadParameterError(f"target {lo_t / 1e6:g}-{hi_t / 1e6:g} MHz is not a positive range; give e.g. 88-100")
    f = np.asarray(freqs_hz, dtype=np.float64)
    g = np.asarray(gain_db, dtype=np.float64)
    ok = np.isfinite(f) & np.isfinite(g)
    f, g = f[ok], g[ok]
    order = np.argsort(f)
    f, g = f[order], g[order]
    if f.size < 2:
        raise BadParameterError(f"a gain curve needs at least two measured points, got {f.size}")
    i, peak_hz, peak_db = _peak(f, g)
    level = peak_db - HALF_POWER_DB
    below = g < level
    left = np.nonzero(below[:i])[0]
    right = np.nonzero(below[i + 1:])[0]
    e_lo = e_hi = float("nan")
    if left.size:
        j = int(left[-1])
        e_lo = _crossing(f[j], g[j], f[j + 1], g[j + 1], level)
    if right.size:
        j = int(right[0]) + i + 1
        e_hi = _crossing(f[j - 1], g[j - 1], f[j], g[j], level)
    n_grid = max(2, int(round((hi_t - lo_t) / COVERAGE_STEP_HZ)) + 1)
    grid = np.linspace(lo_t, hi_t, n_grid)
    inside_span = (grid >= f[0]) & (grid <= f[-1])
    curve = np.interp(grid, f, g)
    within = inside_span & (curve >= level)
    fraction = float(np.count_nonzero(within) / grid.size)
    min_gain = float(np.min(np.where(inside_span, curve, np.nan))) if inside_span.any() else float("nan")
    in_target = sorted(int(s) for s in stations_hz if lo_t <= s <= hi_t)
    low_open = -np.inf if np.isnan(e_lo) else e_lo
    high_open = np.inf if np.isnan(e_hi) else e_hi
    inside = tuple(s for s in in_target if low_open <= s <= high_open)
    outside = tuple(s for s in in_target if s not in inside)
    return CurveMeasures(peak_hz, peak_db, e_lo, e_hi, (lo_t, hi_t), fraction, min_gain, inside, outside)


@dataclass(frozen=True)
class KeptCurve:
    """A curve kept for display: its points (Hz, dB), measures and the session time (s)."""

    t_s: float
    freqs_hz: np.ndarray
    gain_db: np.ndarray
    measures: CurveMeasures


def better_than(a: CurveMeasures, b: CurveMeasures | None) -> bool:
    """True when ``a`` aligns the preamp better than ``b``.

    More of the target within 3 dB wins; on a tie (to 0.1 %), the higher least gain over the target.
    """
    if b is None:
        return True
    if abs(a.target_within_3db_fraction - b.target_within_3db_fraction) > 1e-3:
        return a.target_within_3db_fraction > b.target_within_3db_fraction
    return bool(np.nan_to_num(a.min_gain_in_target_db, nan=-np.inf) > np.nan_to_num(b.min_gain_in_target_db, nan=-np.inf))
