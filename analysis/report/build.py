"""The report model: every analysis of one A/B survey gathered for a one-page report.

:func:`build_report` runs the analyses the database supports for a base configuration (e.g.
``bare``) and a test configuration (the preamp in the chain) and returns a :class:`Report`:

* the channel-by-channel comparison (:func:`analysis.compare.core.compare_configurations`);
* the passband fit, its coverage of a target band and a stagger plan
  (:func:`analysis.passband.data.load_gain_curve`, :func:`analysis.passband.report.analyse_passband`);
* noise figures and the outside noise beside ITU-R P.372 (:func:`analysis.noise.workflow.analyse_noise`);
* the fault diagnosis (:func:`analysis.diagnose.core.diagnose`);
* the overnight series read straight from the store (hop floors, channel matrices);
* the run settings and whether the data are SIMULATED.

A section whose data do not exist is replaced by one line, ``not available: <reason>``, the
reason being the message of the :class:`~analysis.errors.AnalysisError` the analysis raised
(which names the run that would supply the data). Nothing here draws or writes HTML:
:mod:`analysis.report.plots` draws, :mod:`analysis.report.html` renders.
"""

from __future__ import annotations

from operator import attrgetter

import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from analysis.channel_stats import utc_to_epoch_s
from analysis.compare.core import Comparison
from analysis.diagnose.core import Diagnosis
from analysis.errors import AnalysisError, BadParameterError, NoDataError
from analysis.noise.arithmetic import EnrTable
from analysis.noise.workflow import NoiseResult
from analysis.passband.fit import check_target
from analysis.passband.report import PassbandReport
from analysis.selection import Survey, as_survey
from analysis.workflows import NoiseOptions, assess, default_target_hz, gain_curve_for, noise_for, passband_for
from survey.store import ChannelMatrix, EventRow, HopRow, RunRow, SweepRow, utc_now
from survey.version import __version__

#: Section keys in page order, with their headings.
SECTIONS = (
    ("summary", "Summary"),
    ("trouble", "Trouble found"),
    ("channels", "Per-station comparison"),
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
    "C/N = (P - N) / N in dB: channel power P above the local noise power N = N0 B.",
    "delta = test minus base; gain = ratio of signal-only powers P - N; noise rise = ratio of N; "
    "delta C/N = gain - noise rise.",
    "A channel whose P does not exceed N by the detection margin is 'not received' and has no C/N.",
)


@dataclass(frozen=True)
class OvernightSeries:
    """What the store holds over time for the two configurations (antenna input).

    ``base`` / ``test`` are the raster channel matrices of each configuration's sweeps in time
    order (the time-by-frequency detail); ``stations_base`` / ``stations_test`` the census
    station matrices of the same sweeps (same stations in both); ``hops`` the hop rows of all
    those sweeps, each with its configuration label; ``strongest_hz`` / ``weakest_hz`` the
    census stations detected in at least half of the sweeps with the highest and lowest median
    C/N (None when no station was); a sideband is never a station, so never named here.
    """

    base: ChannelMatrix
    test: ChannelMatrix
    hops: tuple[tuple[HopRow, str], ...] = field(repr=False)
    strongest_hz: int | None
    weakest_hz: int | None
    stations_base: object = field(default=None, repr=False)
    stations_test: object = field(default=None, repr=False)

    def cn_series(self, which: str, freq_hz: int) -> tuple[np.ndarray, np.ndarray]:
        """``(epoch_s, cn_db)`` of one station over the sweeps of ``which`` (``base``/``test``).

        C/N in dB, NaN where the sweep did not detect the station.
        """
        m = self.stations_base if which == "base" else self.stations_test
        t = utc_to_epoch_s(m.started_utc)
        cols = np.nonzero(np.round(m.freqs_hz).astype(np.int64) == int(freq_hz))[0]
        if cols.size == 0:
            return t, np.full(t.size, np.nan)
        j = cols[0]
        return t, np.where(m.detected[:, j], m.cn_db[:, j], np.nan).astype(np.float64)


@dataclass(frozen=True)
class RunSettings:
    """Settings of the runs and sweeps the report rests on.

    ``runs`` are :class:`survey.store.RunRow` records; ``sweep_settings`` lists
    ``(name, value)`` pairs of the distinct sweep settings; ``simulated_because`` the reasons
    the data count as SIMULATED (empty: measured).
    """

    runs: tuple[RunRow, ...]
    sweep_settings: tuple[tuple[str, str], ...]
    sweep_counts: tuple[tuple[str, str, int], ...]
    first_utc: str | None
    last_utc: str | None
    simulated_because: tuple[str, ...]
    events: tuple[EventRow, ...] = ()

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


def _simulated_reasons(runs: list[RunRow], sweeps: list[SweepRow]) -> list[str]:
    out = []
    for r in runs:
        device = r.device if isinstance(r.device, str) else repr(r.device)
        if r.source_kind == "simulated":
            out.append(f"run {r.id} is a simulation (source kind 'simulated', seed {r.seed})")
        elif "simulated" in f"{device} {r.notes}".lower():
            out.append(f"run {r.id} ({r.source_kind}) replays recordings marked simulated")
    if any("simulated" in (s.notes or "").lower() for s in sweeps):
        out.append("sweep notes mark the data as simulated")
    return out


def read_settings(survey: Survey, sweeps: list[SweepRow]) -> RunSettings:
    """Runs, distinct sweep settings, sweep counts, time span and events of ``sweeps``."""
    run_ids = sorted({s.run_id for s in sweeps})
    runs = [r for r in survey.runs() if r.id in run_ids]
    pairs = []
    for name, what, unit in _SWEEP_FIELDS:
        values = sorted(set(map(attrgetter(name), sweeps)), key=lambda v: (v is None, str(v)))
        scale = _SCALE.get(name)
        shown = [_fmt_value(v * scale if scale and v is not None else v) + ("" if v is None else unit)
                 for v in values]
        pairs.append((what, " / ".join(shown) if shown else "-"))
    counts: dict[tuple[str, str], int] = {}
    for s in sweeps:
        counts[(s.configuration, s.input)] = counts.get((s.configuration, s.input), 0) + 1
    times = sorted(s.started_utc for s in sweeps)
    events = [e for rid in run_ids for e in survey.events(rid)]
    return RunSettings(
        runs=tuple(runs), sweep_settings=tuple(pairs),
        sweep_counts=tuple((c, i, n) for (c, i), n in sorted(counts.items())),
        first_utc=times[0] if times else None, last_utc=times[-1] if times else None,
        simulated_because=tuple(_simulated_reasons(runs, sweeps)), events=tuple(events),
    )


def read_overnight(survey: Survey, base_rows: list[SweepRow], test_rows: list[SweepRow]) -> OvernightSeries:
    """Channel matrices and hop floors of the two configurations, in time order.

    Raises :class:`NoDataError` when either configuration has no sweeps of the input.
    """
    if not base_rows or not test_rows:
        lack = [r for r, rows in (("base", base_rows), ("test", test_rows)) if not rows]
        raise NoDataError(f"no antenna sweeps of the {' and '.join(lack)} configuration to follow over time; "
                          "record antenna sweeps of both")
    mat_b, mat_t = survey.channel_matrices(base_rows, test_rows)  # one read, shared with the census
    label = {r.id: r.configuration for r in base_rows + test_rows}
    hops = [(h, label[h.sweep_id]) for h in survey.hops(list(label))]
    strongest = weakest = None
    st_b, st_t = survey.item_matrices(base_rows, test_rows)
    cn = np.concatenate([np.where(st_b.detected, st_b.cn_db, np.nan), np.where(st_t.detected, st_t.cn_db, np.nan)])
    common = np.round(np.asarray(st_b.freqs_hz, np.float64)).astype(np.int64)
    ok = np.mean(np.isfinite(cn), axis=0) >= 0.5 if cn.size else np.zeros(0, bool)
    if np.any(ok):
        med = np.full(common.size, np.nan)
        med[ok] = np.nanmedian(cn[:, ok], axis=0)
        strongest = int(common[int(np.nanargmax(med))])
        weakest = int(common[int(np.nanargmin(med))])
    return OvernightSeries(mat_b, mat_t, tuple(hops), strongest, weakest, st_b, st_t)


# -- target band --------------------------------------------------------------------------
# -- plain-words summary --------------------------------------------------------------------
def _mhz_list(freqs_hz, limit: int = 8) -> str:
    shown = [f"{f / 1e6:.2f}" for f in list(freqs_hz)[:limit]]
    more = len(list(freqs_hz)) - limit
    return ", ".join(shown) + (f" and {more} more" if more > 0 else "") + " MHz"


def preamp_verdict(comparison: Comparison) -> str:
    """One-sentence verdict on the test configuration from the verdict counts.

    Items helped or gained are set against items hurt or lost (our own rule, stated on the
    page): more of the first is "helps", more of the second "hurts", anything else "mixed";
    undetermined items count for neither.
    """
    n = comparison.summary
    unit = comparison.unit
    up, down = n["helped"] + n["gained"], n["hurt"] + n["lost"]
    counts = (f"{n['helped']} helped, {n['hurt']} hurt, {n['gained']} gained, {n['lost']} lost, "
              f"{n['unchanged']} unchanged, {n['undetermined']} undetermined {unit}s")
    if up == 0 and down == 0:
        return f"'{comparison.test}' makes no difference that the intervals can show ({counts})."
    if up > down:
        return f"On balance '{comparison.test}' helps: {counts}."
    if down > up:
        return f"On balance '{comparison.test}' makes reception worse: {counts}."
    return f"The result of '{comparison.test}' is mixed: {counts}."


def summary_lines(report_parts: dict, unavailable: dict[str, str] | None = None) -> list[str]:
    """Plain-words lines for the top of the page: the shared headlines (:mod:`analysis.headline`),
    then the passband and the noise figures; ``unavailable`` gives the reason a comparison is missing."""
    lines: list[str] = []
    assessment = report_parts.get("assessment")
    if assessment is None and unavailable and "channels" in unavailable:
        lines.append("No comparison: " + unavailable["channels"].removeprefix("not available: ") + ".")
    if assessment is not None:
        lines += list(assessment.headlines)
        lines.append(preamp_verdict(assessment.comparison))
    pb: PassbandReport | None = report_parts.get("passband")
    if pb is not None:
        text = pb.verdict()
        lines.append(text[:1].upper() + text[1:] + ".")
    elif unavailable and "passband" in unavailable:
        lines.append("Passband: " + unavailable["passband"].removeprefix("not available: ") + ".")
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
        if bits:
            lines.append("Noise figures: " + "; ".join(bits) + ".")
    return lines


def _assumptions(cmp_, pb, nr, diag) -> list[tuple[str, tuple[str, ...]]]:
    out: list[tuple[str, tuple[str, ...]]] = [("Definitions", DEFINITIONS)]
    if cmp_ is not None:
        t = cmp_.thresholds
        out.append(("Comparison", (
            f"Method: {cmp_.method}.",
            f"Improved if {t['improved_if']}; worse if {t['worse_if']}; unchanged if {t['unchanged_if']}; "
            f"undetermined if {t['undetermined_if']}.",
            f"Gained if {t['gained_if']}; lost: {t['lost_if']}.",
            _listenable_note(cmp_.summary["listenable"]),
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
        "Strongest and weakest stations: highest and lowest median C/N among channels detected in at "
        "least half of the sweeps of both configurations together.",
    )))
    return out


#: The steps :func:`build_report` reports through ``on_step`` (the page's figures come after).
REPORT_STEPS = ("overnight series", "comparison, noise and diagnosis", "passband")


def build_report(
    source: Survey | str | Path,
    base: str,
    test: str,
    *,
    target_hz: tuple[float, float] | None = None,
    enr_db: float | None = None,
    enr_table: EnrTable | None = None,
    cold_k: float = 290.0,
    input: str = "antenna",
    seed: int = 0,
    on_step: Callable[[str, int, int], None] | None = None,
) -> Report:
    """Run every analysis the database supports for ``test`` against ``base``.

    Parameters
    ----------
    source : Survey or path
        The survey (or its database file).
    base, test : str
        Configuration labels without and with the preamp.
    target_hz : (float, float), optional
        Band the preamp should cover, Hz (default: the band plan's edges, else the channels'
        span).
    enr_db : float, optional
        Noise source ENR, dB, for noise-hot/noise-cold sweeps.
    input : str
        Input label of the sweeps compared (default ``antenna``).
    enr_table, cold_k
        ENR table instead of ``enr_db``; physical temperature of the termination, K.
    seed : int
        Seed of the fits.
    on_step : callable, optional
        Progress: called as ``on_step(what, k, n)`` before each of the :data:`REPORT_STEPS`
        steps (the library never prints).

    Raises
    ------
    NoDataError
        ``base`` or ``test`` has no complete sweeps at all (the message lists the labels present),
        or the database predates the station census (schema 1; the message says how to migrate it).
    BadParameterError
        An invalid target band or identical labels.
    StoreError
        The database cannot be read.
    """
    started = time.monotonic()

    def step(what: str) -> None:
        if on_step is not None:
            on_step(what, REPORT_STEPS.index(what), len(REPORT_STEPS))

    if base == test:
        raise BadParameterError(f"--base and --test are both {base!r}; give the label without and the label with the preamp")
    if target_hz is not None:
        target_hz = check_target(*target_hz)
    survey, opened = as_survey(source)
    try:
        survey.require([base, test])
        survey.require_census()  # every section counts stations: refuse a schema-1 database at once
        all_rows = {lab: list(survey.find_sweeps(lab)) for lab in (base, test)}
        settings = read_settings(survey, all_rows[base] + all_rows[test])
        unavailable: dict[str, str] = {}
        step("overnight series")
        try:
            series = read_overnight(survey, [r for r in all_rows[base] if r.input == input],
                                    [r for r in all_rows[test] if r.input == input])
        except AnalysisError as exc:
            series, unavailable["overnight"] = None, _not_available(exc)
        options = NoiseOptions(enr_db=enr_db, enr_table=enr_table, cold_k=cold_k)
        cmp_ = pb = nr = diag = assessment = None
        step("comparison, noise and diagnosis")
        try:
            assessment = assess(survey, base, test, options=options, seed=seed, input=input, target_hz=target_hz)
            cmp_, nr, diag = assessment.comparison, assessment.noise, assessment.diagnosis
            if assessment.diagnosis is None:
                unavailable["trouble"] = assessment.diagnosis_note
            if nr is None:
                unavailable["noise"] = f"not available: {assessment.noise_note}"
        except AnalysisError as exc:
            unavailable["channels"] = _not_available(exc)
        if nr is None and "noise" not in unavailable:
            nr, why = noise_for(survey, base, test, options)
            if nr is None:
                unavailable["noise"] = f"not available: {why}"
        if nr is not None and not _measured_noise(nr):
            why = [a for a in nr.assumptions if a.startswith("no ")]
            unavailable["noise"] = ("not available: no noise figure or outside noise could be measured"
                                    + (": " + "; ".join(why) if why else ""))
            nr = None
        target_note = "target band as given"
        step("passband")
        curve, why = gain_curve_for(survey, base, test)
        if target_hz is None:
            target_hz, target_note = default_target_hz(all_rows[base] + all_rows[test], cmp_,
                                                       curve.freqs_hz if curve is not None else np.zeros(0))
        try:
            if target_hz is None:
                raise BadParameterError(target_note)
            pb, reason = passband_for(survey, base, test, target_hz, seed=seed)
            if pb is None:
                unavailable["passband"] = f"not available: {reason}"
        except AnalysisError as exc:
            unavailable["passband"] = _not_available(exc)
    finally:
        if opened:
            survey.close()
    parts = {"assessment": assessment, "passband": pb, "noise": nr}
    return Report(
        db_path=str(survey.db_path), base=base, test=test, input=input, generated_utc=utc_now(),
        tool_version=__version__, target_hz=target_hz, target_note=target_note, enr_db=enr_db,
        comparison=cmp_, passband=pb, noise=nr, diagnosis=diag, series=series, settings=settings,
        unavailable=unavailable, summary=tuple(summary_lines(parts, unavailable)),
        assumptions=tuple(_assumptions(cmp_, pb, nr, diag)), build_s=time.monotonic() - started,
    )


def _listenable_note(listenable: dict) -> str:
    """The listenable thresholds, stated once; a published source is named, a rule of thumb is
    not labelled in the page (its provenance is in the JSON and the README)."""
    source = str(listenable.get("source") or "")
    cited = "" if not source or "no source" in source else f" ({source})"
    return (f"Listenable mono from C/N {listenable['mono_cn_db']:g} dB, listenable stereo from "
            f"{listenable['stereo_cn_db']:g} dB{cited}.")
