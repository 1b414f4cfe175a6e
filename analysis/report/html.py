"""Render a :class:`analysis.report.build.Report` as one self-contained HTML file.

The page needs nothing but itself: the style sheet is inline, figures are PNG ``data:`` URIs,
there is no script, font or link to fetch, and a Content-Security-Policy meta tag forbids any
other source (``default-src 'none'``), so it opens offline in any browser and can be mailed as
one file. Every piece of user-supplied text (labels, notes, device names, file names, analysis
messages quoting them) passes through :func:`html.escape`.

Printing: rows of the channel table are not split across pages, the table header repeats on
every page, figures are kept whole, and nothing is hidden.
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Iterable, Mapping

from analysis.diagnose.core import summarise_findings
from analysis.errors import BadParameterError
from analysis.report.build import REPORT_STEPS, SECTIONS, Report, build_report
from survey.text import html_label

_CSS = """
:root { --ink: #1d1d1b; --muted: #55554f; --rule: #b9b6ad; --band: #f1efe8; --warn: #7a3b00; }
* { box-sizing: border-box; }
body { margin: 0; color: var(--ink); background: #fff;
  font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", "DejaVu Sans", sans-serif; }
main { max-width: 62rem; margin: 0 auto; padding: 1.2rem 1.4rem 3rem; }
header.top { border-bottom: 3px double var(--ink); padding-bottom: .6rem; margin-bottom: 1rem; }
header.top h1 { font-size: 1.45rem; margin: 0 0 .25rem; letter-spacing: .01em; }
header.top p { margin: .1rem 0; color: var(--muted); }
.simulated { border: 2px dashed var(--ink); padding: .45rem .7rem; margin: .7rem 0; font-weight: 700;
  letter-spacing: .04em; }
nav.toc { font-size: .9rem; margin: .4rem 0 1rem; }
nav.toc a { color: var(--ink); margin-right: .9rem; }
section { margin: 1.6rem 0; }
section > h2 { font-size: 1.12rem; margin: 0 0 .5rem; padding: .15rem .5rem; background: var(--band);
  border-left: 6px solid var(--ink); }
h3 { font-size: 1rem; margin: 1rem 0 .3rem; }
p.na { font-style: italic; color: var(--muted); border-left: 3px solid var(--rule); padding-left: .6rem; }
ul.plain { padding-left: 1.2rem; margin: .3rem 0; }
ul.summary li { margin: .25rem 0; }
figure { margin: .8rem 0; break-inside: avoid; page-break-inside: avoid; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: .88rem; color: var(--muted); margin-top: .25rem; }
table { border-collapse: collapse; width: 100%; font-size: .88rem; margin: .4rem 0;
  font-variant-numeric: tabular-nums; }
caption { text-align: left; font-weight: 600; padding: .2rem 0; }
th, td { padding: .18rem .45rem; border-bottom: 1px solid var(--rule); vertical-align: top; }
th { text-align: left; border-bottom: 2px solid var(--ink); }
td.num, th.num { text-align: right; white-space: nowrap; }
tbody tr:nth-child(even) { background: #f7f6f2; }
tr.v-not-received td { color: var(--muted); }
tr.v-improved td.verdict, tr.v-gained td.verdict { font-weight: 700; }
tr.v-worse td.verdict, tr.v-lost td.verdict { font-weight: 700; text-decoration: underline; }
.sev-problem { font-weight: 700; color: var(--warn); }
.sev-warning { font-weight: 700; }
dl.kv { display: grid; grid-template-columns: max-content 1fr; gap: .15rem 1rem; margin: .3rem 0; }
dl.kv dt { color: var(--muted); }
dl.kv dd { margin: 0; }
footer { margin-top: 2rem; font-size: .82rem; color: var(--muted); border-top: 1px solid var(--rule); padding-top: .5rem; }
@page { size: A4; margin: 14mm 12mm; }
@media print {
  body { font-size: 10pt; }
  main { max-width: none; padding: 0; }
  nav.toc { display: none; }
  section { break-before: auto; }
  section > h2 { break-after: avoid; page-break-after: avoid; }
  tr, li, dl.kv { break-inside: avoid; page-break-inside: avoid; }
  thead { display: table-header-group; }
  tbody tr:nth-child(even) { background: #eee; -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  figure img { max-height: 23cm; }
}
"""

#: Shown for every verdict beside its word, so the table reads in grey and without colour.
_VERDICT_MARK = {"improved": "▲", "worse": "▼", "gained": "+", "lost": "−", "unchanged": "=",
                 "not received": "·", "undetermined": "?"}


def e(value: object) -> str:
    """Escape any value for HTML text or a quoted attribute (``html.escape``, quotes too), with
    control characters other than tab and line breaks shown as ``?``."""
    return html_label(value)


def _num(value: float | None, fmt: str = "{:+.1f}") -> str:
    return "–" if value is None else fmt.format(value)


def _utc(stamp: str | None) -> str:
    """A stored ISO 8601 UTC time shown as ``YYYY-MM-DD HH:MM:SS`` (the page says UTC)."""
    if not stamp:
        return "–"
    text = str(stamp).replace("T", " ").rstrip("Z")
    return text.split(".")[0]


def _mhz(freq_hz: float | None, digits: int = 2) -> str:
    return "–" if freq_hz is None else f"{freq_hz / 1e6:.{digits}f}"


def _items(lines: Iterable[str], cls: str = "plain") -> str:
    body = "".join(f"<li>{e(x)}</li>" for x in lines)
    return f'<ul class="{cls}">{body}</ul>' if body else ""


def _kv(pairs: Iterable[tuple[str, object]]) -> str:
    return '<dl class="kv">' + "".join(f"<dt>{e(k)}</dt><dd>{e(v)}</dd>" for k, v in pairs) + "</dl>"


def _figure(figures: Mapping[str, str], key: str, alt: str, caption: str) -> str:
    uri = figures.get(key)
    if not uri:
        return ""
    if not uri.startswith("data:image/"):
        raise BadParameterError(f"figure {key!r} is not an embedded data: URI; the page must fetch nothing")
    return (f'<figure id="fig-{e(key)}"><img src="{e(uri)}" alt="{e(alt)}">'
            f"<figcaption>{e(caption)}</figcaption></figure>")


def _na(report: Report, key: str) -> str:
    return f'<p class="na">{e(report.unavailable.get(key, "not available"))}</p>'


# -- sections --------------------------------------------------------------------------------
def _summary(r: Report) -> str:
    lines = list(r.summary) or ["No analysis could be made from this database; see the sections below."]
    return _items(lines, "summary")


def _trouble(r: Report) -> str:
    parts = []
    if r.diagnosis is None:
        parts.append(_na(r, "trouble"))
    elif not r.diagnosis.findings:
        parts.append("<p>No clipping, intermodulation, oscillation or added noise found in the checks below.</p>")
    else:
        rows = []
        for f, line in zip(r.diagnosis.findings, summarise_findings(r.diagnosis.findings)):
            rows.append(f'<tr><td class="sev-{e(f.severity)}">{e(f.severity)}</td><td>{e(f.kind)}</td>'
                        f'<td class="num">{e(_mhz(f.freq_hz, 3) if f.freq_hz is not None else "broadband")}</td>'
                        f"<td>{e(line)}</td><td>{e(f.advice)}</td></tr>")
        parts.append('<table class="findings"><caption>Findings (most serious kinds first)</caption><thead><tr>'
                     "<th>severity</th><th>kind</th><th class=\"num\">MHz</th><th>evidence</th><th>advice</th>"
                     "</tr></thead><tbody>" + "".join(rows) + "</tbody></table>")
    if r.comparison is not None and r.comparison.warnings:
        parts.append("<h3>Settings that differ between the configurations</h3>" + _items(r.comparison.warnings))
    events = [ev for ev in r.settings.events if ev.kind not in ("stop",)]
    if events:
        rows = "".join(f"<tr><td>{e(_utc(ev.utc))}</td><td>{e(ev.run_id)}</td><td>{e(ev.kind)}</td>"
                       f"<td>{e(ev.message)}</td></tr>" for ev in events)
        parts.append('<table class="events"><caption>Events logged during the runs (gaps, receiver errors, '
                     "clock jumps)</caption><thead><tr><th>UTC</th><th>run</th><th>kind</th><th>message</th>"
                     f"</tr></thead><tbody>{rows}</tbody></table>")
    return "".join(parts)


def _channel_table(r: Report) -> str:
    c = r.comparison
    pct = f"{100 * c.thresholds['confidence']:g} %"
    named = any(getattr(ch, "name", None) for ch in c.channels)
    head = ("<tr><th class=\"num\">MHz</th>" + ("<th>station (RDS)</th>" if named else "")
            + "<th class=\"num\">C/N base, dB</th><th class=\"num\">C/N test, dB</th>"
            f"<th class=\"num\">change, dB</th><th class=\"num\">{e(pct)} interval, dB</th>"
            "<th class=\"num\">gain, dB</th><th class=\"num\">noise rise, dB</th><th class=\"num\">pairs</th>"
            "<th>verdict</th></tr>")
    rows = []
    for ch in sorted(c.channels, key=lambda x: x.freq_hz):
        interval = "–" if ch.ci_low_db is None else f"{ch.ci_low_db:+.2f} to {ch.ci_high_db:+.2f}"
        v = ch.verdict
        rows.append(
            f'<tr class="v-{e(v.replace(" ", "-"))}" data-freq-hz="{int(ch.freq_hz)}">'
            f'<td class="num">{_mhz(ch.freq_hz)}</td>' + (f'<td>{e(ch.name or "")}</td>' if named else "")
            + f'<td class="num">{_num(ch.base_cn_db, "{:.1f}")}</td>'
            f'<td class="num">{_num(ch.test_cn_db, "{:.1f}")}</td><td class="num">{_num(ch.delta_cn_db, "{:+.2f}")}</td>'
            f'<td class="num">{e(interval)}</td><td class="num">{_num(ch.gain_db)}</td>'
            f'<td class="num">{_num(ch.noise_rise_db)}</td><td class="num">{ch.pairs}</td>'
            f'<td class="verdict">{e(_VERDICT_MARK.get(v, ""))} {e(v)}</td></tr>'
        )
    return (f'<table id="channel-table"><caption>Every {e(c.unit)} compared: \'{e(c.test)}\' (test) against '
            f"'{e(c.base)}' (base), {c.n_base_sweeps} + {c.n_test_sweeps} sweeps; base and test C/N over the same "
            f"pairs as the change"
            f"{', ' + str(c.n_pairs) + ' pairs' if c.paired else ', unpaired'}</caption>"
            f"<thead>{head}</thead><tbody>{''.join(rows)}</tbody></table>")


def _channels(r: Report, figures: Mapping[str, str]) -> str:
    if r.comparison is None:
        return _na(r, "channels")
    c = r.comparison
    marks = ", ".join(f"{m} {v}" for v, m in _VERDICT_MARK.items())
    return (
        f"<p>{e(c.method)}.</p>"
        + _figure(figures, "comparison", "C/N of both configurations, the change with its interval, and gain and "
                  f"noise rise against {c.unit} frequency",
                  f"Top: C/N per {c.unit}, base and test. Middle: change in C/N with its interval. "
                  "Bottom: gain (ratio of P - N) and noise rise (ratio of N), dB.")
        + f"<p>Verdict marks: {e(marks)}. {e(c.thresholds['improved_if'])} for improved; "
        f"{e(c.thresholds['unchanged_if'])} for unchanged; otherwise undetermined.</p>"
        + _channel_table(r)
    )


def _passband(r: Report, figures: Mapping[str, str]) -> str:
    if r.passband is None:
        return _na(r, "passband")
    pb = r.passband
    fit, cov, plan = pb.fit, pb.coverage, pb.plan
    rel = " (relative)" if pb.curve.relative else ""
    pairs = [
        ("verdict", pb.verdict()),
        ("target band", f"{_mhz(cov.target_hz[0])} – {_mhz(cov.target_hz[1])} MHz ({r.target_note})"),
        ("peak", f"{_mhz(fit.peak_hz, 3)} MHz, {fit.peak_gain_db:.1f} dB{rel}"),
        ("-3 dB edges", f"{_mhz(fit.edges_3db_hz[0], 3)} – {_mhz(fit.edges_3db_hz[1], 3)} MHz "
                        f"({_mhz(fit.bw_3db_hz, 3)} MHz wide)"),
        ("-6 dB edges", f"{_mhz(fit.edges_6db_hz[0], 3)} – {_mhz(fit.edges_6db_hz[1], 3)} MHz "
                        f"({_mhz(fit.bw_6db_hz, 3)} MHz wide)"),
        ("ripple over the target", f"{cov.ripple_db:.1f} dB (lowest point {cov.worst_db:+.1f} dB from the peak)"),
        ("stations outside -3 dB", ", ".join(_mhz(s) for s in cov.uncovered_stations_hz) or "none"),
        ("fit", f"{fit.n_circuits} tuned circuit(s), {fit.shape}; residual rms {fit.residual_rms_db:.2f} dB"),
    ]
    rows = "".join(f'<tr><td class="num">{i}</td><td class="num">{_mhz(s.f0_hz, 3)}</td>'
                   f'<td class="num">{s.q:.1f}</td><td class="num">{_mhz(s.bw_hz, 3)}</td></tr>'
                   for i, s in enumerate(plan.stages, 1))
    fitted = "".join(f'<tr><td class="num">{i}</td><td class="num">{_mhz(s.f0_hz, 3)}</td>'
                     f'<td class="num">{s.q:.1f}</td><td class="num">{_mhz(s.bw_hz, 3)}</td></tr>'
                     for i, s in enumerate(fit.stages, 1))
    head = ("<thead><tr><th class=\"num\">circuit</th><th class=\"num\">f0, MHz</th><th class=\"num\">loaded Q</th>"
            "<th class=\"num\">own -3 dB width, MHz</th></tr></thead>")
    change = "" if plan.peak_gain_change_db is None else (
        f" Peak gain change of the retuned passive circuits (unloaded Q {plan.q_unloaded:g}"
        f"{', assumed' if plan.q_unloaded_assumed else ''}): {plan.peak_gain_change_db:+.1f} dB.")
    return (
        _kv(pairs)
        + _figure(figures, "passband", "Measured gain against frequency with the fitted tuned-circuit curve, the "
                  "target band and the stagger plan", "Measured points, fitted curve, -3 dB line, target band "
                  "(hatched) and the response of the stagger plan.")
        + f'<table class="stages"><caption>Fitted tuned circuits</caption>{head}<tbody>{fitted}</tbody></table>'
        + f'<table class="stages" id="stagger-plan"><caption>Maximally flat stagger plan for '
          f"{_mhz(plan.bandwidth_hz, 1)} MHz around {_mhz(plan.center_hz, 3)} MHz</caption>{head}"
          f"<tbody>{rows}</tbody></table>"
        + f"<p>Plan checked with the exact circuit response: edges {plan.edge_atten_db[0]:.2f} / "
          f"{plan.edge_atten_db[1]:.2f} dB, ripple {plan.ripple_db:.2f} dB over the target.{e(change)}</p>"
    )


def _noise(r: Report, figures: Mapping[str, str]) -> str:
    if r.noise is None:
        return _na(r, "noise")
    s = r.noise.summary

    def db(key: str, unc: str | None = None) -> str:
        v = s.get(key)
        if v is None:
            return "not measured"
        u = s.get(unc) if unc else None
        return f"{v:.2f}" + (f" ± {u:.2f}" if u is not None else "") + " dB"

    pairs = [
        ("receiver alone, noise figure", f"{db('receiver_nf_db', 'receiver_nf_uncertainty_db')} "
                                         f"({s.get('receiver_nf_method') or 'no method'})"),
        ("preamp + receiver, noise figure", db("system_nf_db")),
        ("preamp gain", f"{db('preamp_gain_db', 'preamp_gain_uncertainty_db')} ({s.get('preamp_gain_method') or '-'})"),
        ("preamp noise figure", f"{db('preamp_nf_db', 'preamp_nf_uncertainty_db')} ({s.get('preamp_nf_method') or '-'})"),
        ("summary region", str(s.get("summary_region", "-"))),
        ("outside noise Fa", db("outside_fa_db")),
        ("antenna temperature", "not measured" if s.get("antenna_temp_k") is None else f"{s['antenna_temp_k']:.0f} K"),
        ("closest ITU-R P.372 environment", s.get("closest_environment") or "not measured"),
        ("largest improvement any preamp could give", db("max_possible_improvement_db")),
        ("predicted benefit of this preamp", db("predicted_benefit_db")),
    ]
    return _kv(pairs) + _figure(
        figures, "noise", "Noise figures against frequency, and measured outside noise beside the ITU-R P.372 curves",
        "Top: noise figures of the receiver, the system and the preamp. Bottom: measured Fa beside the ITU-R "
        "P.372 median curves of man-made and galactic noise.")


def _overnight(r: Report, figures: Mapping[str, str]) -> str:
    if r.series is None:
        return _na(r, "overnight")
    s = r.series
    text = ("Strongest station "
            + ("none" if s.strongest_hz is None else f"{_mhz(s.strongest_hz)} MHz")
            + ", weakest " + ("none" if s.weakest_hz is None else f"{_mhz(s.weakest_hz)} MHz") + ".")
    return (f"<p>{e(text)}</p>"
            + _figure(figures, "overnight", "Noise floor of every hop and C/N of the strongest and weakest stations "
                      "against time", "Top: each hop's noise floor and the median per sweep. Bottom: C/N of the "
                      "strongest and weakest received stations; gaps where not received.")
            + _figure(figures, "waterfall", "Time-by-frequency image of C/N for base and test",
                      "C/N of every channel in every sweep; hatched cells: not detected."))


def _assumptions(r: Report) -> str:
    return "".join(f"<h3>{e(name)}</h3>{_items(lines)}" for name, lines in r.assumptions)


_DEVICE_SKIP = ("device", "hw", "configuration", "input", "seed", "label", "epoch_utc")


def _device(d) -> str:
    """A run's device as one line: its name first, then the other details."""
    if isinstance(d, dict):
        name = d.get("device") or d.get("hw") or ""
        rest = ", ".join(f"{k}: {v}" for k, v in d.items() if k not in _DEVICE_SKIP and v not in (None, ""))
        return "; ".join(x for x in (str(name), rest) if x)
    return "; ".join(dict.fromkeys(str(d).split("; ")))


def _settings(r: Report) -> str:
    st = r.settings
    parts = []
    if st.simulated:
        parts.append('<p class="simulated">SIMULATED DATA: ' + e("; ".join(st.simulated_because)) + ".</p>")
    parts.append(_kv([("database", r.db_path), ("sweeps from", f"{_utc(st.first_utc)} to {_utc(st.last_utc)} (UTC)"),
                      ("report made", f"{_utc(r.generated_utc)} UTC by bandcensus {r.tool_version}"),
                      ("noise source ENR", "not given" if r.enr_db is None else f"{r.enr_db:g} dB"),
                      *st.sweep_settings]))
    counts = "".join(f"<tr><td>{e(c)}</td><td>{e(i)}</td><td class=\"num\">{n}</td></tr>" for c, i, n in st.sweep_counts)
    parts.append('<table class="counts"><caption>Complete sweeps used</caption><thead><tr><th>configuration</th>'
                 f"<th>input</th><th class=\"num\">sweeps</th></tr></thead><tbody>{counts}</tbody></table>")
    rows = []
    for run in st.runs:
        recs = run.settings.get("recordings", []) if isinstance(run.settings, dict) else []
        extra = "" if not recs else f"{len(recs)} recording(s): " + ", ".join(Path(str(p)).name for p in recs[:6]) + (
            " …" if len(recs) > 6 else "")
        rows.append(f"<tr><td class=\"num\">{e(run.id)}</td><td>{e(run.source_kind)}</td>"
                    f"<td>{e(_device(run.device))}</td><td>{e(run.tool_version)}</td>"
                    f"<td>{e('-' if run.seed is None else run.seed)}</td><td>{e(_utc(run.started_utc))}</td>"
                    f"<td>{e(run.status)}</td><td>{e(run.notes)}{'<br>' if run.notes and extra else ''}"
                    f"{e(extra)}</td></tr>")
    parts.append('<table class="runs"><caption>Runs</caption><thead><tr><th class="num">run</th><th>source</th>'
                 "<th>receiver / device</th><th>tool version</th><th>seed</th><th>started (UTC)</th><th>status</th>"
                 f"<th>notes</th></tr></thead><tbody>{''.join(rows)}</tbody></table>")
    return "".join(parts)


def _safety(r: Report) -> str:
    return _items(r.safety)


def render_html(report: Report, figures: Mapping[str, str]) -> str:
    """The whole page as one string (UTF-8 text; no external resource of any kind).

    ``figures`` maps figure keys to ``data:image/...`` URIs (see
    :func:`analysis.report.plots.render_figures`); a figure missing from it is left out.
    """
    r = report
    body = {
        "summary": _summary(r), "trouble": _trouble(r), "channels": _channels(r, figures),
        "passband": _passband(r, figures), "noise": _noise(r, figures), "overnight": _overnight(r, figures),
        "assumptions": _assumptions(r), "settings": _settings(r), "safety": _safety(r),
    }
    sections = []
    for key, title in SECTIONS:
        state = "unavailable" if key in r.unavailable else "available"
        sections.append(f'<section id="{key}" class="{state}"><h2>{e(title)}</h2>{body[key]}</section>')
    toc = "".join(f'<a href="#{key}">{e(title)}</a>' for key, title in SECTIONS)
    banner = ('<p class="simulated" id="simulated-banner">SIMULATED DATA: these runs were made by the simulator '
              "or replay simulated recordings; no real site or station is measured.</p>") if r.settings.simulated else ""
    title = f"Preamp survey: '{r.test}' against '{r.base}'"
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; "
        "style-src 'unsafe-inline'\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        f"<meta name=\"generator\" content=\"bandcensus {e(r.tool_version)}\">"
        f"<title>{e(title)}</title><style>{_CSS}</style></head><body><main>"
        f"<header class=\"top\"><h1>{e(title)}</h1>"
        f"<p>Input {e(r.input)}; database {e(Path(r.db_path).name)}; sweeps {e(_utc(r.settings.first_utc))} to "
        f"{e(_utc(r.settings.last_utc))} UTC; page made {e(_utc(r.generated_utc))} UTC.</p>{banner}</header>"
        f"<nav class=\"toc\">{toc}</nav>"
        + "".join(sections)
        + f"<footer>bandcensus {e(r.tool_version)}: a receive-only logging tool. This page is self-contained "
        "and fetches nothing.</footer></main></body></html>\n"
    )


@dataclass(frozen=True)
class WrittenReport:
    """Where the page went, its size in bytes and how long building it took (seconds)."""

    path: Path
    size_bytes: int
    build_s: float
    report: Report


def write_report(
    db_path: str | Path,
    base: str,
    test: str,
    out_path: str | Path,
    *,
    target_hz: tuple[float, float] | None = None,
    enr_db: float | None = None,
    enr_table=None,
    cold_k: float = 290.0,
    input: str = "antenna",
    seed: int = 0,
    on_step: Callable[[str, int, int], None] | None = None,
) -> WrittenReport:
    """Build the report and write it to ``out_path`` (an ``.html`` file, replaced atomically).

    ``on_step(what, k, n)`` is told of each step: those of
    :func:`analysis.report.build.build_report`, then ``"figures and page"``.

    Raises :class:`BadParameterError` for an output name that is not ``.html``/``.htm``, and
    whatever :func:`analysis.report.build.build_report` raises.
    """
    from analysis.report.plots import render_figures

    out = Path(out_path)
    if out.suffix.lower() not in (".html", ".htm"):
        raise BadParameterError(f"report file {out} must end in .html (the report is one HTML page)")
    if out.is_dir():
        raise BadParameterError(f"{out} is a folder; give a file name such as report.html")
    started = time.monotonic()
    n_steps = len(REPORT_STEPS) + 1
    report = build_report(db_path, base, test, target_hz=target_hz, enr_db=enr_db, enr_table=enr_table,
                          cold_k=cold_k, input=input, seed=seed,
                          on_step=None if on_step is None else (lambda what, k, n: on_step(what, k, n_steps)))
    if on_step is not None:
        on_step("figures and page", n_steps - 1, n_steps)
    page = render_html(report, render_figures(report))
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(out.name + ".part")
    tmp.write_text(page, encoding="utf-8")
    os.replace(tmp, out)
    return WrittenReport(out, out.stat().st_size, time.monotonic() - started, report)
