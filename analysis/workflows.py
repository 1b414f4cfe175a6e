"""Compose the analyses for one survey, each computed once: what ``compare``, ``diagnose``, the report
and the demo call.

No analysis calls another's entry point; this module is where they meet. Every result is kept
in the :class:`~analysis.selection.Survey` (``Survey.memo``), so the comparison, the noise
workflow, the gain curve and the diagnosis are each computed once however many commands or
report sections use them. Missing inputs are not errors here: each part that cannot be
computed carries the reason, and the rest goes on.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from analysis.compare.core import Comparison, compare_configurations
from analysis.diagnose.core import Diagnosis, diagnose, summarise_findings
from analysis.errors import AnalysisError, BadParameterError
from analysis.findings import Finding
from analysis.headline import headline_lines
from analysis.noise.arithmetic import EnrTable
from analysis.noise.workflow import NoiseResult, analyse_noise
from analysis.passband.data import GainCurve, load_gain_curve
from analysis.passband.fit import coverage, fit_trust
from analysis.passband.report import PassbandReport, analyse_passband
from survey.bandplan import parse_band
from survey.errors import PlanError
from analysis.physics import ceiling_checks, noise_split_note, predicted_noise_rise_note
from analysis.selection import Survey, as_survey

#: Inputs of noise-figure runs.
NOISE_RUN_INPUTS = ("terminated", "noise-hot", "noise-cold")


@dataclass(frozen=True)
class NoiseOptions:
    """The noise source and receiver facts every command that uses a noise source accepts.

    ``enr_db`` (flat) or ``enr_table`` (not both); ``cold_k`` the physical temperature of the
    source when off and of the termination, K; ``receiver_nf_db`` an assumed receiver NF.
    """

    enr_db: float | None = None
    enr_table: EnrTable | None = None
    cold_k: float = 290.0
    receiver_nf_db: float | None = None

    def key(self) -> tuple:
        return (self.enr_db, None if self.enr_table is None else self.enr_table.source, self.cold_k,
                self.receiver_nf_db)

    def workflow_kwargs(self) -> dict:
        """Keyword arguments of :func:`analysis.noise.workflow.analyse_noise`."""
        return {"enr_db": self.enr_db, "enr_table": self.enr_table, "cold_k": self.cold_k,
                "receiver_nf_db": self.receiver_nf_db}


def _reason(exc: AnalysisError) -> str:
    return str(exc)


def gain_curve_for(survey: Survey, base: str, test: str) -> tuple[GainCurve | None, str]:
    """The preamp's gain curve (best data present), or None with the reason; computed once."""
    def compute():
        try:
            return load_gain_curve(survey, base, test), ""
        except AnalysisError as exc:
            return None, _reason(exc)
    return survey.memo(("gain_curve", base, test), compute)


def has_noise_runs(survey: Survey, labels) -> bool:
    """True when any of ``labels`` has terminated or noise-source sweeps."""
    return any(survey.has(label, inp) for label in labels if label for inp in NOISE_RUN_INPUTS)


def noise_for(survey: Survey, receiver: str, system: str | None,
              options: NoiseOptions) -> tuple[NoiseResult | None, str]:
    """The noise workflow for ``receiver`` (and ``system``), or None with the reason; computed once."""
    def compute():
        if not has_noise_runs(survey, (receiver, system)):
            return None, (f"no noise-figure runs (input terminated, noise-hot or noise-cold) for '{receiver}'"
                          + (f" or '{system}'" if system else ""))
        try:
            return analyse_noise(survey, receiver, system, **options.workflow_kwargs()), ""
        except AnalysisError as exc:
            return None, _reason(exc)
    return survey.memo(("noise", receiver, system, options.key()), compute)


def diagnosis_for(survey: Survey, base: str, test: str, options: NoiseOptions, *, attenuated: str | None = None,
                  attenuation_db: float | None = None, clip_threshold: float | None = None,
                  seed: int = 0) -> Diagnosis:
    """The chain diagnosis with the shared gain curve and receiver noise; computed once."""
    def compute():
        curve, why = gain_curve_for(survey, base, test)
        rx, rx_why = noise_for(survey, base, None, options) if options.enr_db is not None or \
            options.enr_table is not None else (None, "")
        extra = {} if clip_threshold is None else {"clip_threshold": clip_threshold}
        return diagnose(survey, base, test, gain_curve=curve, gain_curve_note=why or "no gain curve",
                        receiver_noise=rx, receiver_noise_note=rx_why, attenuated=attenuated,
                        attenuation_db=attenuation_db, receiver_nf_db=options.receiver_nf_db,
                        ambient_k=options.cold_k, seed=seed, **extra)
    key = ("diagnosis", base, test, options.key(), attenuated, attenuation_db, clip_threshold, seed)
    return survey.memo(key, compute)


def diagnose_chain(source: Survey | str | Path, base: str, test: str, *, enr_db: float | None = None,
                   enr_table: EnrTable | None = None, cold_k: float = 290.0, receiver_nf_db: float | None = None,
                   attenuated: str | None = None, attenuation_db: float | None = None,
                   clip_threshold: float | None = None, seed: int = 0,
                   target_hz: tuple[float, float] | None = None) -> Diagnosis:
    """:func:`analysis.diagnose.core.diagnose` with its inputs (gain curve, receiver noise) measured
    from the survey, plus the passband coverage check (:func:`passband_coverage`): the whole
    ``diagnose`` command as one call. ``target_hz`` defaults to the band plan's edges."""
    if base == test:
        raise BadParameterError(
            f"--base and --test are both {base!r}; give the label without and the label with the preamp")
    survey, opened = as_survey(source)
    try:
        survey.require([base, test, attenuated])
        options = NoiseOptions(enr_db, enr_table, cold_k, receiver_nf_db)
        diag = diagnosis_for(survey, base, test, options, attenuated=attenuated, attenuation_db=attenuation_db,
                             clip_threshold=clip_threshold, seed=seed)
        found, line = passband_coverage(survey, base, test, target_hz, seed=seed)
        return replace(diag, findings=tuple(diag.findings) + tuple(found), checked=tuple(diag.checked) + (line,))
    finally:
        if opened:
            survey.close()


def passband_coverage(survey: Survey, base: str, test: str, target_hz: tuple[float, float] | None = None, *,
                      seed: int = 0) -> tuple[list[Finding], str]:
    """Whether the test configuration's passband covers the stations heard in the target band.

    Stations are the census stations of the antenna sweeps of both configurations detected in at
    least half of either's sweeps; the passband is the trusted fit of :func:`passband_for`.
    Returns the findings (:func:`passband_findings`) and one "Checked" line saying what was
    found or why the check could not be made.
    """
    if target_hz is None:
        sweeps = list(survey.find_sweeps(base)) + list(survey.find_sweeps(test))
        target_hz, _ = default_target_hz(sweeps, None)
    if target_hz is None:
        return [], "passband coverage: not checked (no target band: give --target START-STOP)"
    lo, hi = target_hz
    try:
        rows_b, rows_t = survey.sweeps(base, "antenna"), survey.sweeps(test, "antenna")
        mat_b, mat_t = survey.item_matrices(rows_b, rows_t)
    except AnalysisError as exc:
        return [], f"passband coverage: not checked ({exc})"
    heard_mask = (mat_b.detected.mean(axis=0) >= 0.5) | (mat_t.detected.mean(axis=0) >= 0.5)
    heard = [float(f) for f in np.asarray(mat_b.freqs_hz)[heard_mask]]
    try:
        pb, why = passband_for(survey, base, test, target_hz, seed=seed)
    except AnalysisError as exc:
        pb, why = None, str(exc)
    if pb is None:
        return [], f"passband coverage: not checked ({why})"
    cov = coverage(pb.fit, pb.coverage.target_hz, heard)
    e_lo, e_hi = pb.fit.edges_3db_hz
    return passband_findings(pb, heard), (
        f"passband coverage: -3 dB edges {e_lo / 1e6:.2f}-{e_hi / 1e6:.2f} MHz (fitted to the {pb.curve.source} gain curve) "
        f"cover {len(cov.covered_stations_hz)} of {len(cov.stations_in_target_hz)} stations heard in "
        f"{lo / 1e6:g}-{hi / 1e6:g} MHz")


def added_noise_for(survey: Survey, base: str, test: str, options: NoiseOptions) -> tuple[str, Finding | None]:
    """Noise added after the preamp, as every command states it: the chain diagnosis's added-noise
    check (:func:`analysis.diagnose.noise_checks.check_added_noise`, the fit
    ``N_test = G N_base + a G + beta``, through :func:`diagnosis_for`), computed once.

    Returns ``(line, finding)``: the finding's summary line (:func:`summarise_findings`, the
    words ``compare`` and the report print) and the finding; without one, what the check said
    (or why it could not run) and None.
    """
    try:
        diag = diagnosis_for(survey, base, test, options)
    except AnalysisError as exc:
        return f"added-noise: not checked ({exc})", None
    found = [f for f in diag.findings if f.kind == "added-noise"]
    if found:
        return summarise_findings(found[:1])[0], found[0]
    return next((c for c in diag.checked if c.startswith("added-noise")), "added-noise: not checked"), None


def comparison_for(survey: Survey, base: str, test: str, **kwargs) -> Comparison:
    """:func:`analysis.compare.core.compare_configurations` on the survey; computed once per options."""
    key = ("comparison", base, test, tuple(sorted(kwargs.items())))
    return survey.memo(key, lambda: compare_configurations(survey, base, test, **kwargs))


def default_target_hz(sweeps, comparison: Comparison | None,
                      curve_freqs_hz: np.ndarray | None = None) -> tuple[tuple[float, float] | None, str]:
    """Target band when none is given: the band plan's edges, else the span of the items
    compared, else the span of the gain curve's points (Hz), with a note saying which."""
    bands = sorted({s.band for s in sweeps})
    if len(bands) == 1:
        try:
            plan = parse_band(bands[0])
            return (float(plan.start_hz), float(plan.stop_hz)), (
                f"target band not given: the band plan '{bands[0]}' edges are used")
        except PlanError:
            pass
    if comparison is not None and comparison.items:
        freqs = [c.freq_hz for c in comparison.items]
        if max(freqs) > min(freqs):
            return (float(min(freqs)), float(max(freqs))), (
                "target band not given: the span of the channels measured is used (give --target START-STOP)")
    if curve_freqs_hz is not None and np.size(curve_freqs_hz) >= 2 and np.ptp(curve_freqs_hz) > 0:
        return (float(np.min(curve_freqs_hz)), float(np.max(curve_freqs_hz))), (
            "target band not given: the span of the passband measurement is used (give --target START-STOP)")
    return None, "target band not given and not derivable: give --target START-STOP (MHz)"


def passband_findings(report: PassbandReport | None, stations_hz) -> list[Finding]:
    """A finding when a trusted passband leaves target-band stations below its -3 dB edges
    ("covers 1 of 8 stations in 88-100 MHz")."""
    if report is None:
        return []
    cov = coverage(report.fit, report.coverage.target_hz, stations_hz)
    n_in, n_cov = len(cov.stations_in_target_hz), len(cov.covered_stations_hz)
    if n_in == 0 or n_cov == n_in:
        return []
    lo, hi = cov.target_hz
    fit = report.fit
    return [Finding(
        kind="passband", freq_hz=fit.peak_hz, severity="problem" if n_cov < n_in / 2 else "warning",
        evidence={"stations_in_target_count": n_in, "covered_stations_count": n_cov,
                  "edge_low_3db_hz": fit.edges_3db_hz[0], "edge_high_3db_hz": fit.edges_3db_hz[1],
                  "target_low_hz": lo, "target_high_hz": hi},
        advice=(f"the passband covers {n_cov} of {n_in} stations in {lo / 1e6:g}-{hi / 1e6:g} MHz: retune the "
                "preamp's circuits (see 'bandcensus passband') or choose a wider preamp"),
    )]


@dataclass(frozen=True)
class Assessment:
    """Everything the ``compare`` command and the report print about one base/test pair."""

    comparison: Comparison
    noise: NoiseResult | None
    noise_note: str
    diagnosis: Diagnosis | None
    diagnosis_note: str
    findings: tuple[Finding, ...]
    ceiling: dict
    predicted_noise_rise: dict | str
    noise_split: str
    headlines: tuple[str, ...] = field(default=())


def assess(source: Survey | str | Path, base: str, test: str, *, options: NoiseOptions = NoiseOptions(),
           with_diagnosis: bool = True, target_hz: tuple[float, float] | None = None, seed: int = 0,
           **compare_kwargs) -> Assessment:
    """Compare ``test`` with ``base`` and check the result against the physics and the diagnosis.

    ``compare_kwargs`` go to :func:`analysis.compare.core.compare_configurations`. The noise
    workflow runs when noise-figure runs exist (its ceiling and noise split join the result);
    the diagnosis unless ``with_diagnosis`` is False; the passband coverage check uses
    ``target_hz`` (default: the band plan's edges).
    """
    survey, opened = as_survey(source)
    try:
        result = comparison_for(survey, base, test, **compare_kwargs)
        noise, noise_note = noise_for(survey, base, test, options)
        findings: list[Finding] = []
        diag, diag_note = None, "not looked for (diagnosis skipped)"
        if with_diagnosis:
            try:
                diag = diagnosis_for(survey, base, test, options, seed=seed)
                diag_note = ""
                findings += list(diag.findings)
            except AnalysisError as exc:
                diag_note = f"not available: {exc}"
        ceiling, ceiling_findings = ceiling_checks(result, noise)
        findings += ceiling_findings
        if target_hz is None:
            sweeps = list(survey.find_sweeps(base)) + list(survey.find_sweeps(test))
            target_hz, _ = default_target_hz(sweeps, result)
        if target_hz is not None:
            try:
                pb, _ = passband_for(survey, base, test, target_hz, seed=seed)
            except AnalysisError:
                pb = None
            heard = [c.freq_hz for c in result.items
                     if c.base_detected_fraction >= 0.5 or c.test_detected_fraction >= 0.5]
            findings += passband_findings(pb, heard)
        pred = predicted_noise_rise_note(noise, result) if noise is not None else f"not available: {noise_note}"
        split = noise_split_note(noise, ceiling)
    finally:
        if opened:
            survey.close()
    partial = Assessment(result, noise, noise_note, diag, diag_note, tuple(findings), ceiling, pred, split)
    return Assessment(**{**partial.__dict__, "headlines": tuple(headline_lines(partial))})


#: Gain-curve sources tried in turn when a fit cannot be trusted (densest first after the best).
_FALLBACK_SOURCES = ("noise-source", "noise-floor", "stations")


def passband_for(survey: Survey, base: str, test: str, target_hz: tuple[float, float], *,
                 max_circuits: int | None = None, circuits: int | None = None, q_unloaded: float | None = None,
                 seed: int = 0):
    """A passband report whose fit can be trusted, or ``(None, reason)``; computed once.

    The best gain curve present is fitted first; when the fit has fewer than 5 points, sits
    on a parameter bound or leaves residuals above its points' uncertainty
    (:func:`analysis.passband.fit.fit_trust`), the other sources are tried (noise-source
    spectra, then the noise-floor rise, which is dense), and failing all: "not enough data to
    fit". Returns ``(PassbandReport | None, reason)``.
    """
    def compute():
        reasons = []
        curve, why = gain_curve_for(survey, base, test)
        tried = []
        candidates = [curve] if curve is not None else []
        if curve is None:
            reasons.append(why)
        for prefer in _FALLBACK_SOURCES:
            candidates.append(prefer)
        for cand in candidates:
            if isinstance(cand, str):
                try:
                    cand = load_gain_curve(survey, base, test, prefer=cand)
                except AnalysisError:
                    continue
            if cand.source in tried:
                continue
            tried.append(cand.source)
            try:
                report = analyse_passband(cand, target_hz, seed=seed, circuits=circuits, q_unloaded=q_unloaded,
                                          **({} if max_circuits is None else {"max_circuits": max_circuits}))
            except AnalysisError as exc:
                reasons.append(f"{cand.source}: {exc}")
                continue
            ok, why_not = fit_trust(report.fit, cand.freqs_hz, cand.gain_db, cand.sigma_db)
            if ok:
                return report, ""
            reasons.append(f"{cand.source}: {why_not}")
        return None, "not enough data to fit (" + "; ".join(r for r in reasons if r) + ")"
    return survey.memo(("passband", base, test, tuple(target_hz), max_circuits, circuits, q_unloaded, seed), compute)
