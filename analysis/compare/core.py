"""A/B comparison of two configurations, item by item (stations of the census, or raster channels).

Definitions (the project's measurement vocabulary):

* ``C/N = (P - N) / N`` in dB (what the tool calls SNR);
* gain ``G = (P_test - N_test) / (P_base - N_base)`` (signal-only power ratio), noise rise
  ``R = N_test / N_base``, and the identity ``delta C/N (dB) = G (dB) - R (dB)``.

The comparison reads one matrix per configuration with the fields every per-item matrix has
(``freqs_hz``, ``started_utc``, ``power_dbfs``, ``noise_dbfs``, ``cn_db``, ``detected``): a
:class:`analysis.census.StationMatrix` (one column per station) or a raster
:class:`survey.store.ChannelMatrix` (one column per channel).

Statistics follow how the data was taken (:mod:`analysis.compare.intervals`):

* **Paired** (the configurations alternated): each base sweep is paired with the nearest
  unused test sweep closer in time than twice the median sweep spacing
  (:func:`~analysis.compare.pairing.pair_sweeps`). Per item, the pairs in which both
  members measured a C/N give the mean paired difference and its Student t interval with
  ``n - 1`` degrees of freedom. The base and test C/N columns are the means over *the same
  pairs*, so ``base + delta = test`` exactly; the noise rise is the mean of the paired noise
  differences over the same pairs and the gain is ``delta + noise rise`` (for one pair this is
  exactly the signal-power ratio).
* **Unpaired** (taken at different times): Welch's interval for the difference of the mean
  C/N of all sweeps of each side; base and test columns are those two means.

Verdicts (stated in ``Comparison.thresholds``), at confidence ``c`` (default 95 %) and
equivalence margin ``m`` (``min_change_db``, default 0.5 dB):

* an item detected (C/N at or above the survey's detection margin) in at least half of the
  sweeps of one configuration and fewer than half of the other's is **gained** (by test) or
  **lost**, when the interval of the paired change in detection (per pair +1, 0 or -1; the
  same t interval) lies wholly above (gained) or below (lost) zero; otherwise
  **undetermined**;
* otherwise, from the C/N interval: fewer than 3 pairs (sweeps per side) -> **undetermined**;
  interval wholly inside ``[-m, +m]`` -> **unchanged** (equivalence at the same confidence);
  wholly above 0 -> **improved**; wholly below 0 -> **worse**; spanning zero ->
  **undetermined**;
* raster channels that no sweep of either configuration detected are **not received**. A
  station of the census is a transmitter whose own emission was found in at least one sweep,
  so its measured C/N means something even when it never reached the detection margin: such a
  station gets the verdict of its C/N interval, never "not received".
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from analysis.compare.pairing import pair_sweeps
from analysis.compare.intervals import MIN_PAIRS, Intervals, column_mean_sd, paired_t, welch_t
from analysis.census import SAME_FM_STATION_HZ
from analysis.compare.settings import settings_warnings
from analysis.compare.summary import summarise
from analysis.errors import BadParameterError, MismatchError
from analysis.selection import Survey, as_survey
from analysis.terms import utc_to_epoch_s

#: Verdict words, in the order they are counted.
VERDICTS = ("improved", "worse", "unchanged", "undetermined", "gained", "lost", "not received")


@dataclass(frozen=True)
class ItemDelta:
    """Comparison of one item (station or raster channel). dB values; None where undefined.

    Stations identified by RDS carry ``name`` (e.g. ``"MARSH FM (PI D2E4)"``). Where RDS block
    counts exist for a station in both configurations, the block error rates (fractions of
    RDS block slots failed, IEC 62106) are compared like the C/N: base and test means over the
    same pairs, the mean paired difference and its t interval (``bler_ci_low``/``bler_ci_high``).
    """

    freq_hz: int
    base_cn_db: float | None
    test_cn_db: float | None
    delta_cn_db: float | None
    ci_low_db: float | None
    ci_high_db: float | None
    gain_db: float | None
    noise_rise_db: float | None
    verdict: str
    pairs: int = 0
    p_value: float | None = None
    base_detected_fraction: float = 0.0
    test_detected_fraction: float = 0.0
    detection_change_low: float | None = None
    detection_change_high: float | None = None
    name: str | None = None
    base_block_error_rate: float | None = None
    test_block_error_rate: float | None = None
    delta_block_error_rate: float | None = None
    bler_ci_low: float | None = None
    bler_ci_high: float | None = None

    @property
    def n_used(self) -> int:
        """Pairs (or the smaller number of sweeps per side) behind ``delta_cn_db``."""
        return self.pairs


#: The record's former name.
ChannelDelta = ItemDelta


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_configurations`; ``to_dict()`` gives the JSON form.

    ``unit`` is ``"station"`` (census columns) or ``"channel"`` (raster columns).
    """

    base: str
    test: str
    input: str
    method: str
    paired: bool
    thresholds: dict
    items: tuple[ItemDelta, ...]
    summary: dict
    warnings: tuple[str, ...]
    n_base_sweeps: int
    n_test_sweeps: int
    n_pairs: int
    unit: str = "channel"

    @property
    def channels(self) -> tuple[ItemDelta, ...]:
        """The compared items (name kept from the raster-only comparison)."""
        return self.items

    def to_dict(self) -> dict:
        """Plain dict (JSON-ready apart from NaN, which never occurs: undefined is None)."""
        return {
            "base": self.base, "test": self.test, "input": self.input, "unit": self.unit,
            "method": self.method, "paired": self.paired,
            "n_base_sweeps": self.n_base_sweeps, "n_test_sweeps": self.n_test_sweeps, "n_pairs": self.n_pairs,
            "thresholds": dict(self.thresholds),
            "items": [asdict(c) for c in self.items],
            "summary": dict(self.summary),
            "warnings": list(self.warnings),
        }


def _opt(x, digits: int = 4) -> float | None:
    """A finite value rounded to ``digits`` decimals (dB: far below any uncertainty), else None."""
    return round(float(x), digits) if x is not None and np.isfinite(x) else None


def item_axis(base, test) -> np.ndarray:
    """The common item axis (Hz, int64) of two per-item matrices.

    Raster channels sit on integer raster frequencies and are matched exactly. Station
    frequencies are medians of carrier estimates (not integers, and not identical between two
    censuses read separately): a test station within :data:`analysis.census.SAME_FM_STATION_HZ`
    of a base station is the same station and takes the base station's frequency.
    """
    fb = np.round(np.asarray(base.freqs_hz, np.float64)).astype(np.int64)
    ft = np.round(np.asarray(test.freqs_hz, np.float64)).astype(np.int64)
    if hasattr(base, "kinds") and hasattr(test, "kinds") and fb.size and ft.size:
        ft = _snap(ft, fb)
    return np.union1d(fb, ft)


def _snap(freqs: np.ndarray, onto: np.ndarray) -> np.ndarray:
    """``freqs`` with each value within SAME_FM_STATION_HZ of a value of sorted ``onto`` moved onto it."""
    pos = np.clip(np.searchsorted(onto, freqs), 1, max(onto.size - 1, 1))
    lo, hi = onto[pos - 1], onto[np.minimum(pos, onto.size - 1)]
    near = np.where(np.abs(freqs - lo) <= np.abs(hi - freqs), lo, hi)
    return np.where(np.abs(near - freqs) <= SAME_FM_STATION_HZ, near, freqs)


def _aligned(matrix, freqs_hz: np.ndarray, onto: np.ndarray | None = None
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """C/N (dB), noise (dBFS) and detection flags of ``matrix`` on the axis ``freqs_hz`` (float32).

    ``onto`` (stations only): the base matrix's frequencies, onto which this matrix's stations
    are snapped as in :func:`item_axis`.
    """
    cn = np.asarray(matrix.cn_db, np.float32)
    noise = np.asarray(matrix.noise_dbfs, np.float32)
    det = np.asarray(matrix.detected, bool)
    own = np.round(np.asarray(matrix.freqs_hz, np.float64)).astype(np.int64)
    if onto is not None and onto.size and own.size:
        own = _snap(own, onto)
    if own.size == freqs_hz.size and np.array_equal(own, freqs_hz):
        return cn, noise, det
    cols = np.searchsorted(freqs_hz, own)
    shape = (cn.shape[0], freqs_hz.size)
    out = [np.full(shape, np.nan, np.float32), np.full(shape, np.nan, np.float32), np.zeros(shape, bool)]
    out[0][:, cols], out[1][:, cols], out[2][:, cols] = cn, noise, det
    return out[0], out[1], out[2]


def _aligned_extra(matrix, freqs_hz: np.ndarray, onto: np.ndarray | None = None):
    """Station names (list per item of ``freqs_hz``) and per-sweep RDS block error rates
    ``(n_sweeps, n_items)`` (NaN where no block was received) of ``matrix``; None for each
    that the matrix does not carry."""
    own = np.round(np.asarray(matrix.freqs_hz, np.float64)).astype(np.int64)
    if onto is not None and onto.size and own.size:
        own = _snap(own, onto)
    cols = np.searchsorted(freqs_hz, own)
    names = None
    given = tuple(getattr(matrix, "names", ()) or ())
    if len(given) == own.size and any(given):
        names = [None] * freqs_hz.size
        for j, name in zip(cols.tolist(), given):
            names[j] = name
    rates = None
    blocks = getattr(matrix, "rds_blocks", None)
    errors = getattr(matrix, "rds_block_errors", None)
    if blocks is not None and errors is not None and np.any(np.asarray(blocks) > 0):
        b = np.asarray(blocks, np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            r = np.where(b > 0, np.asarray(errors, np.float64) / b, np.nan)
        rates = np.full((r.shape[0], freqs_hz.size), np.nan)
        rates[:, cols] = r
    return names, rates


def cn_verdict(low: float | None, high: float | None, min_change_db: float) -> str:
    """Verdict of a C/N change from its interval (see the module docstring)."""
    if low is None or high is None:
        return "undetermined"
    if low >= -min_change_db and high <= min_change_db:
        return "unchanged"
    if low > 0:
        return "improved"
    if high < 0:
        return "worse"
    return "undetermined"


def _verdict(rb: bool, rt: bool, ever: bool, det_low: float | None, det_high: float | None,
             low: float | None, high: float | None, min_change_db: float) -> str:
    if rt and not rb:
        return "gained" if det_low is not None and det_low > 0 else "undetermined"
    if rb and not rt:
        return "lost" if det_high is not None and det_high < 0 else "undetermined"
    if not ever:
        return "not received"
    return cn_verdict(low, high, min_change_db)


def compare_matrices(
    base,
    test,
    base_label: str = "base",
    test_label: str = "test",
    *,
    input: str = "antenna",
    pairing: str = "auto",
    min_change_db: float = 0.5,
    confidence: float = 0.95,
    unit: str | None = None,
    pairs: tuple[np.ndarray, np.ndarray, float] | None = None,
) -> Comparison:
    """Compare two per-item matrices already read (see :func:`compare_configurations`).

    ``pairs``: the result of :func:`~analysis.compare.pairing.pair_sweeps` on the two matrices'
    start times when the caller has it already (computed here otherwise).

    ``pairing`` is ``"auto"`` (paired when at least half of the smaller side finds a partner
    in time), ``"paired"`` or ``"unpaired"``. ``unit`` (``"station"`` or ``"channel"``) defaults
    to what the matrices are (a census :class:`~analysis.census.StationMatrix` has ``kinds``). Both matrices must have the common fields of
    :class:`survey.store.ChannelMatrix` and :class:`analysis.census.StationMatrix`.
    """
    if unit is None:
        unit = "station" if hasattr(base, "kinds") else "channel"
    if pairing not in ("auto", "paired", "unpaired"):
        raise BadParameterError(f"pairing must be auto, paired or unpaired, not {pairing!r}")
    if not 0.5 <= confidence < 1.0:
        raise BadParameterError(f"confidence {confidence} must be at least 0.5 and below 1, e.g. 0.95")
    if min_change_db < 0:
        raise BadParameterError(f"min change {min_change_db} dB must not be negative")
    freqs = item_axis(base, test)
    stations = hasattr(base, "kinds") and hasattr(test, "kinds")
    base_axis = np.round(np.asarray(base.freqs_hz, np.float64)).astype(np.int64)
    cb, nb, db = _aligned(base, freqs)
    ct, nt, dt = _aligned(test, freqs, onto=base_axis if stations else None)
    names_b, bler_b = _aligned_extra(base, freqs) if stations else (None, None)
    names_t, bler_t = _aligned_extra(test, freqs, onto=base_axis) if stations else (None, None)
    names = [nb_ or nt_ for nb_, nt_ in zip(names_b or [None] * freqs.size, names_t or [None] * freqs.size)]
    rf_b = db.mean(axis=0) if db.shape[0] else np.zeros(freqs.size)
    rf_t = dt.mean(axis=0) if dt.shape[0] else np.zeros(freqs.size)
    # a census station was found as an emission at least once: its C/N is a measurement
    ever = (db.any(axis=0) | dt.any(axis=0)) if unit == "channel" else np.ones(freqs.size, bool)

    bi, ti, tol_s = pairs if pairs is not None else sweep_pairs(base, test)
    smaller = min(cb.shape[0], ct.shape[0])
    paired = pairing == "paired" or (pairing == "auto" and bi.size >= max(1, 0.5 * smaller))
    if pairing == "paired" and bi.size == 0:
        raise MismatchError(
            f"no base sweep of '{base_label}' has a test sweep of '{test_label}' within {tol_s:.1f} s; "
            "use unpaired statistics or alternate the configurations while measuring"
        )
    pct = f"{100 * confidence:g}%"
    if paired:
        pb_, pt_ = cb[bi], ct[ti]
        d_cn = pt_ - pb_
        both = np.isfinite(d_cn)
        cn_iv = paired_t(d_cn, confidence)
        base_mean = column_mean_sd(np.where(both, pb_, np.nan))[0]
        test_mean = base_mean + cn_iv.mean
        d_n = nt[ti] - nb[bi]
        rise_same = column_mean_sd(np.where(both, d_n, np.nan))[0]
        rise_all = column_mean_sd(d_n)[0]
        rise = np.where(cn_iv.n > 0, rise_same, rise_all)
        det_iv = paired_t(dt[ti].astype(np.float32) - db[bi].astype(np.float32), confidence)
        bler = None
        if bler_b is not None and bler_t is not None:
            d_bler = bler_t[ti] - bler_b[bi]
            bler_iv = paired_t(d_bler, confidence)
            bler_base = column_mean_sd(np.where(np.isfinite(d_bler), bler_b[bi], np.nan))[0]
            bler = (bler_base, bler_iv)
        method = (f"paired: {bi.size} base/test sweep pairs closer than {tol_s:.1f} s; mean of the paired C/N "
                  f"differences with its Student t {pct} interval (n - 1 degrees of freedom), from "
                  f"{MIN_PAIRS} pairs up; base and test C/N are means over the same pairs")
    else:
        cn_iv = welch_t(ct, cb, confidence)
        base_mean = column_mean_sd(cb)[0]
        test_mean = base_mean + cn_iv.mean
        rise = welch_t(nt, nb, confidence).mean
        det_iv = welch_t(dt.astype(np.float32), db.astype(np.float32), confidence)
        bler = None
        if bler_b is not None and bler_t is not None:
            bler = (column_mean_sd(bler_b)[0], welch_t(bler_t, bler_b, confidence))
        method = ((("unpaired (as asked): " if pairing == "unpaired" else
                    f"unpaired: sweeps not alternating (only {bi.size} of {smaller} found a partner in time); "))
                  + f"difference of mean C/N with Welch's {pct} t interval (Welch-Satterthwaite degrees of "
                  f"freedom), from {MIN_PAIRS} sweeps per side up")
    items = _items(freqs, base_mean, test_mean, cn_iv, rise, det_iv, rf_b, rf_t, ever, min_change_db)
    items = _with_identity(items, names, bler)
    thresholds = {
        "min_change_db": float(min_change_db),
        "confidence": float(confidence),
        "detected_if_fraction_at_least": 0.5,
        "min_pairs_for_interval": MIN_PAIRS,
        "improved_if": f"{pct} interval of the C/N change wholly above 0 dB",
        "worse_if": f"{pct} interval of the C/N change wholly below 0 dB",
        "unchanged_if": f"{pct} interval wholly within +-{min_change_db:g} dB",
        "undetermined_if": (f"fewer than {MIN_PAIRS} pairs, or an interval that spans 0 dB and reaches beyond "
                            f"+-{min_change_db:g} dB, or a change in detection whose interval spans 0"),
        "gained_if": (f"detected in at least half of the test sweeps and fewer than half of the base sweeps, "
                      f"with the {pct} interval of the paired change in detection above 0"),
        "lost_if": "the same with base and test exchanged",
        "pairing_tolerance_s": _opt(tol_s),
    }
    result = Comparison(
        base=base_label, test=test_label, input=input, method=method, paired=bool(paired),
        thresholds=thresholds, items=tuple(items), summary={}, warnings=(),
        n_base_sweeps=int(cb.shape[0]), n_test_sweeps=int(ct.shape[0]),
        n_pairs=int(bi.size) if paired else 0, unit=unit,
    )
    return replace(result, summary=summarise(result))


def sweep_pairs(base, test) -> tuple[np.ndarray, np.ndarray, float]:
    """:func:`~analysis.compare.pairing.pair_sweeps` on the start times of two matrices' rows."""
    return pair_sweeps(utc_to_epoch_s(base.started_utc), utc_to_epoch_s(test.started_utc))


def _with_identity(items: list[ItemDelta], names: list, bler) -> list[ItemDelta]:
    """Items with their station names and, where RDS blocks were counted in both
    configurations, the block error rates (means over the pairs) and their change with interval."""
    out = []
    for j, item in enumerate(items):
        extra: dict = {}
        if names[j]:
            extra["name"] = names[j]
        if bler is not None:
            base_rate, iv = bler
            d = _opt(iv.mean[j], 6)
            if d is not None and np.isfinite(base_rate[j]):
                b = round(float(base_rate[j]), 6)
                extra.update(base_block_error_rate=b, test_block_error_rate=round(b + d, 6),
                             delta_block_error_rate=d, bler_ci_low=_opt(iv.low[j], 6),
                             bler_ci_high=_opt(iv.high[j], 6))
        out.append(replace(item, **extra) if extra else item)
    return out


def _items(freqs, base_mean, test_mean, cn_iv: Intervals, rise, det_iv: Intervals, rf_b, rf_t, ever,
           min_change_db: float) -> list[ItemDelta]:
    out = []
    for j in range(freqs.size):
        d = _opt(cn_iv.mean[j])
        r = _opt(rise[j])
        lo, hi = _opt(cn_iv.low[j]), _opt(cn_iv.high[j])
        dlo, dhi = _opt(det_iv.low[j]), _opt(det_iv.high[j])
        rb, rt = bool(rf_b[j] >= 0.5), bool(rf_t[j] >= 0.5)
        verdict = _verdict(rb, rt, bool(ever[j]), dlo, dhi, lo, hi, min_change_db)
        if verdict == "not received":  # C/N of noise alone means nothing; the noise rise stays
            d = lo = hi = None
        b_cn = _opt(base_mean[j]) if d is not None else None
        t_cn = None if b_cn is None else round(b_cn + d, 4)
        out.append(ItemDelta(
            freq_hz=int(freqs[j]), base_cn_db=b_cn, test_cn_db=t_cn, delta_cn_db=d, ci_low_db=lo, ci_high_db=hi,
            gain_db=None if d is None or r is None else round(d + r, 4), noise_rise_db=r, verdict=verdict,
            pairs=int(cn_iv.n[j]) if d is not None else 0,
            p_value=_opt(cn_iv.p_value[j], 6) if d is not None else None,
            base_detected_fraction=float(rf_b[j]), test_detected_fraction=float(rf_t[j]),
            detection_change_low=dlo, detection_change_high=dhi,
        ))
    return out


def compare_configurations(
    source: Survey | str | Path,
    base: str,
    test: str,
    *,
    since: str | None = None,
    until: str | None = None,
    min_change_db: float = 0.5,
    confidence: float = 0.95,
    input: str = "antenna",
    pairing: str = "auto",
    channels: bool = False,
) -> Comparison:
    """Compare configuration ``test`` against ``base``, station by station.

    Parameters
    ----------
    source : Survey or path
        The survey (or its database file).
    base, test : str
        Configuration labels (e.g. ``bare`` and ``preamp-a``).
    since, until : str, optional
        ISO 8601 UTC bounds on the sweep start time (``until`` exclusive).
    min_change_db : float
        Equivalence margin (dB): a change whose interval lies within +- this is unchanged.
    confidence : float
        Confidence level of the intervals (default 0.95).
    input : str
        Input label of the sweeps compared (default ``antenna``).
    pairing : str
        ``auto``, ``paired`` or ``unpaired`` (see :func:`compare_matrices`).
    channels : bool
        Compare raster channels instead of the per-item matrix of the survey (stations once
        the census is in place; see :func:`analysis.selection._matrix_for`).

    Raises
    ------
    NoDataError
        A label has no complete sweeps in the selection (the message lists what exists).
    MismatchError
        The sweeps differ in channel bandwidth or band plan.
    """
    survey, opened = as_survey(source)
    try:
        survey.require([base, test], input)
        rows_b = survey.sweeps(base, input, since, until)
        rows_t = survey.sweeps(test, input, since, until)
        notes = settings_warnings(list(rows_b), list(rows_t), base, test)
        if channels:
            mat_b, mat_t, unit = survey.channel_matrix(rows_b), survey.channel_matrix(rows_t), "channel"
        else:
            mat_b, mat_t = survey.item_matrices(rows_b, rows_t)
            unit = "station" if hasattr(mat_b, "kinds") else "channel"
        pairs = sweep_pairs(mat_b, mat_t)  # once: the channels below are the same sweeps in the same order
        result = compare_matrices(mat_b, mat_t, base, test, input=input, pairing=pairing,
                                  min_change_db=min_change_db, confidence=confidence, unit=unit, pairs=pairs)
        if unit == "station":
            whole, (at_b, at_t) = survey.channel_rows(rows_b, rows_t)
            rise, empty = _broadband_noise_rise_rows(whole, at_b, at_t, result.paired, pairs)
            result = replace(result, summary={**result.summary, "broadband_noise_rise_db": rise,
                                              "unoccupied_channels": empty})
    finally:
        if opened:
            survey.close()
    return replace(result, warnings=tuple(notes))


def broadband_noise_rise(base, test, paired: bool) -> tuple[float | None, int]:
    """Median noise rise (dB) over the raster channels that no sweep of either side received,
    and how many there are: the floor's rise where no station is, from the raster detail.

    Paired: the mean of the paired noise differences per channel (the comparison's pairing);
    unpaired: the difference of the mean noise levels. ``(None, 0)`` when every channel held
    a station.
    """
    return _broadband_noise_rise(base, test, paired)


def _broadband_noise_rise_rows(whole, at_base: np.ndarray, at_test: np.ndarray, paired: bool,
                               pairs: tuple[np.ndarray, np.ndarray, float]) -> tuple[float | None, int]:
    """:func:`broadband_noise_rise` of the rows ``at_base`` and ``at_test`` of one channel matrix
    ``whole`` (one frequency axis), with the comparison's ``pairs`` (rows of those): the same
    numbers, reading only the rows' detection flags and the empty channels' noise."""
    if at_base.size == 0 or at_test.size == 0 or whole.freqs_hz.size == 0:
        return None, 0
    received = np.asarray(whole.received)
    empty = ~(received[at_base].any(axis=0) | received[at_test].any(axis=0))
    if not empty.any():
        return None, 0
    cols = np.flatnonzero(empty)
    noise = np.asarray(whole.noise_dbfs)
    bi, ti = pairs[0], pairs[1]
    if paired and bi.size:  # the paired rows only, gathered once
        nb = noise[np.ix_(at_base[bi], cols)].astype(np.float64)
        nt = noise[np.ix_(at_test[ti], cols)].astype(np.float64)
        bi = ti = np.arange(bi.size)
    else:
        nb = noise[np.ix_(at_base, cols)].astype(np.float64)
        nt = noise[np.ix_(at_test, cols)].astype(np.float64)
    return _median_rise(nb, nt, paired, bi, ti), int(empty.sum())


def _median_rise(nb: np.ndarray, nt: np.ndarray, paired: bool, bi: np.ndarray, ti: np.ndarray) -> float | None:
    """Median over the columns of the mean paired noise difference (unpaired: difference of the means)."""
    if paired and bi.size:
        rise = column_mean_sd(nt - nb if bi.size == nb.shape[0] and np.array_equal(bi, ti) and
                              np.array_equal(bi, np.arange(bi.size)) else nt[ti] - nb[bi])[0]
    else:
        rise = column_mean_sd(nt)[0] - column_mean_sd(nb)[0]
    rise = rise[np.isfinite(rise)]
    return round(float(np.median(rise)), 4) if rise.size else None


def _broadband_noise_rise(base, test, paired: bool) -> tuple[float | None, int]:
    freqs = np.intersect1d(base.freqs_hz, test.freqs_hz)
    if freqs.size == 0 or base.sweep_ids.size == 0 or test.sweep_ids.size == 0:
        return None, 0
    cb = np.searchsorted(base.freqs_hz, freqs)
    ct = np.searchsorted(test.freqs_hz, freqs)
    empty = ~(np.asarray(base.received).any(axis=0)[cb] | np.asarray(test.received).any(axis=0)[ct])
    if not empty.any():
        return None, 0
    # only the empty channels' noise, in float64 (the rest is never used)
    nb = np.asarray(base.noise_dbfs)[:, cb[empty]].astype(np.float64)
    nt = np.asarray(test.noise_dbfs)[:, ct[empty]].astype(np.float64)
    bi, ti, _ = sweep_pairs(base, test)
    return _median_rise(nb, nt, paired, bi, ti), int(empty.sum())
