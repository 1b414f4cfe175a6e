"""``bandcensus history``: one station's C/N over time, per configuration."""

from __future__ import annotations

import click

from analysis.history import series_rows, station_history, summarise_series
from analysis.thresholds import LISTENABLE_MONO_CN_DB, LISTENABLE_SOURCE, LISTENABLE_STEREO_CN_DB
from bandcensus.commands._common import db_option, echo_json
from bandcensus.commands._csv import write_csv
from bandcensus.commands._levels import calibration_option, load_optional, with_levels
from bandcensus.commands._tables import Column, print_fitted
from bandcensus.commands._text import CN_EXPLAINED, UNCALIBRATED_NOTE, display_path, plural
from survey.records import INPUT_KINDS

_SUMMARY_COLUMNS = (
    Column("configuration", justify="left"),
    Column("sweeps", short="n"),
    Column("detected"),
    Column("C/N median", short="median"),
    Column("C/N 10-90 %", short="10-90 %", drop_order=2),
    Column("C/N range", short="range", drop_order=1),
    Column("listenable mono", short="mono"),
    Column("listenable stereo", short="stereo"),
)
_DETAIL_COLUMNS = (
    Column("configuration", justify="left"),
    Column("started (UTC)", short="UTC", justify="left"),
    Column("C/N dB", short="C/N"),
    Column("P dBFS", short="P", drop_order=2),
    Column("N dBFS", short="N", drop_order=1),
    Column("reception", justify="left"),
)
_CSV_FIELDS = ["configuration", "sweep_id", "started_utc", "freq_hz", "cn_db", "detected", "listenable_mono",
               "listenable_stereo", "power_dbfs", "noise_dbfs"]
_CSV_ABSOLUTE = ["power_dbm", "power_dbuv", "noise_dbm", "noise_dbuv"]


def _pct(fraction: float | None) -> str:
    return "-" if fraction is None else f"{100.0 * fraction:.0f} %"


def _db(value: float | None) -> str:
    return "-" if value is None else f"{value:.1f}"


def _reception(row: dict) -> str:
    if row["listenable_stereo"]:
        return "listenable stereo"
    if row["listenable_mono"]:
        return "listenable mono"
    return "detected" if row["detected"] else "not detected"


@click.command("history")
@db_option
@click.option("--station", "station_mhz", required=True, type=click.FloatRange(min=0.0, min_open=True),
              help="Station frequency in MHz, e.g. 97.2 (the station heard nearest it, within 100 kHz).")
@click.option("--config", "configurations", multiple=True,
              help="Configuration label to include (repeatable, or A,B); default: every configuration.")
@click.option("--input", "input_kind", type=click.Choice(INPUT_KINDS), default="antenna", show_default=True,
              help="Input label of the sweeps.")
@click.option("--since", help="Only sweeps started at or after this UTC time (ISO 8601).")
@click.option("--until", help="Only sweeps started before this UTC time (ISO 8601).")
@click.option("--detail", is_flag=True, help="Also print every sweep's C/N, not only the summary.")
@click.option("--explain", is_flag=True, help="Say what C/N and the thresholds are.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), help="Write a C/N-over-time figure (PNG).")
@calibration_option
@click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON.")
@click.option("--csv", "as_csv", is_flag=True, help="Print every sweep as CSV.")
def command(db_path, station_mhz, configurations, input_kind, since, until, detail, explain, plot_path,
            calibration_path, as_json, as_csv):
    """How one station's C/N varied over time (through a night, a week), per configuration.

    C/N is the carrier-to-noise ratio in the channel bandwidth, (P - N)/N in dB; some call it
    SNR. Detected: C/N at or above the sweep's detection margin; listenable mono / stereo:
    C/N of at least 12 / 32 dB (a rule of thumb; --explain says so). With --calibration the station's
    level is also given in dBm and dBuV at the receiver input (CSV and JSON).
    """
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    labels = [part.strip() for item in configurations for part in item.split(",") if part.strip()]
    history = station_history(db_path, station_mhz * 1e6, labels or None, input=input_kind,
                              since_utc=since, until_utc=until)
    cal = load_optional(calibration_path)
    rows = []
    for s in history.series:
        part = [r for r in series_rows(history) if r["configuration"] == s.configuration]
        rows.extend(with_levels(part, cal, s.gain_db))
    summaries = [summarise_series(s) for s in history.series]
    written = None
    if plot_path:
        from analysis.history.plots import plot_history

        written = plot_history(history, plot_path)
    if as_json:
        echo_json({"station_hz": history.station_hz, "channel_hz": history.series[0].freq_hz,
                   "input": input_kind, "calibrated": cal is not None, "summary": summaries, "sweeps": rows,
                   "plot": None if written is None else str(written)})
        return
    if as_csv:
        write_csv(rows, _CSV_FIELDS + (_CSV_ABSOLUTE if cal is not None else []))
        return
    freq = history.series[0].freq_hz
    total = sum(s.n_sweeps for s in history.series)
    first = min(s.started_utc[0] for s in history.series)
    last = max(s.started_utc[-1] for s in history.series)
    click.echo(f"Station at {freq / 1e6:.2f} MHz ({input_kind}): {plural(total, 'sweep')} in "
               f"{plural(len(history.series), 'configuration')}, {first[:16].replace('T', ' ')} to "
               f"{last[:16].replace('T', ' ')} UTC")
    cells = [[s["configuration"], str(s["sweeps"]), _pct(s["detected_fraction"]), _db(s["cn_median_db"]),
              f"{_db(s['cn_p10_db'])} to {_db(s['cn_p90_db'])}", f"{_db(s['cn_min_db'])} to {_db(s['cn_max_db'])}",
              _pct(s["listenable_mono_fraction"]), _pct(s["listenable_stereo_fraction"])] for s in summaries]
    print_fitted("C/N over time, per configuration (share of sweeps)", _SUMMARY_COLUMNS, cells)
    if detail:
        detail_cells = [[r["configuration"], r["started_utc"][:19].replace("T", " "), _db(r["cn_db"]),
                         _db(r["power_dbfs"]), _db(r["noise_dbfs"]), _reception(r)] for r in rows]
        print_fitted("Every sweep", _DETAIL_COLUMNS, detail_cells)
    margin = history.series[0].detection_margin_db
    click.echo(f"C/N in dB. Detected: C/N >= {margin:g} dB; listenable mono >= {LISTENABLE_MONO_CN_DB:g} dB, "
               f"stereo >= {LISTENABLE_STEREO_CN_DB:g} dB.")
    if explain:
        click.echo(f"{CN_EXPLAINED} The listenable thresholds are {LISTENABLE_SOURCE}. Percentages are shares "
                   "of all sweeps; C/N statistics are over the sweeps where P exceeded N.")
        if cal is None:
            click.echo(f"{UNCALIBRATED_NOTE} --calibration FILE adds dBm and dBuV to --csv and --json.")
    if written is not None:
        click.echo(f"Plot: {display_path(written)}")
