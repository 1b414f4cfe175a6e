"""The headline of a comparison, in one wording for ``compare``, the report and the demo.

Order: stations helped / hurt / lost / gained with their frequencies; stations listenable
before -> after (mono and stereo C/N thresholds named with their source); whether any preamp
could help at this site (the ceiling set by outside noise); trouble found.
"""

from __future__ import annotations

from analysis.diagnose.core import summarise_findings
from analysis.findings import Finding


def _mhz_list(freqs_hz, limit: int = 8, names: dict | None = None) -> str:
    """``"94.0, 96.2 MHz"``; stations with a name are written ``"98.7 MHz MARSH FM (PI D2E4)"``."""
    names = names or {}
    ordered = sorted(freqs_hz)
    if not any(str(f) in names for f in ordered[:limit]):
        shown = ", ".join(f"{f / 1e6:.1f}" for f in ordered[:limit]) + " MHz"
    else:
        shown = ", ".join(f"{f / 1e6:.1f} MHz" + (f" {names[str(f)]}" if str(f) in names else "")
                          for f in ordered[:limit])
    more = len(freqs_hz) - limit
    return shown + (f" and {more} more" if more > 0 else "")


def _count(n: int, unit: str) -> str:
    return f"{n} {unit}{'' if n == 1 else 's'}"


def verdict_line(summary: dict) -> str:
    """The counts line, e.g. ``"Stations helped 3 (94.0, 96.2, 101.5 MHz), hurt 1 (...), lost 0, gained 1
    (...); 2 undetermined, 1 unchanged (of 8 stations)."``"""
    unit = summary.get("unit", "station")
    freqs = summary["frequencies_hz"]
    parts = []
    for key in ("helped", "hurt", "lost", "gained"):
        n = summary[key]
        parts.append(f"{key} {n}" + (f" ({_mhz_list(freqs[key], names=summary.get('names'))})" if n else ""))
    tail = f"; {summary['undetermined']} undetermined, {summary['unchanged']} unchanged"
    if summary.get("not_received"):
        tail += f", {summary['not_received']} not detected"
    return f"{unit.capitalize()}s {', '.join(parts)}{tail} (of {_count(summary['rows'], unit)})."


def listenable_line(summary: dict) -> str:
    """Items listenable before -> after, with the thresholds stated once.

    The thresholds' provenance (a published source, or a rule of thumb) is in the JSON under
    ``listenable.source``; a cited source is also printed, a rule of thumb is not repeated here.
    """
    li = summary["listenable"]
    unit = summary.get("unit", "station")
    source = str(li.get("source") or "")
    cited = "" if not source or "no source" in source else f"; thresholds from {source}"
    return (f"Listenable {unit}s, base -> test: listenable mono {li['mono_base']} -> {li['mono_test']} "
            f"(C/N >= {li['mono_cn_db']:g} dB), listenable stereo {li['stereo_base']} -> {li['stereo_test']} "
            f"(C/N >= {li['stereo_cn_db']:g} dB){cited}.")


def ceiling_line(ceiling: dict) -> str:
    """Whether any preamp could help at this site."""
    if not ceiling.get("available"):
        return f"Could any preamp help here: not known ({ceiling.get('reason', 'no noise-figure runs')})."
    cap = ceiling.get("any_preamp_max_db")
    exp = ceiling.get("this_preamp_expected_db")
    if cap is None:
        return "Could any preamp help here: not known (no ceiling could be computed)."
    verdict = "little" if cap < 1.0 else "some" if cap < 3.0 else "a worthwhile"
    this = "" if exp is None else f"; this preamp's measured noise and gain predict {exp:+.1f} dB"
    return (f"Could any preamp help here: {verdict} room, at most {cap:.1f} dB of C/N (outside noise "
            f"{ceiling['antenna_temp_k']:.0f} K, receiver {ceiling['receiver_temp_k']:.0f} K){this}.")


def trouble_line(findings: tuple[Finding, ...] | list[Finding], diagnosis_note: str = "") -> str:
    """Trouble found, worst first, or why it was not looked for."""
    if not findings:
        if diagnosis_note and diagnosis_note != "":
            return f"Trouble: {diagnosis_note}."
        return "Trouble: none found."
    order = {"problem": 0, "warning": 1, "info": 2}
    ranked = sorted(findings, key=lambda f: order.get(f.severity, 3))
    shown = summarise_findings(ranked[:3])
    more = len(ranked) - len(shown)
    return "Trouble: " + "; ".join(shown) + (f"; and {more} more" if more > 0 else "") + "."


def headline_lines(assessment) -> list[str]:
    """The four headline lines of an :class:`analysis.workflows.Assessment`, in order."""
    s = assessment.comparison.summary
    return [verdict_line(s), listenable_line(s), ceiling_line(assessment.ceiling),
            trouble_line(assessment.findings, assessment.diagnosis_note)]
