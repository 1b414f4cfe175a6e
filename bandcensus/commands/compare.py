"""``bandcensus compare``: station-by-station A/B comparison of two configurations."""

from __future__ import annotations

from typing import TYPE_CHECKING

import click
from rich.console import Console
from rich.table import Table

from bandcensus.commands._common import db_option, echo_json, json_option
from bandcensus.commands._csv import write_csv
from bandcensus.commands._noise_source import noise_options_from, noise_source_options
from bandcensus.commands._tables import Column, print_fitted
from bandcensus.commands._text import CN_LABEL, display_path, plural

if TYPE_CHECKING:  # the analyses are imported when the command runs, not for --help
    from analysis.workflows import Assessment

#: Columns of the station (or channel) rows (JSON and CSV), units in the names.
ROW_FIELDS = ["freq_hz", "verdict", "base_cn_db", "test_cn_db", "delta_cn_db", "ci_low_db", "ci_high_db",
              "gain_db", "noise_rise_db", "pairs"]
#: Further columns of station rows: the RDS name and the RDS block error rates (None when not decoded).
STATION_FIELDS = ["name", "base_block_error_rate", "test_block_error_rate", "delta_block_error_rate",
                  "bler_ci_low", "bler_ci_high"]
#: Integer counts of the JSON summary (they add up to the rows).
COUNT_FIELDS = ["helped", "hurt", "unchanged", "undetermined", "gained", "lost"]


def row_fields(comparison) -> list[str]:
    """Columns of the rows: station rows add the name and the RDS block error rates."""
    return ROW_FIELDS + (STATION_FIELDS if comparison.unit == "station" else [])


def comparison_payload(a: Assessment) -> dict:
    """The JSON document of a comparison: rows under ``"stations"`` (or ``"channels"`` with
    ``--channels``), integer counts in ``"summary"``, then the checks and headlines."""
    r = a.comparison
    rows_key = "stations" if r.unit == "station" else "channels"
    s = r.summary
    summary = {k: int(s[k]) for k in COUNT_FIELDS}
    if "not_received" in s:
        summary["not_received"] = int(s["not_received"])
    summary.update({
        "listenable": s["listenable"], "median_gain_db": s["median_gain_db"],
        "median_noise_rise_db": s["median_noise_rise_db"], "broadband_noise_rise_db": s["broadband_noise_rise_db"],
        "noise_source": s["noise_source"], "noise_split": a.noise_split,
        "predicted_noise_rise": a.predicted_noise_rise, "ceiling": a.ceiling,
    })
    return {
        "base": r.base, "test": r.test, "input": r.input, "unit": r.unit, "method": r.method, "paired": r.paired,
        "sweeps": {"base": r.n_base_sweeps, "test": r.n_test_sweeps, "pairs": r.n_pairs},
        "thresholds": r.thresholds,
        rows_key: [{k: getattr(c, k) for k in row_fields(r)} for c in r.items],
        "summary": summary,
        "headlines": list(a.headlines),
        "findings": [f.to_dict() for f in a.findings],
        "diagnosis": a.diagnosis_note or "run",
        "warnings": list(r.warnings),
    }


def _iso_time(ctx, param, value):
    """Validate an ISO 8601 time option at parse time (bad usage: exit code 2)."""
    if value is None:
        return None
    from analysis.errors import BadParameterError
    from analysis.terms import normalise_utc

    try:
        return normalise_utc(value, param.opts[0])
    except BadParameterError as exc:
        raise click.BadParameter(str(exc)) from None


def _png_path(ctx, param, value):
    if value is not None and not str(value).lower().endswith(".png"):
        raise click.BadParameter(f"{value} must end in .png (the figure is written as PNG)")
    return value


def _num(value, fmt: str = "{:+.1f}") -> str:
    return "-" if value is None else fmt.format(value)


def _summary_lines(a: Assessment, explain: bool = False) -> list[str]:
    """The headlines and the conclusion on noise; with ``explain`` also what was compared, the
    method paragraph (statistics, definitions, verdict rules), the noise split and the findings."""
    r = a.comparison
    lines = list(a.headlines) + [f"Noise: {r.summary['noise_source']}"
                                 + ("." if explain else " (--explain for the method).")]
    if not explain:
        return lines
    lines += [
        f"Compared '{r.test}' (test) against '{r.base}' (base), input {r.input}: "
        f"{plural(r.n_base_sweeps, 'base sweep')} and {plural(r.n_test_sweeps, 'test sweep')}, per {r.unit}.",
        f"Method: {r.method}.",
        "C/N = (P - N) / N in dB: power P above the local noise power N; delta = test minus base; "
        "gain = ratio of P - N; noise rise = ratio of N; delta = gain - noise rise.",
        f"Verdicts: improved/worse need the {r.thresholds['improved_if'].split(' of ')[0]} wholly above/below "
        f"0 dB; unchanged needs it within +-{r.thresholds['min_change_db']:g} dB; otherwise undetermined.",
    ]
    if a.noise_split:
        lines.append(f"Noise split: {a.noise_split}.")
    pred = a.predicted_noise_rise
    lines.append(f"Predicted noise rise: {pred['note'] if isinstance(pred, dict) else pred}.")
    for f in a.findings:
        lines.append(f"Finding: {f.severity}: {f.kind}" + ("" if f.freq_hz is None else f" at {f.freq_hz / 1e6:.2f} MHz")
                     + f": {f.advice}")
    return lines


def _table_rows(a: Assessment) -> tuple[str, list[Column], list[list[str]]]:
    """Title, columns and formatted rows of the per-station (or per-channel) table."""
    r = a.comparison
    pct = f"{100 * r.thresholds['confidence']:g}%"
    title = (f"'{r.test}' against '{r.base}', per {r.unit}, in dB ({CN_LABEL} of both over the pairs the delta "
             "is taken on)")
    named = any(c.name for c in r.items)
    with_bler = any(c.delta_block_error_rate is not None for c in r.items)
    columns = [Column("MHz")] + ([Column("station", justify="left", drop_order=6)] if named else []) + [
        Column(f"base {CN_LABEL}", short="base"), Column(f"test {CN_LABEL}", short="test"), Column("delta"),
        Column(f"{pct} interval", short=pct, drop_order=5), Column("gain", drop_order=2),
        Column("noise rise", short="N rise", drop_order=1), Column("pairs", short="n", drop_order=3),
        Column("verdict", justify="left")]
    if with_bler:
        columns.append(Column("RDS block errors base -> test", short="RDS errors", drop_order=4))
    rows = []
    for c in sorted(r.items, key=lambda c: c.freq_hz):
        interval = "-" if c.ci_low_db is None else f"[{c.ci_low_db:+.2f}, {c.ci_high_db:+.2f}]"
        cells = [f"{c.freq_hz / 1e6:.2f}"] + ([c.name or ""] if named else []) + [
            _num(c.base_cn_db, "{:.1f}"), _num(c.test_cn_db, "{:.1f}"),
            _num(c.delta_cn_db, "{:+.2f}"), interval, _num(c.gain_db), _num(c.noise_rise_db), str(c.pairs), c.verdict]
        if with_bler:
            cells.append("-" if c.delta_block_error_rate is None else
                         f"{100 * c.base_block_error_rate:.1f} -> {100 * c.test_block_error_rate:.1f} %")
        rows.append(cells)
    return title, columns, rows


@click.command("compare")
@db_option
@click.option("--base", required=True, help="Configuration label of the reference (e.g. bare).")
@click.option("--test", required=True, help="Configuration label compared against it (e.g. preamp-a); several "
              "labels separated by commas (a,b,c) rank them.")
@json_option
@click.option("--csv", "as_csv", is_flag=True, help="Print the station rows as CSV.")
@click.option("--channels", is_flag=True, help="Rows per raster channel instead of per station (the detail view).")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), callback=_png_path,
              help="Also write a PNG figure here.")
@click.option("--since", callback=_iso_time, help="Only sweeps started at or after this UTC time (ISO 8601).")
@click.option("--until", callback=_iso_time, help="Only sweeps started before this UTC time (ISO 8601).")
@click.option("--min-change-db", type=click.FloatRange(min=0.0), default=0.5, show_default=True,
              help="Equivalence margin (dB): a change whose interval lies within +- this is unchanged.")
@click.option("--confidence", type=click.FloatRange(0.5, 1.0, max_open=True), default=0.95, show_default=True,
              help="Confidence level of the intervals.")
@noise_source_options
@click.option("--explain", is_flag=True, help="Also print the method: statistics, definitions and verdict rules.")
@click.option("--brief", is_flag=True, help="Only the headlines and the conclusion on noise (no table).")
@click.option("--no-diagnosis", is_flag=True, help="Skip the chain diagnosis (clipping, intermodulation, "
              "oscillation, added noise) in the summary.")
def command(db_path, base, test, as_json, as_csv, channels, plot_path, since, until, min_change_db, confidence,
            enr_db, enr_table, cold_k, receiver_nf_db, explain, brief, no_diagnosis):
    """Which stations gained or lost C/N with TEST compared to BASE, by how much, how sure.

    C/N (some call it SNR) is the carrier-to-noise ratio (P - N)/N in dB. Sweeps that alternated between the two configurations are
    compared in pairs (mean of the paired differences with its Student t interval, n - 1
    degrees of freedom, from 3 pairs); sweeps taken at different times with Welch's t
    interval. Gain is the ratio of signal powers P - N, noise rise the ratio of N, and
    delta C/N = gain - noise rise. With noise-figure runs the C/N ceiling set by outside noise
    is checked too.
    """
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    if base == test:
        raise click.UsageError("--base and --test name the same configuration; give two different labels")
    if "," in test:
        _ranking(db_path, base, test, as_json, as_csv, since, until, min_change_db, confidence)
        return
    from analysis.selection import Survey
    from analysis.workflows import assess

    options = noise_options_from(enr_db, enr_table, cold_k, receiver_nf_db)
    with Survey(db_path) as survey:
        a = assess(survey, base, test, options=options, with_diagnosis=not no_diagnosis, since=since, until=until,
                   min_change_db=min_change_db, confidence=confidence, channels=channels)
    if plot_path:
        from analysis.compare.plots import plot_comparison

        plot_comparison(a.comparison, plot_path)
    payload = comparison_payload(a)
    if as_json:
        echo_json(payload)
        return
    if as_csv:
        write_csv(payload["stations" if a.comparison.unit == "station" else "channels"], row_fields(a.comparison))
        return
    console = Console(width=max(120, Console().width))
    for line in _summary_lines(a, explain):
        console.print(line, highlight=False, markup=False)
    for warning in a.comparison.warnings:
        console.print(f"Warning: {warning}", highlight=False, markup=False)
    if not brief:
        print_fitted(*_table_rows(a), console=console)
    if plot_path:
        console.print(f"Figure: {display_path(plot_path)}", highlight=False, markup=False)


#: Columns of the ranking (JSON and CSV).
RANKING_FIELDS = ["rank", "configuration", "helped", "helped_low", "helped_high", "hurt", "lost",
                  "median_delta_cn_db", "median_ci_low_db", "median_ci_high_db", "stations_heard_by_all",
                  "listenable_mono", "listenable_low", "listenable_high", "listenable_mono_base"]


def _ranking(db_path, base, tests_text, as_json, as_csv, since, until, min_change_db, confidence) -> None:
    """``--test a,b,c``: rank the configurations against the base on the same stations."""
    from analysis.compare.ranking import RANKING_NOTE, rank_configurations
    from analysis.headline import verdict_line

    tests = [t.strip() for t in tests_text.split(",") if t.strip()]
    if base in tests or len(set(tests)) != len(tests) or len(tests) < 2:
        raise click.UsageError("--test a,b,c needs two or more different labels, none equal to --base")
    ranked = rank_configurations(db_path, base, tests, since=since, until=until, min_change_db=min_change_db,
                                 confidence=confidence)
    rows = [r.to_dict() for r in ranked]
    if as_json:
        echo_json({"base": base, "ranking": rows, "method": RANKING_NOTE,
                   "headlines": {r.configuration: verdict_line(r.comparison.summary) for r in ranked}})
        return
    if as_csv:
        write_csv(rows, RANKING_FIELDS)
        return
    console = Console(width=max(110, Console().width))
    pct = f"{100 * confidence:g}%"
    table = Table(title=f"Configurations against '{base}', best first", title_justify="left")
    for name in ("rank", "configuration", "helped", "hurt / lost", f"median C/N change ({pct})",
                 "listenable mono (base)"):
        table.add_column(name, justify="left" if name == "configuration" else "right", no_wrap=True)
    for r in ranked:
        helped = f"{r.helped}" + (f" (up to {r.helped_high})" if r.helped_high > r.helped else "")
        median = "-" if r.median_delta_cn_db is None else f"{r.median_delta_cn_db:+.2f} dB" + (
            "" if r.median_ci_low_db is None else f" [{r.median_ci_low_db:+.2f}, {r.median_ci_high_db:+.2f}]")
        listen = f"{r.listenable_mono} ({r.listenable_mono_base})" + (
            "" if r.listenable_low == r.listenable_high else f", {r.listenable_low}-{r.listenable_high} by sweep")
        table.add_row(str(r.rank), r.configuration, helped, f"{r.hurt} / {r.lost}", median, listen)
    console.print(table)
    heard = ranked[0].stations_heard_by_all
    console.print(f"Median over the {heard} station{'' if heard == 1 else 's'} heard by all"
                  + ("; fewer than 6 give no interval at 95 %." if heard < 6 else "."), highlight=False, markup=False)
    for r in ranked:
        console.print(f"{r.configuration}: {verdict_line(r.comparison.summary)}", highlight=False, markup=False)
    console.print(f"Method: {RANKING_NOTE}.", highlight=False, markup=False)
