"""``bandcensus compare``: channel-by-channel A/B comparison of two configurations."""

from __future__ import annotations

import csv
import sys

import click
from rich.console import Console
from rich.table import Table

from analysis.compare import Comparison, compare_configurations
from bandcensus.commands._common import _clean, db_option, echo_json, json_option

#: Columns of the channel rows (JSON and CSV), units in the names.
CHANNEL_FIELDS = ["freq_hz", "base_cn_db", "test_cn_db", "delta_cn_db", "ci_low_db", "ci_high_db",
                  "gain_db", "noise_rise_db", "verdict"]


def comparison_payload(result: Comparison) -> dict:
    """The JSON document of a comparison (channel rows restricted to :data:`CHANNEL_FIELDS`
    plus ``p_value`` and ``n_used``)."""
    full = result.to_dict()
    keep = CHANNEL_FIELDS + ["p_value", "n_used"]
    return {
        "base": full["base"],
        "test": full["test"],
        "input": full["input"],
        "method": full["method"],
        "paired": full["paired"],
        "sweeps": {"base": full["n_base_sweeps"], "test": full["n_test_sweeps"], "pairs": full["n_pairs"]},
        "thresholds": full["thresholds"],
        "channels": [{k: row[k] for k in keep} for row in full["channels"]],
        "summary": full["summary"],
        "warnings": full["warnings"],
    }


def _iso_time(ctx, param, value):
    """Validate an ISO 8601 time option at parse time (bad usage: exit code 2)."""
    if value is None:
        return None
    from analysis.channel_stats import normalise_utc
    from analysis.errors import BadParameterError

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


def _summary_lines(result: Comparison) -> list[str]:
    s = result.summary
    t = result.thresholds
    lines = [
        f"Compared '{result.test}' (test) against '{result.base}' (base), input {result.input}: "
        f"{result.n_base_sweeps} base and {result.n_test_sweeps} test sweeps.",
        f"Method: {result.method}.",
        "SNR (C/N) = (P - N) / N in dB: channel power P above the local noise power N; "
        "delta = test minus base; gain = ratio of P - N; noise rise = ratio of N; delta = gain - noise rise.",
        f"Received: base {s['received_base']}, test {s['received_test']}, both {s['received_both']}. "
        f"Usable (SNR >= {t['usable_cn_db']:g} dB, {t['usable_cn_db_source']}): "
        f"base {s['usable_base']}, test {s['usable_test']}.",
        f"Median change over stations received in both: {_num(s['median_delta_cn_db'])} dB "
        f"(median gain {_num(s['median_gain_db'])} dB).",
    ]
    for key, name in (("best_channel", "Best"), ("worst_channel", "Worst")):
        c = s[key]
        if c is not None:
            ci = "" if c["ci_low_db"] is None else f" [{c['ci_low_db']:+.1f}, {c['ci_high_db']:+.1f}]"
            lines.append(f"{name}: {c['freq_hz'] / 1e6:.2f} MHz {c['delta_cn_db']:+.1f} dB{ci}")
    counts = ", ".join(f"{k} {v}" for k, v in s["verdict_counts"].items() if v)
    lines.append(f"Verdicts: {counts}. Improved/worse needs {t['improved_if']}.")
    lines.append(f"Noise: {s['noise_source']}.")
    pred = s["predicted_noise_rise"]
    lines.append(f"Predicted noise rise: {pred['note'] if isinstance(pred, dict) else pred}.")
    for finding in s.get("findings", []):
        lines.append(f"Diagnosis: {finding}")
    return lines


def _table(result: Comparison) -> Table:
    pct = f"{100 * result.thresholds['confidence']:g}%"
    table = Table(title=f"'{result.test}' against '{result.base}', per channel (SNR, delta, interval, "
                        "gain and noise rise in dB)", title_justify="left")
    for name in ("MHz", "base SNR", "test SNR", "delta", f"{pct} interval", "gain",
                 "noise rise", "verdict"):
        table.add_column(name, justify="left" if name == "verdict" else "right", no_wrap=True)
    for c in sorted(result.channels, key=lambda c: c.freq_hz):
        interval = "-" if c.ci_low_db is None else f"[{c.ci_low_db:+.2f}, {c.ci_high_db:+.2f}]"
        table.add_row(
            f"{c.freq_hz / 1e6:.2f}", _num(c.base_cn_db, "{:.1f}"), _num(c.test_cn_db, "{:.1f}"),
            _num(c.delta_cn_db, "{:+.2f}"), interval, _num(c.gain_db), _num(c.noise_rise_db), c.verdict,
        )
    return table


@click.command("compare")
@db_option
@click.option("--base", required=True, help="Configuration label of the reference (e.g. bare).")
@click.option("--test", required=True, help="Configuration label compared against it (e.g. preamp-a).")
@json_option
@click.option("--csv", "as_csv", is_flag=True, help="Print the channel rows as CSV.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), callback=_png_path,
              help="Also write a PNG figure here.")
@click.option("--since", callback=_iso_time, help="Only sweeps started at or after this UTC time (ISO 8601).")
@click.option("--until", callback=_iso_time, help="Only sweeps started before this UTC time (ISO 8601).")
@click.option("--min-change-db", type=click.FloatRange(min=0.0), default=0.5, show_default=True,
              help="Smallest SNR change (dB) called improved or worse.")
@click.option("--usable-cn-db", type=float, default=12.0, show_default=True,
              help="SNR (dB) counted as usable FM reception in the summary (common practice, no source).")
@click.option("--confidence", type=click.FloatRange(0.5, 1.0, max_open=True), default=0.95, show_default=True,
              help="Confidence level of the intervals.")
@click.option("--enr-db", type=float, help="ENR of the noise source (dB), used when noise-hot/noise-cold runs "
              "exist, to predict the noise rise from the preamp's measured noise figure.")
@click.option("--no-diagnosis", is_flag=True, help="Skip the chain diagnosis (clipping, intermodulation, "
              "oscillation, added noise) in the summary.")
def command(db_path, base, test, as_json, as_csv, plot_path, since, until, min_change_db, usable_cn_db,
            confidence, enr_db, no_diagnosis):
    """Which stations gained or lost SNR (C/N) with TEST compared to BASE, by how much, how sure.

    SNR (C/N) is (P - N)/N in dB. Sweeps that alternated between the two configurations are
    compared in pairs (Wilcoxon signed-rank test, bootstrap interval of the median paired
    difference); sweeps taken at different times with a Hodges-Lehmann shift and its
    Mann-Whitney interval. Gain is the ratio of signal powers P - N, noise rise the ratio
    of N, and delta SNR = gain - noise rise.
    """
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    if base == test:
        raise click.UsageError("--base and --test name the same configuration; give two different labels")
    result = compare_configurations(
        db_path, base, test, since=since, until=until, min_change_db=min_change_db,
        confidence=confidence, usable_cn_db=usable_cn_db,
        noise_options=None if enr_db is None else {"enr_db": enr_db},
        with_diagnosis=not no_diagnosis,
    )
    if plot_path:
        from analysis.compare_plots import plot_comparison

        plot_comparison(result, plot_path)
    if as_json:
        echo_json(comparison_payload(result))
        return
    if as_csv:
        writer = csv.DictWriter(sys.stdout, fieldnames=CHANNEL_FIELDS, extrasaction="ignore", lineterminator="\n")
        writer.writeheader()
        for row in comparison_payload(result)["channels"]:
            writer.writerow({k: ("" if v is None else v) for k, v in _clean(row).items()})
        return
    console = Console(width=max(110, Console().width))
    for line in _summary_lines(result):
        console.print(line, highlight=False, markup=False)
    for warning in result.warnings:
        console.print(f"Warning: {warning}", highlight=False, markup=False)
    console.print(_table(result))
    if plot_path:
        console.print(f"Figure written to {plot_path}", highlight=False, markup=False)
