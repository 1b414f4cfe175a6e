"""The report model: every analysis of one A/B survey gathered for a one-page report.

:func:`build_report` runs the analyses the database supports for a base configuration (e.g.
``bare``) and a test configuration (the preamp in the chain) and returns a :class:`Report`:

* the channel-by-channel comparison (:func:`analysis.compare.compare_configurations`);
* the passband fit, its coverage of a target band and a stagger plan
  (:func:`analysis.passband_data.load_gain_curve`, :func:`analysis.passband_report.analyse_passband`);
* noise figures and the outside noise beside ITU-R P.372 (:func:`analysis.noise_workflow.analyse_noise`);
* the fault diagnosis (:func:`analysis.diagnose.diagnose`);
* the overnight series read straight from the store (hop floors, channel matrices);
* the run settings and whether the data are SIMULATED.

A section whose data do not exist is replaced by one line, ``not available: <reason>``, the
reason being the message of the :class:`~analysis.errors.AnalysisError` the analysis raised
(which names the run that would supply the data). Nothing here draws or writes HTML:
:mod:`analysis.report_plots` draws, :mod:`analysis.report_html` renders.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from analysis.channel_stats import masked_cn_db, utc_to_epoch_s
from analysis.compare import Comparison, compare_configurations
from analysis.diagnose import Diagnosis, diagnose, summarise_findings
from analysis.errors import AnalysisError, BadParameterError, NoDataError
from analysis.noise_workflow import NoiseResult, analyse_noise
from analysis.passband import check_target
from analysis.passband_report import PassbandReport, analyse_passband
from analysis.passband_data import load_gain_curve
from bandcensus import __version__
from survey.store import (
    ChannelMatrix,
    SweepRow,
    list_runs,
    list_sweeps,
    open_for_reading,
    read_channel_matrix,
    read_events,
    read_hops,
    utc_now,
)

#: Section keys in page order, with their headings.
SECTIONS = (
    ("summary", "Summary"),
    ("trouble", "Trouble found"),
    ("channels", "Per-channel comparison"),
    ("passband", "Passband"),
    ("noise", "Noise figure and outside noise"),
    ("overnight", "Overnight"),
    ("assumptions", "Assumptions behind the estimates"),
    ("settings", "Run settings"),
    ("safety", "Safety"),
)

#: Safety notes carried by every report (receive-only tool; the work around it is not).
SAFETY_NOTES = (
    "Rooftop and mast work can kill: falls from roofs and ladders are the commonest serious accident. "
    "Work with a second person, use fall protection, and never work on a roof in wind, rain or ice.",
    "Keep every antenna, mast and cable well clear of overhead power lines: if it can fall or swing "
    "into a line, it is too close.",
    "Lightning and grounding: bond the mast and the coax shield to the building's grounding system and "
    "fit a grounding block where the coax enters, as the local electrical code requires. Do not work on "
    "the antenna when thunder is about.",
    "A bias tee puts DC on the coax to power the preamp: equipment that shorts DC at its antenna input "
    "(a splitter, some receivers, a DC-grounded antenna) can be damaged, and so can the preamp. Check "
    "every item on that coax before switching bias power on.",
    "This tool only receives; it transmits nothing. Where local codes or a licensed installer's advice "
    "differ from these notes, follow them.",
)

#: Meaning of the numbers in the table and figures (the project's definitions).
DEFINITIONS = (
    "SNR (C/N) = (P - N) / N in dB: channel power P above the local noise power N = N0 B.",
    "delta = test minus base; gain = ratio of signal-only powers P - N; noise rise = ratio of N; "
    "delta C/N = gain - noise rise.",
    "A channel whose P does not exceed N by the detection margin is 'not received' and has no C/N.",
)


@dataclass(frozen=True)
class OvernightSeries:
    """What the store holds over time for the two configurations (antenna input).

    ``base`` / ``test`` are the channel matrices of each configuration's sweeps in time order;
    ``hops`` the hop rows of all those sweeps with a ``configuration`` key added;
    ``strongest_hz`` / ``weakest_hz`` the received stations with the highest and lowest median
    C/N (None when no station was received).
    """

    base: ChannelMatrix
    test: ChannelMatrix
    hops: tuple[dict, ...] = field(repr=False)
    strongest_hz: int | None
    weakest_hz: int | None

    def cn_series(self, which: str, freq_hz: int) -> tuple[np.ndarray, np.ndarray]:
        """``(epoch_s, cn_db)`` of one channel over the sweeps of ``which`` (``base``/``test``).

        C/N in dB, NaN where the sweep did not receive the channel.
        """
        m = self.base if which == "base" else self.test
        t = utc_to_epoch_s(m.started_utc)
        cols = np.nonzero(m.freqs_hz == int(freq_hz))[0]
        if cols.size == 0:
            return t, np.full(t.size, np.nan)
        return t, np.asarray(masked_cn_db(m)[:, cols[0]], np.float64)


@dataclass(frozen=True)
class RunSettings:
    """Settings of the runs and sweeps the report rests on.

    ``runs`` are rows of :func:`survey.store.list_runs`; ``sweep_settings`` lists
    ``(name, value)`` pairs of the distinct sweep settings; ``simulated_because`` the reasons
    the data count as SIMULATED (empty: measured).
    """

    runs: tuple[dict, ...]
    sweep_settings: tuple[tuple[str, str], ...]
    sweep_counts: tuple[tuple[str, str, int], ...]
    first_utc: str | None
    last_utc: str | None
    simulated_because: tuple[str, ...]
    events: tuple[dict, ...] = ()

    @property
    def simulated(self) -> bool:
        """True when any run is a simulation or a replay of simulated recordings."""
        return bool(self.simulated_because)


@dataclass(frozen=True)
class Report:
    """Everything the page shows. A section that could not be computed is None and its key is
    in ``unavailable`` with the reason (``not available: ...``)."""

    db_path: str
    base: str
    test: str
    input: str
    generated_utc: str
    tool_version: str
    target_hz: tuple[float, float] | None
    target_note: str
    enr_db: float | None
    comparison: Comparison | None
    passband: PassbandReport | None
    noise: NoiseResult | None
    diagnosis: Diagnosis | None
    series: OvernightSeries | None
    settings: RunSettings
    unavailable: dict[str, str]
    summary: tuple[str, ...]
    assumptions: tuple[tuple[str, tuple[str, ...]], ...]
    safety: tuple[str, ...] = SAFETY_NOTES
    build_s: float = 0.0


#: Noise-result columns of which at least one must hold a number for the noise section.
_NOISE_MEASURES = ("receiver_nf_db", "system_nf_db", "preamp_nf_db", "outside_fa_db")


def _measured_noise(result: NoiseResult) -> bool:
    """True when the noise workflow measured a noise figure or the outside noise anywhere."""
    return any(np.any(np.isfinite(result.columns[k])) for k in _NOISE_MEASURES)


def _not_available(exc: AnalysisError) -> str:
    return f"not available: {exc}"


# -- data read directly from the store --------------------------------------------------------
def _fmt_value(v) -> str:
    if v is None:
        return "auto (tuner AGC) / not recorded"
    if isinstance(v, float):
        return f"{v:g}"
    return str(v)


_SWEEP_FIELDS = (
    ("band", "band plan", ""),
    ("channel_bw_hz", "channel bandwidth", " kHz"),
    ("sample_rate_hz", "sample rate", " MS/s"),
    ("gain_db", "receiver gain", " dB"),
    ("dwell_s", "dwell per hop", " ms"),
    ("settle_s", "settle after retune", " ms"),
    ("fft_size", "FFT size", ""),
    ("usable_fraction", "usable fraction of each hop", ""),
    ("dc_guard_hz", "DC guard", " kHz"),
    ("ppm", "frequency correction", " ppm"),
    ("received_margin_db", "detection margin", " dB"),
)
_SCALE = {"channel_bw_hz": 1e-3, "sample_rate_hz": 1e-6, "dwell_s": 1e3, "settle_s": 1e3, "dc_guard_hz": 1e-3}


def _simulated_reasons(runs: list[dict], sweeps: list[SweepRow]) -> list[str]:
    out = []
    for r in runs:
        device = r["device"] if isinstance(r["device"], str) else repr(r["device"])
        if r["source_kind"] == "simulated":
            out.append(f"run {r['id']} is a simulation (source kind 'simulated', seed {r['seed']})")
        elif "simulated" in f"{device} {r['notes']}".lower():
            out.append(f"run {r['id']} ({r['source_kind']}) replays recordings marked simulated")
    if any("simulated" in (s.notes or "").lower() for s in sweeps):
        out.append("sweep notes mark the data as simulated")
    return out


def read_settings(conn, sweeps: list[SweepRow]) -> RunSettings:
    """Runs, distinct sweep settings, sweep counts, time span and events of ``sweeps``."""
    run_ids = sorted({s.run_id for s in sweeps})
    runs = [r for r in list_runs(conn) if r["id"] in run_ids]
    pairs = []
    for name, what, unit in _SWEEP_FIELDS:
        values = sorted({getattr(s, name) for s in sweeps}, key=lambda v: (v is None, str(v)))
        scale = _SCALE.get(name)
        shown = [_fmt_value(v * scale if scale and v is not None else v) + ("" if v is None else unit)
                 for v in values]
        pairs.append((what, " / ".join(shown) if shown else "-"))
    counts: dict[tuple[str, str], int] = {}
    for s in sweeps:
        counts[(s.configuration, s.input)] = counts.get((s.configuration, s.input), 0) + 1
    times = sorted(s.started_utc for s in sweeps)
    events = [e for rid in run_ids for e in read_events(conn, rid)]
    return RunSettings(
        runs=tuple(runs), sweep_settings=tuple(pairs),
        sweep_counts=tuple((c, i, n) for (c, i), n in sorted(counts.items())),
        first_utc=times[0] if times else None, last_utc=times[-1] if times else None,
        simulated_because=tuple(_simulated_reasons(runs, sweeps)), events=tuple(events),
    )


def read_overnight(conn, base_rows: list[SweepRow], test_rows: list[SweepRow]) -> OvernightSeries:
    """Channel matrices and hop floors of the two configurations, in time order.

    Raises :class:`NoDataError` when either configuration has no sweeps of the input.
    """
    if not base_rows or not test_rows:
        lack = [r for r, rows in (("base", base_rows), ("test", test_rows)) if not rows]
        raise NoDataError(f"no antenna sweeps of the {' and '.join(lack)} configuration to follow over time; "
                          "record antenna sweeps of both")
    mat_b = read_channel_matrix(conn, [r.id for r in base_rows])
    mat_t = read_channel_matrix(conn, [r.id for r in test_rows])
    label = {r.id: r.configuration for r in base_rows + test_rows}
    hops = []
    for h in read_hops(conn, list(label)):
        hops.append({**h, "configuration": label[h["sweep_id"]]})
    strongest = weakest = None
    common = np.intersect1d(mat_b.freqs_hz, mat_t.freqs_hz)
    cn = np.concatenate([masked_cn_db(mat_b)[:, np.searchsorted(mat_b.freqs_hz, common)],
                         masked_cn_db(mat_t)[:, np.searchsorted(mat_t.freqs_hz, common)]], axis=0)
    ok = np.mean(np.isfinite(cn), axis=0) >= 0.5 if cn.size else np.zeros(0, bool)
    if np.any(ok):
        med = np.full(common.size, np.nan)
        med[ok] = np.nanmedian(cn[:, ok], axis=0)
        strongest = int(common[int(np.nanargmax(med))])
        weakest = int(common[int(np.nanargmin(med))])
    return OvernightSeries(mat_b, mat_t, tuple(hops), strongest, weakest)


# -- target band --------------------------------------------------------------------------
def default_target_hz(sweeps: list[SweepRow], comparison: Comparison | None,
                      curve_freqs_hz: np.ndarray | None = None) -> tuple[tuple[float, float] | None, str]:
    """Target band when none is given: the band plan's edges, else the span of the channels
    compared, else the span of the gain curve's points (Hz), with a note saying which."""
    from survey.bandplan import parse_band
    from survey.errors import PlanError

    bands = sorted({s.band for s in sweeps})
    if len(bands) == 1:
        try:
            plan = parse_band(bands[0])
            return (float(plan.start_hz), float(plan.stop_hz)), (
                f"target band not given: the band plan '{bands[0]}' edges are used")
        except PlanError:
            pass
    if comparison is not None and comparison.channels:
        freqs = [c.freq_hz for c in comparison.channels]
        if max(freqs) > min(freqs):
            return (float(min(freqs)), float(max(freqs))), (
                "target band not given: the span of the channels measured is used (give --target START-STOP)")
    if curve_freqs_hz is not None and np.size(curve_freqs_hz) >= 2 and np.ptp(curve_freqs_hz) > 0:
        return (float(np.min(curve_freqs_hz)), float(np.max(curve_freqs_hz))), (
            "target band not given: the span of the passband measurement is used (give --target START-STOP)")
    return None, "target band not given and not derivable: give --target START-STOP (MHz)"


# -- plain-words summary --------------------------------------------------------------------
def _mhz_list(freqs_hz, limit: int = 8) -> str:
    shown = [f"{f / 1e6:.2f}" for f in list(freqs_hz)[:limit]]
    more = len(list(freqs_hz)) - limit
    return ", ".join(shown) + (f" and {more} more" if more > 0 else "") + " MHz"


def preamp_verdict(comparison: Comparison) -> str:
    """One-sentence verdict on the test configuration from the verdict counts.

    Stations that are better or newly received are set against stations worse or lost (our own
    rule, stated on the page): more of the first and a median change of at least zero is
    "helps"; the reverse is "hurts"; anything else is "mixed".
    """
    n = comparison.summary["verdict_counts"]
    up, down = n["improved"] + n["gained"], n["worse"] + n["lost"]
    med = comparison.summary.get("median_delta_cn_db")
    counts = (f"{n['improved']} better, {n['worse']} worse, {n['unchanged']} unchanged, "
              f"{n['gained']} gained, {n['lost']} lost")
    if up == 0 and down == 0:
        return f"'{comparison.test}' makes no measurable difference to any station ({counts})."
    if up > down and (med is None or med >= 0):
        return f"On balance '{comparison.test}' helps: {counts}."
    if down > up and (med is None or med <= 0):
        return f"On balance '{comparison.test}' makes reception worse: {counts}."
    return f"The result of '{comparison.test}' is mixed: {counts}."


def summary_lines(report_parts: dict, unavailable: dict[str, str] | None = None) -> list[str]:
    """Plain-words lines for the top of the page (stations gained/lost, median change, verdict,
    main finding, passband, noise); ``unavailable`` gives the reason a comparison is missing."""
    lines: list[str] = []
    cmp_: Comparison | None = report_parts.get("comparison")
    if cmp_ is None and unavailable and "channels" in unavailable:
        lines.append("No per-channel comparison: " + unavailable["channels"].removeprefix("not available: ") + ".")
    if cmp_ is not None:
        s = cmp_.summary
        lines.append(preamp_verdict(cmp_))
        gained, lost = s["gained_hz"], s["lost_hz"]
        lines.append(
            f"Stations received: {s['received_base']} with '{cmp_.base}', {s['received_test']} with "
            f"'{cmp_.test}' ({s['received_both']} with both). "
            + (f"Gained {len(gained)} ({_mhz_list(gained)}). " if gained else "No station gained. ")
            + (f"Lost {len(lost)} ({_mhz_list(lost)})." if lost else "No station lost.")
        )
        med, gain = s["median_delta_cn_db"], s["median_gain_db"]
        if med is not None:
            lines.append(
                f"Median change in SNR (C/N) over the stations received with both: {med:+.1f} dB "
                f"(median gain {gain:+.1f} dB); usable (SNR at least {s['usable_cn_db']:g} dB): "
                f"{s['usable_base']} before, {s['usable_test']} after."
            )
        lines.append(f"Noise: {s['noise_source']}.")
    diag: Diagnosis | None = report_parts.get("diagnosis")
    if diag is not None:
        if diag.findings:
            worst = sorted(diag.findings, key=lambda f: ("info", "warning", "problem").index(f.severity),
                           reverse=True)[0]
            lines.append(f"Main finding: {summarise_findings([worst])[0]}"
                         + (f" ({len(diag.findings)} findings in all)." if len(diag.findings) > 1 else "."))
        else:
            lines.append("Main finding: no clipping, intermodulation, oscillation or added noise found.")
    pb: PassbandReport | None = report_parts.get("passband")
    if pb is not None:
        text = pb.verdict()
        lines.append(text[:1].upper() + text[1:] + ".")
    nr: NoiseResult | None = report_parts.get("noise")
    if nr is not None:
        s = nr.summary
        bits = []
        if s.get("preamp_nf_db") is not None:
            u = s.get("preamp_nf_uncertainty_db")
            bits.append(f"preamp noise figure {s['preamp_nf_db']:.1f}"
                        + (f" ± {u:.1f}" if u is not None else "") + " dB near the passband peak")
        if s.get("receiver_nf_db") is not None:
            bits.append(f"receiver alone {s['receiver_nf_db']:.1f} dB")
        if s.get("outside_fa_db") is not None:
            env = s.get("closest_environment")
            bits.append(f"outside noise Fa {s['outside_fa_db']:.1f} dB"
                        + (f", closest to the ITU-R P.372 '{env}' curve" if env else ""))
        if s.get("max_possible_improvement_db") is not None:
            bits.append(f"no preamp could improve SNR by more than {s['max_possible_improvement_db']:.1f} dB here")
        if bits:
            lines.append("Noise figures: " + "; ".join(bits) + ".")
    return lines


def _assumptions(cmp_, pb, nr, diag) -> list[tuple[str, tuple[str, ...]]]:
    out: list[tuple[str, tuple[str, ...]]] = [("Definitions", DEFINITIONS)]
    if cmp_ is not None:
        t = cmp_.thresholds
        out.append(("Comparison", (
            f"Method: {cmp_.method}.",
            f"Improved if {t['improved_if']}; worse if {t['worse_if']}.",
            f"Usable FM reception taken as SNR of at least {t['usable_cn_db']:g} dB ({t['usable_cn_db_source']}).",
            f"A channel counts as received by a configuration when at least "
            f"{100 * t['received_if_fraction_at_least']:g} % of its sweeps received it.",
            *cmp_.warnings,
        )))
    if pb is not None:
        out.append(("Passband", (f"Gain data: {pb.curve.source}, {pb.curve.n_points} points"
                                 + (" (relative: shape only)" if pb.curve.relative else "") + ".",
                                 f"Model chosen by {pb.fit.criterion}.",
                                 *pb.curve.notes, *pb.fit.notes)))
    if nr is not None:
        out.append(("Noise figures", tuple(nr.assumptions) + (f"Workflows used: {', '.join(nr.workflows)}.",)))
    if diag is not None:
        out.append(("Diagnosis", tuple(diag.notes) + tuple(f"Checked: {c}" for c in diag.checked)))
    out.append(("Overnight figures", (
        "Hop floors are each hop's noise-floor estimate (dBFS/Hz) as stored; hops at different centres "
        "sit at different levels behind a tuned preamp, so follow each band of points, not the spread.",
        "Strongest and weakest stations: highest and lowest median SNR among channels received in at "
        "least half of the sweeps of both configurations together.",
    )))
    return out


def build_report(
    db_path: str | Path,
    base: str,
    test: str,
    *,
    target_hz: tuple[float, float] | None = None,
    enr_db: float | None = None,
    input: str = "antenna",
    seed: int = 0,
    n_boot: int = 2000,
) -> Report:
    """Run every analysis the database supports for ``test`` against ``base``.

    Parameters
    ----------
    db_path : str or Path
        Survey database.
    base, test : str
        Configuration labels without and with the preamp.
    target_hz : (float, float), optional
        Band the preamp should cover, Hz (default: the band plan's edges, else the channels'
        span).
    enr_db : float, optional
        Noise source ENR, dB, for noise-hot/noise-cold sweeps.
    input : str
        Input label of the sweeps compared (default ``antenna``).
    seed, n_boot : int
        Seed and replicates of the bootstrap and fits.

    Raises
    ------
    NoDataError
        ``base`` or ``test`` has no complete sweeps at all (the message lists the labels present).
    BadParameterError
        An invalid target band or identical labels.
    StoreError
        The database cannot be read.
    """
    started = time.monotonic()
    if base == test:
        raise BadParameterError(f"--base and --test are both {base!r}; give the label without and the label with the preamp")
    if target_hz is not None:
        target_hz = check_target(*target_hz)
    conn = open_for_reading(db_path)
    try:
        all_rows = {lab: list_sweeps(conn, configuration=lab) for lab in (base, test)}
        for lab, rows in all_rows.items():
            if not rows:
                present = sorted({r.configuration for r in list_sweeps(conn)})
                raise NoDataError(f"no complete sweeps of configuration {lab!r} in {db_path}; configurations "
                                  f"present: {', '.join(present) or 'none'}; check the spelling")
        settings = read_settings(conn, all_rows[base] + all_rows[test])
        unavailable: dict[str, str] = {}
        try:
            series = read_overnight(conn, [r for r in all_rows[base] if r.input == input],
                                    [r for r in all_rows[test] if r.input == input])
        except AnalysisError as exc:
            series, unavailable["overnight"] = None, _not_available(exc)
    finally:
        conn.close()

    cmp_ = pb = nr = diag = None
    try:
        cmp_ = compare_configurations(db_path, base, test, input=input, seed=seed, n_boot=n_boot,
                                      noise_options=None if enr_db is None else {"enr_db": enr_db})
    except AnalysisError as exc:
        unavailable["channels"] = _not_available(exc)
    target_note = "target band as given"
    try:
        curve = load_gain_curve(db_path, base, test)
        if target_hz is None:
            target_hz, target_note = default_target_hz(all_rows[base] + all_rows[test], cmp_, curve.freqs_hz)
        if target_hz is None:
            raise BadParameterError(target_note)
        pb = analyse_passband(curve, target_hz, seed=seed)
    except AnalysisError as exc:
        unavailable["passband"] = _not_available(exc)
    try:
        nr = analyse_noise(db_path, base, test, enr_db=enr_db)
        if not _measured_noise(nr):
            why = [a for a in nr.assumptions if a.startswith("no ")]
            unavailable["noise"] = ("not available: no noise figure or outside noise could be measured"
                                    + (": " + "; ".join(why) if why else ""))
            nr = None
    except AnalysisError as exc:
        unavailable["noise"] = _not_available(exc)
    try:
        diag = diagnose(db_path, base, test, enr_db=enr_db, seed=seed)
    except AnalysisError as exc:
        unavailable["trouble"] = _not_available(exc)
    parts = {"comparison": cmp_, "passband": pb, "noise": nr, "diagnosis": diag}
    return Report(
        db_path=str(db_path), base=base, test=test, input=input, generated_utc=utc_now(),
        tool_version=__version__, target_hz=target_hz, target_note=target_note, enr_db=enr_db,
        comparison=cmp_, passband=pb, noise=nr, diagnosis=diag, series=series, settings=settings,
        unavailable=unavailable, summary=tuple(summary_lines(parts, unavailable)),
        assumptions=tuple(_assumptions(cmp_, pb, nr, diag)), build_s=time.monotonic() - started,
    )
