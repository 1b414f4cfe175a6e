"""Gain against frequency of a preamp, from a survey database or from hand readings.

Sources, best first (each needs sweeps of both configurations, ``base`` without the preamp and
``test`` with it):

1. ``"noise-source"``: ``noise-hot`` and ``noise-cold`` sweeps. From kept spectra (dense, per
   frequency bin) or, when no spectra were kept, per channel from ``power_dbfs``:

   .. math:: G(f) = \\frac{S_{sys,hot} - S_{sys,cold}}{S_{rx,hot} - S_{rx,cold}}

   in linear units (the Y-factor method's gain from hot-minus-cold differences; IEEE Std 161
   definitions). Bins outside the usable fraction of a hop or inside its DC guard are dropped.
2. ``"stations"``: ``antenna`` sweeps; per channel received in both configurations, the ratio of
   the signal-only powers ``(P - N)`` with and without the preamp.
3. ``"noise-floor (shape only)"``: the rise of the noise floor (``terminated``, ``noise-cold`` or
   ``antenna`` spectra, else per-channel ``noise_dbfs``). The floor rise is
   ``(G (T_in + T_p) + T_r) / (T_in + T_r)``, not the gain: it follows the gain's shape but
   compresses the skirts where the receiver's own noise dominates, so it is normalised to its
   peak and reported as relative.

Hand readings (``freq_mhz,level_db`` CSV, relative levels such as a generator and an
oscilloscope give) are ``"readings"``, normalised to their peak.

The database is read through a :class:`~analysis.selection.Survey` (typed read helpers of
:mod:`survey.store`, each selection read once).
"""

from __future__ import annotations

import csv
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Sequence

import numpy as np

from analysis.errors import BadParameterError, MismatchError, NoDataError
from analysis.selection import Survey, as_survey
from survey.store import SweepRow
from survey.units import db_to_ratio, ratio_to_db

SOURCE_NOISE = "noise-source"
SOURCE_STATIONS = "stations"
SOURCE_FLOOR = "noise-floor (shape only)"
SOURCE_READINGS = "readings"

#: Default width of the frequency bins dense spectra are averaged into, Hz.
DEFAULT_BIN_HZ = 100_000.0
#: Reading uncertainty of hand readings: a fixed part (dB) plus a part fixed in amplitude as a
#: fraction of the peak (an oscilloscope trace is read to about 1 % of full scale; common
#: practice, no source).
READING_FLOOR_DB = 0.2
READING_AMPLITUDE_FRACTION = 0.01
#: Below this margin (dB) of the weakest spectrum over the 8-bit quantisation floor the dense
#: gain is flagged: near one step RMS the quantiser is no longer an additive white noise.
QUANTISATION_MARGIN_DB = 10.0
#: Fewest points a gain curve must have to be fitted.
MIN_POINTS = 3

CSV_FORMAT_HELP = (
    "expected a CSV file with a header row 'freq_mhz,level_db' and at least 3 rows of numbers, "
    "e.g.\nfreq_mhz,level_db\n88.0,-36.9\n94.5,0\n100.0,-30.8"
)


@dataclass(frozen=True)
class GainCurve:
    """Gain (dB) against frequency (Hz) with the data source and its caveats.

    ``sigma_db`` is each point's standard uncertainty in dB (weights of the fit). ``relative``
    is True when only the shape is known (levels normalised to a 0 dB peak). ``stations_hz``
    are channels received in the antenna sweeps (empty for readings). ``band`` is the band plan
    name the sweeps were measured with (None for readings).
    """

    freqs_hz: np.ndarray = field(repr=False)
    gain_db: np.ndarray = field(repr=False)
    sigma_db: np.ndarray = field(repr=False)
    source: str
    relative: bool
    dense: bool
    stations_hz: tuple[int, ...] = ()
    band: str | None = None
    notes: tuple[str, ...] = ()
    sweeps_used: dict = field(default_factory=dict)

    @property
    def n_points(self) -> int:
        """Number of points."""
        return int(self.freqs_hz.size)


# ---------------------------------------------------------------------------- hand readings


def reading_sigma_db(level_db: np.ndarray) -> np.ndarray:
    """Standard uncertainty of relative readings in dB: ``sqrt(0.2^2 + (8.686 * 0.01 / v)^2)``.

    ``v = 10^(level/20)`` is the amplitude relative to the peak; an amplitude error of 1 % of the
    peak becomes ``8.686 * 0.01 / v`` dB (common practice, no source).
    """
    v = np.sqrt(db_to_ratio(np.asarray(level_db, dtype=np.float64)))
    return np.sqrt(READING_FLOOR_DB ** 2 + (20.0 / np.log(10.0) * READING_AMPLITUDE_FRACTION / v) ** 2)


def load_readings_csv(path: str | Path) -> GainCurve:
    """Relative levels from a ``freq_mhz,level_db`` CSV, normalised to their peak (0 dB).

    Blank lines and lines starting with ``#`` are skipped. Raises :class:`BadParameterError`
    (with the expected format) for a missing column, a non-numeric value, a non-positive
    frequency or fewer than 3 points.
    """
    p = Path(path)
    if not p.is_file():
        raise BadParameterError(f"readings file {p} not found; {CSV_FORMAT_HELP}")
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise BadParameterError(f"cannot read {p} ({exc}); {CSV_FORMAT_HELP}") from exc
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    rows = list(csv.reader(lines))
    if not rows:
        raise BadParameterError(f"{p} is empty; {CSV_FORMAT_HELP}")
    header = [h.strip().lower() for h in rows[0]]
    missing = [c for c in ("freq_mhz", "level_db") if c not in header]
    if missing:
        raise BadParameterError(f"{p} has no column {', '.join(missing)} (header: {','.join(header)}); {CSV_FORMAT_HELP}")
    i_f, i_l = header.index("freq_mhz"), header.index("level_db")
    freqs, levels = [], []
    for line_no, row in enumerate(rows[1:], start=2):
        try:
            f_mhz, lev = float(row[i_f]), float(row[i_l])
        except (ValueError, IndexError):
            raise BadParameterError(f"{p} row {line_no} ({','.join(row)}) is not two numbers; {CSV_FORMAT_HELP}") from None
        if not (np.isfinite(f_mhz) and np.isfinite(lev)) or f_mhz <= 0:
            raise BadParameterError(f"{p} row {line_no}: frequency must be positive and values finite; {CSV_FORMAT_HELP}")
        freqs.append(f_mhz * 1e6)
        levels.append(lev)
    if len(set(freqs)) < MIN_POINTS:
        raise BadParameterError(f"{p} has {len(set(freqs))} distinct frequencies, at least {MIN_POINTS} are needed; {CSV_FORMAT_HELP}")
    f = np.asarray(freqs)
    lev = np.asarray(levels)
    order = np.argsort(f, kind="stable")
    f, lev = f[order], lev[order] - lev.max()
    return GainCurve(
        freqs_hz=f, gain_db=lev, sigma_db=reading_sigma_db(lev), source=SOURCE_READINGS,
        relative=True, dense=False,
        notes=("relative readings normalised to their peak: gain is relative",),
    )


# ------------------------------------------------------------------------------- database


@dataclass(frozen=True)
class _Binned:
    """Linear PSD averaged into common bins, with the number of periodograms per bin."""

    mean: np.ndarray
    n_avg: np.ndarray


def _bin_spectra(survey: Survey, sweeps: Sequence[SweepRow], edges_hz: np.ndarray) -> _Binned | None:
    total = np.zeros(edges_hz.size - 1)
    count = np.zeros(edges_hz.size - 1)
    n_avg = np.zeros(edges_hz.size - 1)
    found = False
    for sw in sweeps:
        for hop in survey.hop_spectra(sw.id):
            f = hop.freqs_hz
            d = np.abs(f - hop.center_hz)
            keep = (d <= sw.usable_fraction * hop.sample_rate_hz / 2.0) & (d >= sw.dc_guard_hz)
            if not keep.any():
                continue
            found = True
            idx = np.searchsorted(edges_hz, f[keep], side="right") - 1
            ok = (idx >= 0) & (idx < total.size)
            lin = np.asarray(db_to_ratio(hop.psd_dbfs_hz[keep][ok]))
            np.add.at(total, idx[ok], lin)
            np.add.at(count, idx[ok], 1.0)
            # averaged periodograms behind each bin value (non-overlapped segments, lower bound)
            np.add.at(n_avg, idx[ok], max(hop.n_samples // max(sw.fft_size, 1), 1))
    if not found:
        return None
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(count > 0, total / np.maximum(count, 1), np.nan)
    return _Binned(mean, n_avg)


def quantisation_floor_dbfs_hz(sample_rate_hz: float, bits: int = 8) -> float:
    """Density of uniform quantisation noise of a complex ``bits``-bit ADC, dBFS/Hz.

    Step ``d = 1/(2^(bits-1) - 0.5)`` full scale (``cu8``: 1/127.5), variance ``d^2/12`` per rail
    (uniform quantisation noise; valid when the RMS per rail exceeds about half a step, Widrow),
    two rails, spread over ``sample_rate_hz``: -113.7 dBFS/Hz at 2.4 MS/s for 8 bits.
    """
    step = 1.0 / (2 ** (bits - 1) - 0.5)
    return float(ratio_to_db(2.0 * step ** 2 / 12.0 / float(sample_rate_hz)))


def quantisation_margin_db(spectra_lin: Sequence[np.ndarray], sample_rate_hz: float) -> float:
    """Smallest level (dB) of the given linear PSDs (FS^2/Hz) above the 8-bit quantisation floor."""
    weakest = min(float(np.nanmin(s)) for s in spectra_lin if np.size(s))
    return float(ratio_to_db(weakest)) - quantisation_floor_dbfs_hz(sample_rate_hz)


def _settings_check(sweeps: Sequence[SweepRow]) -> None:
    """Refuse a gain ratio across sweeps measured at different receiver gains."""
    gains = {sw.gain_db for sw in sweeps}
    if len(gains) > 1:
        shown = ", ".join("auto" if g is None else f"{g:g} dB" for g in sorted(gains, key=lambda v: (v is None, v or 0)))
        raise MismatchError(
            f"the sweeps used were measured at different receiver gains ({shown}); a gain ratio "
            "needs one receiver gain: measure both configurations at the same --gain"
        )


def _by_input(sweeps: Sequence[SweepRow]) -> dict[str, list[SweepRow]]:
    out: dict[str, list[SweepRow]] = {}
    for sw in sweeps:
        out.setdefault(sw.input, []).append(sw)
    return out


def _mean_linear(values_db: np.ndarray) -> np.ndarray:
    """Mean over sweeps (axis 0) in linear power, returned in linear units; NaN ignored."""
    lin = np.asarray(db_to_ratio(values_db))
    with np.errstate(invalid="ignore"):
        cnt = np.sum(np.isfinite(lin), axis=0)
        s = np.nansum(lin, axis=0)
    return np.where(cnt > 0, s / np.maximum(cnt, 1), np.nan)


def _dense_ratio(survey: Survey, groups: Sequence[Sequence[SweepRow]], bin_hz: float):
    """Average the kept spectra of each group of sweeps onto one common grid of ``bin_hz`` bins."""
    # common grid over everything kept
    f_min, f_max = np.inf, -np.inf
    for rows in groups:
        for sw in rows:
            span = survey.spectra_span_hz(sw.id)
            if span is not None:
                f_min, f_max = min(f_min, span[0]), max(f_max, span[1])
    if not np.isfinite(f_min):
        return None
    edges = np.arange(np.floor(f_min / bin_hz) * bin_hz, f_max + bin_hz, bin_hz)
    binned = [_bin_spectra(survey, rows, edges) for rows in groups]
    if any(b is None for b in binned):
        return None
    centers = 0.5 * (edges[:-1] + edges[1:])
    return centers, binned


def _gain_and_sigma(d_sys, d_rx, var_sys, var_rx):
    with np.errstate(invalid="ignore", divide="ignore"):
        g = d_sys / d_rx
        rel = np.sqrt(var_sys / d_sys ** 2 + var_rx / d_rx ** 2)
    ok = np.isfinite(g) & (d_sys > 0) & (d_rx > 0) & np.isfinite(rel)
    return g, 10.0 / np.log(10.0) * rel, ok


def _noise_source_curve(survey: Survey, base, test, bin_hz):
    b, t = _by_input(base), _by_input(test)
    need = ("noise-hot", "noise-cold")
    if not all(k in b and k in t for k in need):
        return None
    _settings_check(b["noise-hot"] + b["noise-cold"] + t["noise-hot"] + t["noise-cold"])
    used = {"test noise-hot": len(t["noise-hot"]), "test noise-cold": len(t["noise-cold"]),
            "base noise-hot": len(b["noise-hot"]), "base noise-cold": len(b["noise-cold"])}
    dense = _dense_ratio(survey, [t["noise-hot"], t["noise-cold"], b["noise-hot"], b["noise-cold"]], bin_hz)
    if dense is not None:
        centers, (sh, sc, rh, rc) = dense
        # each bin mean is a chi-square average: relative variance 1/n_avg (Welch 1967, K averages)
        var_sys = sh.mean ** 2 / np.maximum(sh.n_avg, 1) + sc.mean ** 2 / np.maximum(sc.n_avg, 1)
        var_rx = rh.mean ** 2 / np.maximum(rh.n_avg, 1) + rc.mean ** 2 / np.maximum(rc.n_avg, 1)
        g, sig, ok = _gain_and_sigma(sh.mean - sc.mean, rh.mean - rc.mean, var_sys, var_rx)
        notes = [f"dense: kept spectra averaged into {bin_hz / 1e3:g} kHz bins; DC guard and hop edges excluded"]
        margin_db = quantisation_margin_db([sh.mean[ok], sc.mean[ok], rh.mean[ok], rc.mean[ok]],
                                           b["noise-cold"][0].sample_rate_hz)
        if margin_db < QUANTISATION_MARGIN_DB:
            notes.append(
                f"the weakest spectrum is only {margin_db:.1f} dB above the 8-bit quantisation floor: "
                "the hot/cold differences are compressed and the skirts read high; raise the receiver "
                "gain and measure again"
            )
        notes = tuple(notes)
        return centers[ok], np.asarray(ratio_to_db(g[ok])), np.maximum(sig[ok], 0.05), True, notes, used
    m = survey.channel_matrix(t["noise-hot"] + t["noise-cold"] + b["noise-hot"] + b["noise-cold"])
    sizes = np.cumsum([0, len(t["noise-hot"]), len(t["noise-cold"]), len(b["noise-hot"]), len(b["noise-cold"])])
    means = [_mean_linear(m.power_dbfs[sizes[i]:sizes[i + 1]].astype(np.float64)) for i in range(4)]
    sh, sc, rh, rc = means
    # without spectra the per-channel scatter is unknown: equal weights
    g, _sig, ok = _gain_and_sigma(sh - sc, rh - rc, np.zeros_like(sh), np.zeros_like(rh))
    notes = ("per channel: channel powers of the noise-hot and noise-cold sweeps (no spectra kept)",)
    return m.freqs_hz[ok].astype(np.float64), np.asarray(ratio_to_db(g[ok])), np.full(int(ok.sum()), 0.1), False, notes, used


def _received_majority(m, rows: slice) -> np.ndarray:
    rec = m.received[rows]
    return rec.sum(axis=0) * 2 >= max(rec.shape[0], 1)


def station_peaks(freqs_hz: np.ndarray, level: np.ndarray, channel_bw_hz: float) -> np.ndarray:
    """Mask of channels that are stations: received channels that are the strongest within
    less than one channel bandwidth (a station spills into raster neighbours closer than its
    bandwidth, e.g. +-100 kHz on a 100 kHz raster with 200 kHz channels, and must count once).

    ``level`` is any monotonic measure of strength (NaN for not received).
    """
    f = np.asarray(freqs_hz, dtype=np.float64)
    lev = np.asarray(level, dtype=np.float64)
    keep = np.zeros(f.size, dtype=bool)
    for j in np.argsort(np.where(np.isfinite(lev), -lev, np.inf)):
        if not np.isfinite(lev[j]):
            break
        if not np.any(keep & (np.abs(f - f[j]) < channel_bw_hz - 1.0)):
            keep[j] = True
    return keep


def _census_station_signals(survey: Survey, test_rows, base_rows):
    """``(freqs_hz, signal power P - N (linear, NaN where not detected), detected)`` of the census
    stations over ``test_rows`` then ``base_rows``; None when the database has no census."""
    try:
        survey.require_census()
    except NoDataError:
        return None
    m_t, m_b = survey.item_matrices(test_rows, base_rows)

    def signal(m) -> np.ndarray:
        power = np.asarray(m.power_dbfs, np.float64)
        noise = np.asarray(m.noise_dbfs, np.float64)
        return np.where(m.detected, np.power(10.0, power / 10.0) - np.power(10.0, noise / 10.0), np.nan)

    # element by element, so each side on its own then joined is the same as joined first
    sig = np.concatenate([signal(m_t), signal(m_b)])
    detected = np.concatenate([m_t.detected, m_b.detected])
    return np.asarray(m_t.freqs_hz, np.float64), sig, detected


def _stations_curve(survey: Survey, base, test):
    """Gain at the stations heard with both configurations: per station the ratio of the mean
    signal power ``P - N`` of the test sweeps to that of the base sweeps (sweeps that detected
    it). Stations are those of the census (one per transmitter, at its carrier); a database
    without the census falls back to the strongest raster channel within one channel bandwidth
    (:func:`station_peaks`)."""
    b, t = _by_input(base), _by_input(test)
    if "antenna" not in b or "antenna" not in t:
        return None
    _settings_check(b["antenna"] + t["antenna"])
    nt, nb = len(t["antenna"]), len(b["antenna"])
    census = _census_station_signals(survey, t["antenna"], b["antenna"])
    if census is not None:
        freqs, sig, det = census
        rec_t = det[:nt].sum(axis=0) * 2 >= max(nt, 1)
        rec_b = det[nt:].sum(axis=0) * 2 >= max(nb, 1)
        return _gain_points(freqs, sig, nt, rec_t, rec_b, {"test antenna": nt, "base antenna": nb})
    m = survey.channel_matrix(t["antenna"] + b["antenna"])
    p = np.power(np.float32(10.0), np.asarray(m.power_dbfs, np.float32) / np.float32(10.0))
    n = np.power(np.float32(10.0), np.asarray(m.noise_dbfs, np.float32) / np.float32(10.0))
    sig = np.where(m.received, p - n, np.nan)
    rec_t = _received_majority(m, slice(0, nt))
    rec_b = _received_majority(m, slice(nt, nt + nb))
    with np.errstate(invalid="ignore"):
        strength = np.nanmax(np.where(np.isfinite(sig), sig, -np.inf), axis=0)
    strength = np.where((rec_t | rec_b) & np.isfinite(strength) & (strength > 0), strength, np.nan)
    peaks = station_peaks(m.freqs_hz, strength, min(sw.channel_bw_hz for sw in b["antenna"] + t["antenna"]))
    rec_t, rec_b = rec_t & peaks, rec_b & peaks
    return _gain_points(m.freqs_hz.astype(np.float64), sig, nt, rec_t, rec_b,
                        {"test antenna": nt, "base antenna": nb})


def _gain_points(freqs_hz: np.ndarray, sig: np.ndarray, nt: int, rec_t: np.ndarray, rec_b: np.ndarray, used: dict):
    """Gain points (dB) with standard errors at the stations heard by both (see :func:`_stations_curve`)."""
    both = rec_t & rec_b
    stations = tuple(int(round(f)) for f in freqs_hz[rec_t | rec_b])
    if both.sum() < MIN_POINTS:
        return None, stations, used
    gains, sigmas = [], []
    by_station = np.ascontiguousarray(sig[:, both].T)  # one row per station: contiguous slices below
    for row in by_station:
        a = row[:nt][np.isfinite(row[:nt]) & (row[:nt] > 0)]
        c = row[nt:][np.isfinite(row[nt:]) & (row[nt:] > 0)]
        if a.size == 0 or c.size == 0:
            gains.append(np.nan); sigmas.append(np.nan)
            continue
        gains.append(float(ratio_to_db(a.mean() / c.mean())))
        # scatter across sweeps (fading) as a standard error in dB, at least 0.2 dB
        spread = [np.std(ratio_to_db(x), ddof=1) / np.sqrt(x.size) if x.size > 1 else 0.0 for x in (a, c)]
        sigmas.append(max(float(np.hypot(*spread)), 0.2))
    g = np.asarray(gains); s = np.asarray(sigmas)
    ok = np.isfinite(g) & np.isfinite(s)
    if ok.sum() < MIN_POINTS:
        return None, stations, used
    f = freqs_hz[both][ok].astype(np.float64)
    return (f, g[ok], s[ok]), stations, used


#: dB per unit relative error (10 / ln 10).
_DB_PER_REL = 10.0 / np.log(10.0)
#: Smallest standard uncertainty given to a floor-rise point, dB (the floor estimator's own
#: bias under stations is not in the scatter; common practice, no source).
FLOOR_SIGMA_MIN_DB = 0.1
#: Uncertainty of a floor-rise point whose scatter cannot be measured (one sweep), dB.
FLOOR_SIGMA_DEFAULT_DB = 0.3


def _sem_db(values_db: np.ndarray) -> np.ndarray:
    """Standard error of the mean over sweeps (rows) of levels in dB; NaN with fewer than 2 sweeps."""
    x = np.asarray(values_db, np.float64)
    n = np.sum(np.isfinite(x), axis=0)
    with np.errstate(invalid="ignore", divide="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        sd = np.nanstd(x, axis=0, ddof=1)
    return np.where(n >= 2, sd / np.sqrt(np.maximum(n, 1)), np.nan)


def _floor_curve(survey: Survey, base, test, bin_hz):
    b, t = _by_input(base), _by_input(test)
    for kind in ("terminated", "noise-cold", "antenna"):
        if kind in b and kind in t:
            _settings_check(b[kind] + t[kind])
            used = {f"test {kind}": len(t[kind]), f"base {kind}": len(b[kind])}
            edges_info = _dense_ratio(survey, [t[kind], b[kind]], bin_hz)
            if edges_info is not None:
                centers, (st, sb) = edges_info
                with np.errstate(invalid="ignore", divide="ignore"):
                    rise = st.mean / sb.mean
                ok = np.isfinite(rise) & (rise > 0)
                if ok.sum() >= MIN_POINTS:
                    # each bin mean averages n_avg periodograms: relative error 1/sqrt(n_avg) (Welch 1967)
                    sig = _DB_PER_REL * np.sqrt(1.0 / np.maximum(st.n_avg, 1) + 1.0 / np.maximum(sb.n_avg, 1))
                    return centers[ok], np.asarray(ratio_to_db(rise[ok])), np.maximum(sig[ok], FLOOR_SIGMA_MIN_DB), \
                        True, kind, used
            m = survey.channel_matrix(t[kind] + b[kind])
            nt = len(t[kind])
            rise = _mean_linear(m.noise_dbfs[:nt].astype(np.float64)) / _mean_linear(m.noise_dbfs[nt:].astype(np.float64))
            ok = np.isfinite(rise) & (rise > 0)
            if ok.sum() >= MIN_POINTS:
                sig = np.hypot(_sem_db(m.noise_dbfs[:nt]), _sem_db(m.noise_dbfs[nt:]))
                sig = np.where(np.isfinite(sig), np.maximum(sig, FLOOR_SIGMA_MIN_DB), FLOOR_SIGMA_DEFAULT_DB)
                return m.freqs_hz[ok].astype(np.float64), np.asarray(ratio_to_db(rise[ok])), sig[ok], False, kind, used
    return None


def _labels_hint(survey: Survey) -> str:
    return "the database holds: " + survey.present()


def load_gain_curve(
    source: Survey | str | Path, base: str, test: str, *, bin_hz: float = DEFAULT_BIN_HZ, prefer: str | None = None
) -> GainCurve:
    """Gain of configuration ``test`` relative to ``base`` against frequency, best data present.

    Parameters
    ----------
    source : Survey or path
        The survey (or its database file).
    base, test : str
        Configuration labels without and with the preamp.
    bin_hz : float
        Bin width dense spectra are averaged into, Hz.
    prefer : str, optional
        Force one source (``"noise-source"``, ``"stations"`` or ``"noise-floor"``) instead of
        the best available.

    Raises
    ------
    NoDataError
        No sweeps with a label, or no pair of inputs that gives a gain.
    MismatchError
        The sweeps used were measured at different receiver gains.
    """
    if bin_hz <= 0:
        raise BadParameterError(f"bin width must be positive, got {bin_hz} Hz")
    if base == test:
        raise BadParameterError(f"--base and --test are both {base!r}; give the label without and the label with the preamp")
    survey, opened = as_survey(source)
    try:
        survey.require([base, test])
        base_rows = list(survey.find_sweeps(base))
        test_rows = list(survey.find_sweeps(test))
        band = test_rows[0].band
        ant = _stations_curve(survey, base_rows, test_rows)
        stations: tuple[int, ...] = ()
        station_data = None
        ant_used: dict = {}
        if ant is not None:
            station_data, stations, ant_used = ant
        order = [prefer] if prefer else ["noise-source", "stations", "noise-floor"]
        for kind in order:
            if kind == "noise-source":
                got = _noise_source_curve(survey, base_rows, test_rows, bin_hz)
                if got is not None:
                    f, g, s, dense, notes, used = got
                    if f.size >= MIN_POINTS:
                        return GainCurve(f, g, s, SOURCE_NOISE, False, dense, stations, band, notes, used)
            elif kind == "stations":
                if station_data is not None:
                    f, g, s = station_data
                    return GainCurve(
                        f, g, s, SOURCE_STATIONS, False, False, stations, band,
                        ("per channel: signal-only power (P - N) with and without the preamp",), ant_used,
                    )
            elif kind == "noise-floor":
                got = _floor_curve(survey, base_rows, test_rows, bin_hz)
                if got is not None:
                    f, rise, sig, dense, which, used = got
                    return GainCurve(
                        f, rise - np.max(rise), sig, SOURCE_FLOOR, True, dense, stations, band,
                        (f"noise-floor rise on the {which} input, normalised to its peak: shape only, "
                         "gain is relative; the skirts look shallower than the gain where the "
                         "receiver's own noise dominates",), used,
                    )
            else:
                raise BadParameterError(f"unknown source {kind!r}; choose noise-source, stations or noise-floor")
        raise NoDataError(
            f"no gain can be measured between {base!r} and {test!r}: record noise-hot and noise-cold "
            "sweeps, or antenna sweeps with at least 3 stations received, in both configurations; "
            + _labels_hint(survey)
        )
    finally:
        if opened:
            survey.close()
