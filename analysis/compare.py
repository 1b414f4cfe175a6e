"""A/B comparison of two configurations: which channels gained or lost C/N, by how much, how sure.

Definitions (the project's measurement vocabulary):

* ``C/N = (P - N) / N`` in dB (what the tool calls SNR), defined only where a channel is received;
* gain ``G = (P_test - N_test) / (P_base - N_base)`` (signal-only power ratio), noise rise
  ``R = N_test / N_base``, and the identity ``delta C/N (dB) = G (dB) - R (dB)``.

How the identity is kept exact for the reported numbers: ``delta_cn_db`` and ``noise_rise_db``
are estimated directly (the location of the per-sweep C/N differences and of the per-sweep
noise differences), and ``gain_db`` is reported as ``delta_cn_db + noise_rise_db``. For a
single pair of sweeps this is exactly the signal-power ratio. ``gain_direct_db`` (the location
of the per-pair signal-power ratios, computed independently) is kept as a check; the two agree
to within the sampling error.

Statistics follow how the data was taken:

* **Paired** (the configurations alternated, e.g. via a switch): each base sweep is paired with
  the nearest unused test sweep closer in time than twice the median sweep spacing. Slow
  fading common to both members of a pair cancels in the differences. Point estimate: the
  median of the paired differences; p-value: Wilcoxon signed-rank test (Wilcoxon 1945,
  :func:`scipy.stats.wilcoxon`); interval: percentile bootstrap of that median (Efron &
  Tibshirani, *An Introduction to the Bootstrap*, 1993, ch. 13), resampling *pairs* (the
  same pair indices for every channel in a replicate). When the Monte Carlo workload would
  be large, the exact bootstrap distribution of a sample order statistic is used instead,
  ``P(X*_(r) <= x_(k)) = P(Binomial(n, k/n) >= r)`` (Maritz & Jarrett, JASA 73, 194-196,
  1978), i.e. the limit of infinitely many replicates.
* **Unpaired** (taken at different times): the Hodges-Lehmann shift (median of all test minus
  base differences) with the distribution-free interval from the Mann-Whitney statistic
  (Hodges & Lehmann 1963; Lehmann, *Nonparametrics*, 1975, ch. 2; normal approximation of
  the critical rank, from memory) and the Mann-Whitney p-value (:func:`scipy.stats.mannwhitneyu`).

A channel counts as received by a configuration when received in at least half of its sweeps;
``base_cn_db`` / ``test_cn_db`` are the left-censored medians of
:mod:`analysis.channel_stats`. ``delta_cn_db`` uses only the pairs (or sweeps) in which the
channel was received by both. An interval needs at least ``min_samples_for_interval`` pairs
(6 at 95 %: with fewer the signed-rank test cannot reach the significance level).

Verdicts (thresholds settable and stated in ``Comparison.thresholds``): *improved* when the
interval lies above 0 dB and the change is at least ``min_change_db``; *worse* likewise below;
*unchanged* otherwise; without an interval (too few sweeps) the threshold alone decides and
the method says so. *gained* / *lost*: received only with test / only with base; *not
received*: by neither; *undetermined*: received by both but never in the same pair.
"""

from __future__ import annotations

import sqlite3
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from analysis.channel_stats import (
    cn_db_from,
    read_matrix,
    select_sweeps,
    statistics_from_arrays,
    utc_to_epoch_s,
)
from analysis.compare_estimators import (
    bootstrap_median_ci,
    exact_bootstrap_median_ci,
    hodges_lehmann_shift,
    mannwhitney_p,
    min_n_for_interval,
    min_n_unpaired,
    pair_sweeps,
    quiet_nanmedian,
    wilcoxon_p,
)
from analysis.errors import BadParameterError, MismatchError
from survey.store import ChannelMatrix, SweepRow, open_for_reading

VERDICTS = ("improved", "unchanged", "worse", "gained", "lost", "not received", "undetermined")

#: Monte Carlo bootstrap is used while ``n_boot * n_pairs * n_channels`` stays below this.
MC_BOOTSTRAP_BUDGET = 40_000_000
#: Unpaired Hodges-Lehmann uses at most this many sweeps per side (seeded random subset).
UNPAIRED_MAX_PER_SIDE = 600


@dataclass(frozen=True)
class ChannelDelta:
    """Comparison of one channel. dB values; None where undefined (see ``verdict``)."""

    freq_hz: int
    base_cn_db: float | None
    test_cn_db: float | None
    delta_cn_db: float | None
    ci_low_db: float | None
    ci_high_db: float | None
    gain_db: float | None
    noise_rise_db: float | None
    verdict: str
    gain_direct_db: float | None = None
    p_value: float | None = None
    n_used: int = 0
    base_received_fraction: float = 0.0
    test_received_fraction: float = 0.0


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_configurations`; ``to_dict()`` gives the JSON form."""

    base: str
    test: str
    input: str
    method: str
    paired: bool
    thresholds: dict
    channels: tuple[ChannelDelta, ...]
    summary: dict
    warnings: tuple[str, ...]
    n_base_sweeps: int
    n_test_sweeps: int
    n_pairs: int

    def to_dict(self) -> dict:
        """Plain dict (JSON-ready apart from NaN, which never occurs: undefined is None)."""
        return {
            "base": self.base,
            "test": self.test,
            "input": self.input,
            "method": self.method,
            "paired": self.paired,
            "n_base_sweeps": self.n_base_sweeps,
            "n_test_sweeps": self.n_test_sweeps,
            "n_pairs": self.n_pairs,
            "thresholds": dict(self.thresholds),
            "channels": [asdict(c) for c in self.channels],
            "summary": dict(self.summary),
            "warnings": list(self.warnings),
        }


# -- settings checks and noise notes ---------------------------------------------------------
def _values(rows: list[SweepRow], name: str) -> list:
    return sorted({getattr(r, name) for r in rows}, key=lambda v: (v is None, v))


def _fmt(values: list, unit: str = "") -> str:
    def one(v):
        if v is None:
            return "auto (tuner AGC)"
        return f"{v:g}{unit}" if isinstance(v, (int, float)) else str(v)
    return " / ".join(one(v) for v in values)


def settings_warnings(rows_b: list[SweepRow], rows_t: list[SweepRow], base: str, test: str) -> list[str]:
    """Refuse comparisons that do not line up; return warnings for differences that only widen
    the uncertainty.

    Raises :class:`MismatchError` when the sweeps differ in band plan or channel bandwidth
    (channel powers then measure different things).
    """
    everything = list(rows_b) + list(rows_t)
    for name, what, unit, remedy in (
        ("band", "band plan", "", "measure both with the same --band, or select sweeps of one band plan"
         " with --since/--until"),
        ("channel_bw_hz", "channel bandwidth", " Hz", "measure both with the same channel bandwidth,"
         " or select matching sweeps with --since/--until"),
    ):
        if len(_values(everything, name)) > 1:
            raise MismatchError(
                f"cannot compare: {what} differs ('{base}': {_fmt(_values(rows_b, name), unit)}; "
                f"'{test}': {_fmt(_values(rows_t, name), unit)}); {remedy}"
            )
    notes = []
    for name, what, unit, effect in (
        ("gain_db", "receiver gain", " dB", "the receiver's own noise and overload margin differ, so the "
         "change includes the receiver's change as well as the configuration's"),
        ("sample_rate_hz", "sample rate", " Hz", "hop plans and filter edges differ; noise-floor estimates "
         "may shift by a few tenths of a dB"),
        ("fft_size", "FFT size", "", "the noise-floor estimator sees a different resolution"),
        ("dwell_s", "dwell", " s", "measurement scatter differs between the two"),
        ("received_margin_db", "detection margin", " dB", "'received' means different things for the two"),
    ):
        vb, vt = _values(rows_b, name), _values(rows_t, name)
        if vb != vt or len(vb) > 1:
            notes.append(f"{what} differs: '{base}' {_fmt(vb, unit)}, '{test}' {_fmt(vt, unit)}; {effect}")
    return notes


def noise_source_note(broadband_db: float | None, median_gain_db: float | None, n_empty: int) -> str:
    """What the broadband noise rise (median over unoccupied channels) suggests.

    With ``delta C/N = G - R``: a floor that rises as much as the signals (``R ~ G``) means
    noise from ahead of the receiver (antenna pick-up or the preamp's own noise) dominates,
    and more gain cannot help; ``R`` well below ``G`` means the receiver's own noise dominated
    before and the test configuration lifts signals above it; ``R > G`` means the test chain
    adds noise beyond its gain. The 1 dB margins are common practice, no source.
    """
    if broadband_db is None:
        return "not available: no unoccupied channel (every channel was received by one configuration)"
    if median_gain_db is None:
        return (f"broadband noise rise {broadband_db:+.1f} dB over {n_empty} unoccupied channels; "
                "no channel received by both, so no gain to compare it with")
    head = f"broadband noise rise {broadband_db:+.1f} dB (median of {n_empty} unoccupied channels), median gain {median_gain_db:+.1f} dB: "
    if broadband_db > median_gain_db + 1.0:
        return head + ("the floor rose more than the signals; the test chain adds noise beyond its gain "
                       "(oscillation, supply noise or overload): check it")
    if broadband_db >= median_gain_db - 1.0:
        return head + ("the floor rose about as much as the signals, so noise from ahead of the receiver "
                       "(outside noise or the preamp's own noise) dominates; more gain will not help. "
                       "Noise-figure runs (terminated input) separate the two")
    return head + (f"the floor rose {median_gain_db - broadband_db:.1f} dB less than the signals: the "
                   "receiver's own noise dominated the base configuration and the test configuration lifts "
                   "signals above it")


_NOISE_INPUTS = ("terminated", "noise-hot", "noise-cold")


def predicted_noise_rise_note(conn: sqlite3.Connection, db_path: str | Path, base: str, test: str,
                              result: Comparison, noise_options: dict | None = None) -> str | dict:
    """Noise rise predicted from noise-figure runs, when they exist for these labels.

    ``noise_options`` are passed to ``analysis.noise_workflow.analyse_noise`` (e.g.
    ``{"enr_db": 15.0}`` for noise-hot/noise-cold runs).
    """
    marks = ",".join("?" * len(_NOISE_INPUTS))
    found = conn.execute(
        f"SELECT DISTINCT configuration, input FROM sweeps WHERE complete = 1 AND input IN ({marks})"
        " AND configuration IN (?, ?)", (*_NOISE_INPUTS, base, test),
    ).fetchall()
    if not found:
        return (f"not available: no noise-figure runs (input terminated, noise-hot or noise-cold) for "
                f"'{base}' or '{test}'")
    try:
        from analysis import noise_workflow
    except ImportError:
        return ("not available: noise-figure runs exist but the noise-figure workflow "
                "(analysis.noise_workflow) is not installed")
    return _predicted_from_workflow(noise_workflow, db_path, base, test, result, noise_options or {})


def _predicted_from_workflow(module, db_path, base: str, test: str, result: Comparison,
                             noise_options: dict) -> str | dict:
    """Noise rise the measured preamp predicts (``predicted_noise_rise_db``) beside the measured one.

    A measured broadband rise more than 1 dB (common practice, no source) above the prediction
    points at noise the preamp's own noise figure does not explain.
    """
    from analysis.errors import AnalysisError

    try:
        noise_result = module.analyse_noise(db_path, base, test, **noise_options)
        freqs = np.asarray([c.freq_hz for c in result.channels], np.float64)
        predicted = np.asarray(module.predicted_noise_rise_db(noise_result, freqs), np.float64)
    except AnalysisError as exc:
        return f"not available: {exc}"
    measured = np.asarray([np.nan if c.noise_rise_db is None else c.noise_rise_db for c in result.channels])
    empty = np.asarray([c.verdict == "not received" for c in result.channels])
    ok = np.isfinite(predicted) & np.isfinite(measured) & empty
    if not np.any(ok):
        return "not available: the noise-figure runs cover none of the unoccupied channels compared"
    pred = float(np.median(predicted[ok]))
    meas = float(np.median(measured[ok]))
    excess = meas - pred
    if excess > 1.0:
        note = (f"the floor rose {excess:.1f} dB more than the preamp's measured noise figure predicts: noise "
                "from outside the preamp's own noise (supply, oscillation, interference or overload)")
    elif excess < -1.0:
        note = (f"the floor rose {-excess:.1f} dB less than predicted: check the noise-figure runs "
                "(ENR, gain setting) and the antenna temperature assumed")
    else:
        note = "the measured noise rise agrees with the preamp's own noise within 1 dB"
    return {"median_predicted_db": pred, "median_measured_db": meas, "excess_db": excess,
            "channels": int(ok.sum()), "note": note}


# -- the comparison -------------------------------------------------------------------------
def _align(matrix: ChannelMatrix, freqs_hz: np.ndarray) -> tuple[np.ndarray, ...]:
    """Power, noise (dBFS), received flags and per-sweep C/N (dB) on a common axis (float32)."""
    if matrix.freqs_hz.size == freqs_hz.size and np.array_equal(matrix.freqs_hz, freqs_hz):
        power, noise, received = matrix.power_dbfs, matrix.noise_dbfs, matrix.received
    else:
        cols = np.searchsorted(freqs_hz, matrix.freqs_hz)
        shape = (matrix.power_dbfs.shape[0], freqs_hz.size)
        power = np.full(shape, np.nan, np.float32)
        noise = np.full(shape, np.nan, np.float32)
        received = np.zeros(shape, bool)
        power[:, cols] = matrix.power_dbfs
        noise[:, cols] = matrix.noise_dbfs
        received[:, cols] = matrix.received
    power = np.asarray(power, np.float32)
    noise = np.asarray(noise, np.float32)
    return power, noise, received, cn_db_from(power, noise, received)


def _opt(x: float | None, digits: int = 4) -> float | None:
    """A finite value as a float rounded to ``digits`` decimals (dB: far below any uncertainty),
    else None."""
    return round(float(x), digits) if x is not None and np.isfinite(x) else None


def _verdict(rb: bool, rt: bool, delta: float | None, lo: float | None, hi: float | None,
             min_change_db: float) -> str:
    if rb and rt:
        if delta is None:
            return "undetermined"
        if lo is None or hi is None:
            if abs(delta) >= min_change_db:
                return "improved" if delta > 0 else "worse"
            return "unchanged"
        if lo > 0 and delta >= min_change_db:
            return "improved"
        if hi < 0 and delta <= -min_change_db:
            return "worse"
        return "unchanged"
    if rt:
        return "gained"
    if rb:
        return "lost"
    return "not received"


def compare_matrices(
    base: ChannelMatrix,
    test: ChannelMatrix,
    base_label: str = "base",
    test_label: str = "test",
    *,
    input: str = "antenna",
    pairing: str = "auto",
    min_change_db: float = 0.5,
    confidence: float = 0.95,
    usable_cn_db: float = 12.0,
    n_boot: int = 2000,
    seed: int = 0,
) -> Comparison:
    """Compare two sets of sweeps already read into matrices (see :func:`compare_configurations`).

    ``pairing`` is ``"auto"`` (paired when at least half of the smaller side finds a partner
    in time), ``"paired"`` or ``"unpaired"``.
    """
    if pairing not in ("auto", "paired", "unpaired"):
        raise BadParameterError(f"pairing must be auto, paired or unpaired, not {pairing!r}")
    if not 0.5 <= confidence < 1.0:
        raise BadParameterError(f"confidence {confidence} must be at least 0.5 and below 1, e.g. 0.95")
    if min_change_db < 0:
        raise BadParameterError(f"min change {min_change_db} dB must not be negative")
    if n_boot < 100:
        raise BadParameterError(f"n_boot {n_boot} is too small for a percentile interval; use at least 100")
    alpha = 1.0 - confidence
    rng = np.random.default_rng(seed)
    freqs = np.union1d(base.freqs_hz, test.freqs_hz).astype(np.int64)
    pb, nb, rb_, cb = _align(base, freqs)
    pt, nt, rt_, ct = _align(test, freqs)
    st_b = statistics_from_arrays(freqs, pb, nb, rb_, cb, base_label, input, levels=False)
    st_t = statistics_from_arrays(freqs, pt, nt, rt_, ct, test_label, input, levels=False)
    rf_b, rf_t = st_b.received_fraction, st_t.received_fraction
    med_b, med_t = st_b.cn_db, st_t.cn_db

    bi, ti, tol_s = pair_sweeps(utc_to_epoch_s(base.started_utc), utc_to_epoch_s(test.started_utc))
    smaller = min(pb.shape[0], pt.shape[0])
    paired = pairing == "paired" or (pairing == "auto" and bi.size >= max(1, 0.5 * smaller))
    if pairing == "paired" and bi.size == 0:
        raise MismatchError(
            f"no base sweep of '{base_label}' has a test sweep of '{test_label}' within {tol_s:.1f} s; "
            "use unpaired statistics or alternate the configurations while measuring"
        )
    min_n = min_n_for_interval(alpha)
    m = freqs.size
    p_values = np.full(m, np.nan)
    if paired:
        d_cn = ct[ti] - cb[bi]
        d_n = nt[ti] - nb[bi]
        # signal-only power 10 log10(P - N) = N + C/N (dB), so the per-pair gain is d_cn + d_n
        d_gain = d_cn + d_n
        n_used = np.sum(np.isfinite(d_cn), axis=0)
        delta = quiet_nanmedian(d_cn, 0)
        rise = quiet_nanmedian(d_n, 0)
        gain_direct = quiet_nanmedian(d_gain, 0)
        exact = n_boot * d_cn.shape[0] * m > MC_BOOTSTRAP_BUDGET
        if exact:
            lo, hi = exact_bootstrap_median_ci(d_cn, confidence)
            how = "exact bootstrap distribution of the median (Maritz-Jarrett), no Monte Carlo"
        else:
            lo, hi = bootstrap_median_ci(d_cn, confidence, n_boot, rng)
            how = f"{n_boot} replicates resampling pairs jointly across channels, seed {seed}"
        for j in np.nonzero(n_used >= 2)[0]:
            p_values[j] = _nan(wilcoxon_p(d_cn[:, j]))
        method = (
            f"paired: {bi.size} base/test sweep pairs closer than {tol_s:.1f} s; Wilcoxon signed-rank "
            f"p-value; percentile bootstrap {100 * confidence:g}% CI of the median of paired C/N "
            f"differences ({how})"
        )
    else:
        d_n = None
        n_used = np.minimum(np.sum(np.isfinite(cb), axis=0), np.sum(np.isfinite(ct), axis=0))
        sb, stt = _subsample(cb.shape[0], rng), _subsample(ct.shape[0], rng)
        delta, lo, hi, rise, gain_direct = (np.full(m, np.nan) for _ in range(5))
        sig_b, sig_t = nb + cb, nt + ct  # signal-only power N + C/N (dBFS), NaN where not received
        for j in range(m):
            delta[j], lo[j], hi[j] = hodges_lehmann_shift(ct[stt, j], cb[sb, j], confidence)
            rise[j] = hodges_lehmann_shift(nt[stt, j], nb[sb, j])[0]
            gain_direct[j] = hodges_lehmann_shift(sig_t[stt, j], sig_b[sb, j])[0]
            if n_used[j] >= 1:
                p_values[j] = _nan(mannwhitney_p(ct[:, j], cb[:, j]))
        capped = max(cb.shape[0], ct.shape[0]) > UNPAIRED_MAX_PER_SIDE
        method = (
            ("unpaired (as asked): " if pairing == "unpaired" else
             f"unpaired: sweeps not alternating (only {bi.size} of {smaller} found a partner in time); ")
            + f"Hodges-Lehmann shift of C/N with its Mann-Whitney-based {100 * confidence:g}% interval; "
            "Mann-Whitney p-value"
            + (f"; shift and interval on a seeded random subset of {UNPAIRED_MAX_PER_SIDE} sweeps per side"
               if capped else "")
        )
        min_n = min_n_unpaired(alpha)
    too_few = n_used < min_n
    lo = np.where(too_few, np.nan, lo)
    hi = np.where(too_few, np.nan, hi)
    if np.any(too_few & np.isfinite(delta)):
        method += (
            f"; channels with fewer than {min_n} usable {'pairs' if paired else 'sweeps per side'} get "
            f"no interval (the test cannot reach {100 * alpha:g}% significance) and a verdict from the "
            "threshold alone"
        )
    channels = []
    for j in range(m):
        rb, rt = bool(rf_b[j] >= 0.5), bool(rf_t[j] >= 0.5)
        both = rb and rt
        d = _opt(delta[j]) if both else None
        r = _opt(rise[j])
        g = None if d is None or r is None else round(d + r, 4)
        lo_j, hi_j = (_opt(lo[j]), _opt(hi[j])) if d is not None else (None, None)
        channels.append(
            ChannelDelta(
                freq_hz=int(freqs[j]),
                base_cn_db=_opt(med_b[j]) if rb else None,
                test_cn_db=_opt(med_t[j]) if rt else None,
                delta_cn_db=d, ci_low_db=lo_j, ci_high_db=hi_j, gain_db=g, noise_rise_db=r,
                verdict=_verdict(rb, rt, d, lo_j, hi_j, min_change_db),
                gain_direct_db=_opt(gain_direct[j]) if d is not None else None,
                p_value=float(p_values[j]) if d is not None and np.isfinite(p_values[j]) else None,
                n_used=int(n_used[j]),
                base_received_fraction=float(rf_b[j]),
                test_received_fraction=float(rf_t[j]),
            )
        )
    thresholds = {
        "min_change_db": float(min_change_db),
        "confidence": float(confidence),
        "usable_cn_db": float(usable_cn_db),
        "usable_cn_db_source": "common practice, no source",
        "received_if_fraction_at_least": 0.5,
        "improved_if": (f"{100 * confidence:g}% interval above 0 dB and change >= {min_change_db:g} dB"),
        "worse_if": (f"{100 * confidence:g}% interval below 0 dB and change <= -{min_change_db:g} dB"),
        "min_samples_for_interval": int(min_n),
        "pairing_tolerance_s": _opt(tol_s),
    }
    result = Comparison(
        base=base_label, test=test_label, input=input, method=method, paired=bool(paired),
        thresholds=thresholds, channels=tuple(channels), summary={}, warnings=(),
        n_base_sweeps=int(pb.shape[0]), n_test_sweeps=int(pt.shape[0]),
        n_pairs=int(bi.size) if paired else 0,
    )
    return replace(result, summary=summarise(result, usable_cn_db))


def _nan(x: float | None) -> float:
    return float("nan") if x is None else float(x)


def _subsample(n: int, rng: np.random.Generator) -> np.ndarray:
    if n <= UNPAIRED_MAX_PER_SIDE:
        return np.arange(n)
    return np.sort(rng.choice(n, UNPAIRED_MAX_PER_SIDE, replace=False))


def summarise(result: Comparison, usable_cn_db: float) -> dict:
    """Counts per verdict, usable stations, median change, best/worst channel, noise rise."""
    ch = result.channels
    counts = {v: 0 for v in VERDICTS}
    for c in ch:
        counts[c.verdict] += 1
    both = [c for c in ch if c.delta_cn_db is not None]
    deltas = np.asarray([c.delta_cn_db for c in both], np.float64)
    gains = np.asarray([c.gain_db for c in both if c.gain_db is not None], np.float64)
    empty = [c.noise_rise_db for c in ch if c.verdict == "not received" and c.noise_rise_db is not None]
    best = max(both, key=lambda c: c.delta_cn_db) if both else None
    worst = min(both, key=lambda c: c.delta_cn_db) if both else None
    broadband = float(np.median(empty)) if empty else None
    median_gain = float(np.median(gains)) if gains.size else None

    def pick(c: ChannelDelta | None) -> dict | None:
        if c is None:
            return None
        return {"freq_hz": c.freq_hz, "delta_cn_db": c.delta_cn_db, "ci_low_db": c.ci_low_db,
                "ci_high_db": c.ci_high_db}

    return {
        "received_base": sum(c.base_received_fraction >= 0.5 for c in ch),
        "received_test": sum(c.test_received_fraction >= 0.5 for c in ch),
        "received_both": len(both),
        "usable_base": sum(c.base_cn_db is not None and c.base_cn_db >= usable_cn_db for c in ch),
        "usable_test": sum(c.test_cn_db is not None and c.test_cn_db >= usable_cn_db for c in ch),
        "usable_cn_db": float(usable_cn_db),
        "usable_cn_db_source": "common practice, no source",
        "median_delta_cn_db": float(np.median(deltas)) if deltas.size else None,
        "median_gain_db": median_gain,
        "best_channel": pick(best),
        "worst_channel": pick(worst),
        "verdict_counts": counts,
        "gained_hz": [c.freq_hz for c in ch if c.verdict == "gained"],
        "lost_hz": [c.freq_hz for c in ch if c.verdict == "lost"],
        "broadband_noise_rise_db": broadband,
        "unoccupied_channels": len(empty),
        "noise_source": noise_source_note(broadband, median_gain, len(empty)),
        "predicted_noise_rise": "not computed",
    }


def compare_configurations(
    db_path: str | Path,
    base: str,
    test: str,
    *,
    since: str | None = None,
    until: str | None = None,
    min_change_db: float = 0.5,
    confidence: float = 0.95,
    usable_cn_db: float = 12.0,
    n_boot: int = 2000,
    seed: int = 0,
    input: str = "antenna",
    pairing: str = "auto",
    noise_options: dict | None = None,
    with_diagnosis: bool = False,
) -> Comparison:
    """Compare configuration ``test`` against ``base`` channel by channel.

    Parameters
    ----------
    db_path : path
        Survey database.
    base, test : str
        Configuration labels (e.g. ``bare`` and ``preamp-a``).
    since, until : str, optional
        ISO 8601 UTC bounds on the sweep start time (``until`` exclusive).
    min_change_db : float
        Smallest |delta C/N| (dB) called improved or worse (default 0.5 dB).
    confidence : float
        Confidence level of the intervals (default 0.95).
    usable_cn_db : float
        C/N (dB) counted as usable FM reception in the summary (default 12 dB, common
        practice, no source).
    n_boot, seed : int
        Bootstrap replicates and seed (paired statistics).
    input : str
        Input label of the sweeps compared (default ``antenna``).
    pairing : str
        ``auto``, ``paired`` or ``unpaired`` (see :func:`compare_matrices`).
    noise_options : dict, optional
        Passed to the noise-figure workflow when noise runs (terminated, noise-hot,
        noise-cold) exist for these labels, e.g. ``{"enr_db": 15.0}``; the summary then
        compares the measured broadband noise rise with the one the preamp's measured noise
        figure predicts.

    Raises
    ------
    NoDataError
        A label has no complete sweeps in the selection (the message lists the labels present).
    MismatchError
        The sweeps differ in channel bandwidth or band plan.
    """
    conn = open_for_reading(db_path)
    try:
        rows_b = select_sweeps(conn, base, input, since, until)
        rows_t = select_sweeps(conn, test, input, since, until)
        notes = settings_warnings(rows_b, rows_t, base, test)
        mat_b = read_matrix(conn, rows_b)
        mat_t = read_matrix(conn, rows_t)
        result = compare_matrices(
            mat_b, mat_t, base, test, input=input, pairing=pairing, min_change_db=min_change_db,
            confidence=confidence, usable_cn_db=usable_cn_db, n_boot=n_boot, seed=seed,
        )
        summary = dict(result.summary)
        summary["predicted_noise_rise"] = predicted_noise_rise_note(conn, db_path, base, test, result,
                                                                    noise_options)
    finally:
        conn.close()
    if with_diagnosis:
        summary["findings"] = _diagnosis_lines(db_path, base, test, noise_options)
    return replace(result, summary=summary, warnings=tuple(notes))


def _diagnosis_lines(db_path: str | Path, base: str, test: str, noise_options: dict | None) -> list[str]:
    """One line per finding of the chain diagnosis, or one line saying why it could not run."""
    from analysis.diagnose import diagnose, summarise_findings
    from analysis.errors import AnalysisError

    try:
        found = diagnose(db_path, base, test, enr_db=(noise_options or {}).get("enr_db"))
    except AnalysisError as exc:
        return [f"diagnosis not available: {exc}"]
    lines = summarise_findings(found.findings)
    return lines or ["no trouble found (" + "; ".join(c.split(":")[0] for c in found.checked) + " checked)"]
