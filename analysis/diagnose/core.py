"""Fault diagnosis of a preamp chain: name the way a preamp makes reception worse, with evidence.

A preamp that makes things worse usually does so in one of four ways, each with its own
fingerprint in a survey that compares a base configuration (e.g. ``bare``) with a test
configuration (the preamp in the chain):

``clipping``
    The receiver's 8-bit converter reaches its rails (``hops.clip_fraction``).
``intermodulation``
    Strong carriers ``f1, f2`` mix into third-order products at ``2 f1 - f2``: a channel
    appears or rises by more than the preamp's gain where such a product lands. Through a
    known attenuator of ``X`` dB a real station drops by ``X``, a third-order product by ``3X``
    (``P_IM3 = 3 P_in - 2 IIP3``).
``oscillation``
    A narrow, strong, unmodulated line present with the preamp only.
``added-noise``
    Noise that does not follow the preamp's gain curve: noise entering after the tuned
    circuits, typically from a noisy supply.

:func:`diagnose` runs every check the database supports and returns a :class:`Diagnosis`
(the findings, what was checked with its numbers, and notes). :func:`summarise_findings`
gives one line per finding for other reports.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from analysis.errors import BadParameterError, NoDataError
import analysis.diagnose.checks as checks
import analysis.diagnose.lines as lines_mod
import analysis.diagnose.noise_checks as diagnose_noise
from analysis.diagnose.data import gain_model, hop_rows, spill_channels, summarise_channels
from analysis.findings import KINDS, SEVERITIES, Finding
from analysis.noise.workflow import NoiseResult
from analysis.passband.data import GainCurve
from analysis.selection import Survey, as_survey

#: Default clipping threshold: fraction of 8-bit samples at the rails per hop (common practice,
#: no source).
DEFAULT_CLIP_THRESHOLD = 1e-4


@dataclass(frozen=True)
class Diagnosis:
    """Result of :func:`diagnose`: findings, what was checked (with numbers) and notes."""

    base: str
    test: str
    findings: tuple[Finding, ...]
    checked: tuple[str, ...]
    notes: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict:
        """The JSON form ``{"base", "test", "findings", "checked", "notes"}``."""
        return {
            "base": self.base,
            "test": self.test,
            "findings": [f.to_dict() for f in self.findings],
            "checked": list(self.checked),
            "notes": list(self.notes),
        }

    def of_kind(self, kind: str) -> list[Finding]:
        """Findings of one kind."""
        return [f for f in self.findings if f.kind == kind]


def _mhz(freq_hz: float | None) -> str:
    return "broadband" if freq_hz is None else f"{freq_hz / 1e6:.3f} MHz"


def summarise_findings(findings) -> list[str]:
    """One plain line per finding, e.g. ``"problem: oscillation at 96.730 MHz (-31.2 dBFS)"``.

    For the comparison summary, the demo and the HTML report.
    """
    lines = []
    for f in findings:
        ev = f.evidence
        detail = ""
        if f.kind == "clipping":
            detail = (f"{int(ev.get('hops_above_count', 0))} hop(s) clip, worst fraction "
                      f"{ev.get('max_clip_fraction', float('nan')):.2g}; try {ev.get('suggested_gain_reduction_db', 0):.0f} dB less gain")
        elif f.kind == "intermodulation":
            detail = (f"third-order product of {ev['carrier1_freq_hz'] / 1e6:.1f} and "
                      f"{ev['carrier2_freq_hz'] / 1e6:.1f} MHz")
        elif f.kind == "oscillation":
            detail = f"line at {ev.get('level_dbfs', float('nan')):.1f} dBFS"
        elif f.kind == "added-noise":
            parts = [f"{ev.get('excess_db', float('nan')):.1f} dB above the receiver's own floor"]
            if "added_noise_k" in ev:
                parts.append(f"about {ev['added_noise_k']:.0f} K")
            elif "added_noise_min_k" in ev:
                parts.append(f"at least {ev['added_noise_min_k']:.0f} K")
            if "lost_cn_median_db" in ev:
                parts.append(f"{ev['lost_cn_median_db']:.1f} dB of C/N lost (median)")
            detail = ", ".join(parts)
        elif f.kind == "passband":
            lines.append(f"{f.severity}: the passband covers {int(ev['covered_stations_count'])} of "
                         f"{int(ev['stations_in_target_count'])} stations in {ev['target_low_hz'] / 1e6:g}-"
                         f"{ev['target_high_hz'] / 1e6:g} MHz")
            continue
        elif f.kind == "measurement":
            detail = (f"C/N change {ev['delta_cn_db']:+.1f} dB, interval from {ev['ci_low_db']:+.1f} dB, above the "
                      f"{ev['ceiling_db']:.1f} dB any preamp could give")
        where = "" if f.freq_hz is None else f" at {_mhz(f.freq_hz)}"
        lines.append(f"{f.severity}: {f.kind}{where}" + (f" ({detail})" if detail else ""))
    return lines


def diagnose(
    source: Survey | str | Path,
    base: str,
    test: str,
    *,
    gain_curve: GainCurve | None = None,
    gain_curve_note: str = "no preamp gain curve was given",
    receiver_noise: NoiseResult | None = None,
    receiver_noise_note: str = "",
    attenuated: str | None = None,
    attenuation_db: float | None = None,
    clip_threshold: float = DEFAULT_CLIP_THRESHOLD,
    receiver_nf_db: float | None = None,
    ambient_k: float = 290.0,
    seed: int = 0,
) -> Diagnosis:
    """Check the ``test`` configuration against ``base`` for the four preamp faults.

    Parameters
    ----------
    source : Survey or path
        The survey (or its database file).
    base, test : str
        Configuration labels without and with the preamp.
    gain_curve, gain_curve_note
        The preamp's gain against frequency (:func:`analysis.passband.data.load_gain_curve`,
        computed once by the caller), or None with the reason in ``gain_curve_note``.
    receiver_noise, receiver_noise_note
        The receiver's noise workflow result (for its noise temperature), or None with the
        reason (may be empty).
    attenuated : str, optional
        Label of sweeps of the test chain through a known attenuator at its input.
    attenuation_db : float, optional
        That attenuation, dB (needed with ``attenuated``).
    clip_threshold : float
        Fraction of samples at the rails per hop above which a hop counts as clipping.
    receiver_nf_db : float, optional
        Receiver noise figure, dB, to express added noise in kelvin exactly; otherwise taken
        from ``receiver_noise``.
    ambient_k : float
        Physical temperature of the termination, K.
    seed : int
        Seed of the bootstrap of the noise fit.

    Raises
    ------
    NoDataError
        A label has no complete sweeps.
    BadParameterError
        Inconsistent options.
    """
    if base == test:
        raise BadParameterError(f"--base and --test are both {base!r}; give the label without and the label with the preamp")
    if (attenuated is None) != (attenuation_db is None):
        raise BadParameterError("give --attenuated LABEL together with --attenuation-db X (the attenuator's loss in dB)")
    if attenuation_db is not None and not (attenuation_db > 0):
        raise BadParameterError(f"attenuation must be positive dB, got {attenuation_db}")
    if not (0 < clip_threshold < 1):
        raise BadParameterError(f"clip threshold must lie between 0 and 1 (a fraction of samples), got {clip_threshold}")
    findings: list[Finding] = []
    checked: list[str] = []
    notes: list[str] = []
    survey, opened = as_survey(source)
    try:
        survey.require([base, test, attenuated])
        # 1. clipping
        f1, c1, n1 = checks.check_clipping(hop_rows(survey, test), hop_rows(survey, base), clip_threshold, test, base)
        findings += f1; checked += c1; notes += n1
        # channel summaries of the antenna input
        b_ant = summarise_channels(survey, base, "antenna")
        t_ant = summarise_channels(survey, test, "antenna")
        a_ant = summarise_channels(survey, attenuated, "antenna") if attenuated else None
        images: list[checks.ImageMatch] = []
        if b_ant is not None and t_ant is not None:
            images = checks.find_images(b_ant, t_ant)
        exclude = [m.freq_hz for m in images] + (spill_channels(b_ant) if b_ant is not None else [])
        gain, gain_note = gain_model(gain_curve, gain_curve_note, exclude_hz=exclude)
        notes.append(gain_note)
        # 3. narrow lines in kept spectra (any input kept in the test configuration)
        search = lines_mod.spectral_lines(survey, base, test, b_ant)
        # 2. intermodulation (and the channel-level evidence for an oscillation)
        if b_ant is not None and t_ant is not None:
            f2, c2, n2, leftover = checks.check_intermodulation(
                b_ant, t_ant, gain, images, att=a_ant, attenuation_db=attenuation_db, lines=search.lines)
            findings += f2; checked += c2; notes += n2
        else:
            leftover = []
            checked.append("intermodulation: not checked (needs antenna sweeps of both configurations)")
        f3, c3, n3 = lines_mod.oscillation_findings(search, leftover, test=test, test_sum=t_ant, att=a_ant,
                                                    attenuation_db=attenuation_db)
        findings += f3; checked += c3; notes += n3
        # 4. added noise
        f4, c4, n4 = diagnose_noise.check_added_noise(
            survey, base, test, gain, receiver_nf_db=receiver_nf_db, receiver_noise=receiver_noise,
            receiver_noise_note=receiver_noise_note, ambient_k=ambient_k, seed=seed)
        findings += f4; checked += c4; notes += n4
    finally:
        if opened:
            survey.close()
    if any(f.kind == "clipping" for f in findings):
        weak = [f for f in findings if f.kind == "oscillation" and "line_freq_hz" not in f.evidence]
        for f in weak:
            notes.append(f"{f.freq_hz / 1e6:.3f} MHz rose more than the gain explains, but the converter clips: "
                         "most likely a clipping product, so it is not called an oscillation")
        findings = [f for f in findings if f not in weak]
    if any(f.kind == "clipping" for f in findings) and any(f.kind != "clipping" for f in findings):
        notes.append("the converter clips: clipping itself makes spurious products and raises the floor, so "
                     "cure it first and repeat the survey before trusting the other findings")
    findings.sort(key=lambda f: (KINDS.index(f.kind), -SEVERITIES.index(f.severity), f.freq_hz or 0.0))
    return Diagnosis(base, test, tuple(findings), tuple(checked), tuple(dict.fromkeys(n for n in notes if n)))
