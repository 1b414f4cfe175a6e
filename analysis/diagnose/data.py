"""Survey data prepared for the fault checks: per-configuration channel summaries and the gain.

Everything is read through the read helpers of :mod:`survey.store` plus two small readers
here (:func:`read_channel_hop_centers`, :func:`read_spectra_for`), and the preamp gain through
the passband modules (:func:`analysis.passband.data.load_gain_curve`,
:func:`analysis.passband.fit.fit_passband`).

Averaging over sweeps is in linear power: ``P`` and ``N`` are the means of the sweeps' channel
power and noise; the signal-only power is ``S = P - N``. A channel is *received* when it was
received in at least half of the sweeps.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from analysis.errors import AnalysisError, NoDataError
from analysis.passband.data import SOURCE_FLOOR, SOURCE_STATIONS, GainCurve
from analysis.passband.fit import fit_passband
from analysis.selection import Survey
from survey.store import HopRow, SweepRow
from survey.units import db_to_ratio, ratio_to_db

#: Relative uncertainty of a channel's noise estimate N used to bound an unseen signal: the
#: local floor estimator is specified to a few tenths of a dB (0.4 dB is about 10 %); common
#: practice, no source.
FLOOR_REL_UNCERTAINTY = 0.10
#: A residual above this (dB) marks a gain point as an outlier of the tuned-circuit fit.
GAIN_OUTLIER_DB = 3.0


@dataclass(frozen=True)
class ChannelSummary:
    """Channel readings of one configuration and input averaged over its sweeps (linear FS^2).

    ``signal_lin = power_lin - noise_lin`` may be negative for an empty channel (noise).
    ``hop_center_hz`` is the centre of the hop each channel was measured in (first sweep).
    """

    configuration: str
    input: str
    sweeps: tuple[SweepRow, ...]
    freqs_hz: np.ndarray = field(repr=False)
    power_lin: np.ndarray = field(repr=False)
    noise_lin: np.ndarray = field(repr=False)
    received: np.ndarray = field(repr=False)
    hop_center_hz: np.ndarray = field(repr=False)

    @property
    def signal_lin(self) -> np.ndarray:
        """Signal-only power ``P - N`` (FS^2), NaN where not measured."""
        return self.power_lin - self.noise_lin

    @property
    def signal_upper_lin(self) -> np.ndarray:
        """Upper bound on the signal: ``max(P - N, 0) + 0.1 N`` (the floor's uncertainty)."""
        return np.maximum(self.signal_lin, 0.0) + FLOOR_REL_UNCERTAINTY * self.noise_lin

    @property
    def channel_bw_hz(self) -> float:
        """Channel integration bandwidth of the sweeps, Hz."""
        return float(self.sweeps[0].channel_bw_hz)

    def at(self, freqs_hz: np.ndarray | Sequence[float], tolerance_hz: float) -> np.ndarray:
        """Index of the channel nearest each frequency, or -1 when none lies within the tolerance."""
        f = np.atleast_1d(np.asarray(freqs_hz, dtype=np.float64))
        if self.freqs_hz.size == 0:
            return np.full(f.shape, -1, dtype=np.int64)
        n = self.freqs_hz.size
        hi = np.clip(np.searchsorted(self.freqs_hz, f), 0, n - 1)
        lo = np.clip(hi - 1, 0, n - 1)
        k = np.where(np.abs(self.freqs_hz[lo] - f) <= np.abs(self.freqs_hz[hi] - f), lo, hi)
        return np.where(np.abs(self.freqs_hz[k] - f) <= tolerance_hz, k, -1).astype(np.int64)


def raster_step_hz(freqs_hz: np.ndarray) -> float:
    """The channel raster: the smallest spacing of the measured channels, Hz."""
    d = np.diff(np.unique(np.asarray(freqs_hz, dtype=np.float64)))
    d = d[d > 0]
    return float(d.min()) if d.size else 100_000.0


def _mean_lin(values_db: np.ndarray) -> np.ndarray:
    """Column means in linear power of levels in dB (float32 powers, float64 sums), NaN ignored."""
    lin = np.power(np.float32(10.0), np.asarray(values_db, np.float32) / np.float32(10.0))
    ok = np.isfinite(lin)
    cnt = ok.sum(axis=0)
    total = np.where(ok, lin, np.float32(0.0)).sum(axis=0, dtype=np.float64)
    return np.where(cnt > 0, total / np.maximum(cnt, 1), np.nan)


def summarise_channels(survey: Survey, configuration: str, input: str) -> ChannelSummary | None:
    """Average the complete sweeps of ``configuration`` with ``input``; None when there are none.
    Computed once per survey (the checks share it)."""
    return survey.memo(("channel_summary", configuration, input),
                       lambda: _summarise_channels(survey, configuration, input))


def _summarise_channels(survey: Survey, configuration: str, input: str) -> ChannelSummary | None:
    rows = survey.find_sweeps(configuration, input)
    if not rows:
        return None
    m = survey.channel_matrix(rows)
    power = _mean_lin(m.power_dbfs)
    noise = _mean_lin(m.noise_dbfs)
    received = m.received.sum(axis=0) * 2 >= len(rows)
    f_c, centers = survey.channel_hop_centers(rows[0].id)
    hop_c = np.full(m.freqs_hz.size, np.nan)
    if f_c.size:
        pos = np.searchsorted(m.freqs_hz, f_c)
        ok = (pos < m.freqs_hz.size) & (m.freqs_hz[np.minimum(pos, m.freqs_hz.size - 1)] == f_c)
        hop_c[pos[ok]] = centers[ok]
    return ChannelSummary(configuration, input, tuple(rows), m.freqs_hz.astype(np.int64), power, noise,
                          received, hop_c)


def hop_rows(survey: Survey, configuration: str) -> list[tuple[HopRow, str]]:
    """Hop rows of every complete sweep of ``configuration``, each with its sweep's input label."""
    by_id = {r.id: r for r in survey.find_sweeps(configuration)}
    return [(h, by_id[h.sweep_id].input) for h in survey.hops(list(by_id))]


def spill_channels(summary: ChannelSummary) -> list[int]:
    """Received channels that only hold the spill of a stronger neighbour (within 2 raster steps).

    With channels wider than the raster (200 kHz on 100 kHz) a station also fills its
    neighbours; their signal sits at the station's frequency, so their power ratio is the gain
    there, not at their own raster frequency.
    """
    raster = raster_step_hz(summary.freqs_hz)
    s = summary.signal_lin
    out = []
    for j in np.flatnonzero(summary.received):
        near = np.abs(summary.freqs_hz - summary.freqs_hz[j]) <= 2.01 * raster
        if s[j] < np.nanmax(s[near]):
            out.append(int(summary.freqs_hz[j]))
    return out


# ------------------------------------------------------------------------------------- gain
@dataclass(frozen=True)
class GainModel:
    """Preamp gain ``G(f)`` (dB) of ``test`` over ``base`` for the fault checks.

    ``source`` names the data (``noise-source`` or ``stations``, from the passband engineer's
    :func:`~analysis.passband.data.load_gain_curve`) and ``method`` how values between points
    are obtained (``tuned-circuit fit`` or ``interpolation``). ``points_*`` are the gain points
    used after outliers (IQ images, products) were set aside.
    """

    source: str
    method: str
    points_hz: np.ndarray = field(repr=False)
    points_db: np.ndarray = field(repr=False)
    fit: object | None = field(default=None, repr=False)
    dropped_hz: tuple[int, ...] = ()

    def gain_db(self, freqs_hz: np.ndarray | Sequence[float]) -> np.ndarray:
        """Gain in dB at ``freqs_hz``."""
        f = np.atleast_1d(np.asarray(freqs_hz, dtype=np.float64))
        if self.fit is not None:
            return np.asarray(self.fit.response_db(f), dtype=np.float64)
        return np.interp(f, self.points_hz, self.points_db)

    def gain_lin(self, freqs_hz: np.ndarray | Sequence[float]) -> np.ndarray:
        """Gain as a power ratio at ``freqs_hz``."""
        return np.asarray(db_to_ratio(self.gain_db(freqs_hz)))


def _fit_points(f: np.ndarray, g: np.ndarray, w: np.ndarray):
    try:
        return fit_passband(f, g, weights=w)
    except AnalysisError:
        return None


def gain_model(curve: GainCurve | None, why_none: str = "no preamp gain curve was given",
               exclude_hz: Sequence[float] = ()) -> tuple[GainModel | None, str]:
    """Gain of the preamp from its measured gain curve (noise-source sweeps or stations); ``(model, note)``.

    ``curve`` comes from :func:`analysis.passband.data.load_gain_curve` (None: ``why_none``
    says why). ``exclude_hz`` are channels known not to follow their own frequency's gain
    (IQ images, the spill of a station into its neighbours); for station data they are dropped
    before the tuned-circuit fit, as are points more than 3 dB off a first fit. A noise-floor
    shape (relative) is not a gain and gives ``None``.
    """
    if curve is None:
        return None, f"no preamp gain could be measured ({why_none})"
    if curve.source == SOURCE_FLOOR or curve.relative:
        return None, ("only the noise-floor rise is available, which is not the gain; record antenna sweeps "
                      "with stations received in both configurations, or noise-hot/noise-cold sweeps")
    f = np.asarray(curve.freqs_hz, dtype=np.float64)
    g = np.asarray(curve.gain_db, dtype=np.float64)
    w = 1.0 / np.maximum(np.asarray(curve.sigma_db, dtype=np.float64), 0.05)
    keep = np.ones(f.size, bool)
    if curve.source == SOURCE_STATIONS:
        for x in exclude_hz:
            keep &= np.abs(f - float(x)) > 1.0
    dropped = [int(v) for v in f[~keep]]
    fit = _fit_points(f[keep], g[keep], w[keep]) if keep.sum() >= 3 else None
    if fit is not None:
        resid = g - fit.response_db(f)
        bad = keep & (np.abs(resid) > GAIN_OUTLIER_DB)
        if bad.any() and (keep & ~bad).sum() >= 3:
            refit = _fit_points(f[keep & ~bad], g[keep & ~bad], w[keep & ~bad])
            if refit is not None:
                fit = refit
                dropped += [int(v) for v in f[bad]]
                keep &= ~bad
    if keep.sum() < 2:
        return None, "fewer than two gain points remain after setting aside images and outliers"
    method = "tuned-circuit fit" if fit is not None else "interpolation"
    order = np.argsort(f[keep])
    model = GainModel(curve.source, method, f[keep][order], g[keep][order], fit, tuple(sorted(dropped)))
    note = (f"preamp gain from {curve.source} ({int(keep.sum())} points, {method}"
            + (f"; {len(dropped)} point(s) set aside as images or outliers" if dropped else "") + ")")
    return model, note


def to_db(x) -> np.ndarray | float:
    """Linear power to dB (``survey.units.ratio_to_db``)."""
    return ratio_to_db(x)
