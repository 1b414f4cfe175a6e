"""``bandcensus stations``: the census of transmitters, one row per station and configuration."""

from __future__ import annotations

from dataclasses import asdict

import click
from rich.table import Table

from analysis.census import kinds_from_option, station_census
from bandcensus.commands._common import db_option, echo_json
from bandcensus.commands._csv import write_csv
from bandcensus.commands._levels import calibration_option, load_optional, with_levels
from bandcensus.commands._tables import print_table
from survey.records import INPUT_KINDS
from survey.station_names import read_station_names
from survey.store import list_sweeps, open_for_reading

#: Absolute-level columns a calibration adds (dBm and dBuV across 50 ohm at the receiver input).
_LEVEL_FIELDS = ["power_dbm", "power_dbuv", "noise_dbm", "noise_dbuv", "calibrated"]

_FIELDS = ["configuration", "input", "freq_hz", "kind", "cn_db", "ci_db", "power_dbfs", "noise_dbfs",
           "occupied_bw_hz", "stereo", "heard_sweeps", "sweeps", "channel_freq_hz",
           "rds_pi", "rds_ps", "rds_pty", "rds_block_error_rate", "name"]


def _row(summary) -> dict:
    """A station summary as output: ``rds_pi`` as four hex digits (or None)."""
    row = {k: asdict(summary)[k] for k in _FIELDS}
    row["rds_pi"] = None if summary.rds_pi is None else f"{summary.rds_pi:04X}"
    return row


def _num(value, fmt: str, missing: str = "-") -> str:
    return missing if value is None else format(value, fmt)


@click.command("stations")
@db_option
@click.option("--config", "configuration", help="Configuration label (default: one block per configuration).")
@click.option("--input", "input_kind", type=click.Choice(INPUT_KINDS), default="antenna", show_default=True,
              help="Input label of the sweeps to take the census of.")
@click.option("--kind", type=click.Choice(["fm", "narrow", "all"]), default="fm", show_default=True,
              help="fm: broadcast stations; narrow: carriers, spurs, supply lines; all: both.")
@click.option("--names", "names_path", type=click.Path(dir_okay=False),
              help="CSV of freq_mhz,name rows naming stations whose RDS gives no name.")
@calibration_option
@click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON.")
@click.option("--csv", "as_csv", is_flag=True, help="Print CSV.")
def command(db_path, configuration, input_kind, kind, names_path, calibration_path, as_json, as_csv):
    """Per station (transmitter, not raster channel): C/N, C/I, how often heard, stereo, bandwidth.

    A station is every emission within a few kHz of the same carrier across sweeps. C/N is its
    own power over the floor in the channel bandwidth, median over sweeps (a sweep that did not
    detect it counts as below the floor); C/I is its own power over the neighbours' skirts left
    in its channel; bandwidth is the 99 % occupied bandwidth (ITU-R SM.328). PI and PS come from
    RDS (IEC 62106) merged over the sweeps (a whole PS needs about 0.45 s of dwell in one sweep,
    or several sweeps); RDS errors is the share of RDS blocks that failed their check.
    """
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    names = read_station_names(names_path) if names_path else None
    stations, notes = station_census(db_path, configuration=configuration, input=input_kind,
                                     kinds=kinds_from_option(kind), names=names)
    for note in notes:
        click.echo(f"Note: {note}", err=True)
    rows = [_row(s) for s in stations]
    cal = load_optional(calibration_path)
    if cal is not None:
        rows = _with_absolute_levels(db_path, rows, cal, input_kind)
    fields = _FIELDS + (_LEVEL_FIELDS if cal is not None else [])
    if as_json:
        echo_json({"stations": rows})
        return
    if as_csv:
        write_csv(rows, fields)
        return
    for label in sorted({r["configuration"] for r in rows}) or [configuration or "any configuration"]:
        block = [r for r in rows if r["configuration"] == label]
        table = Table(title=f"Stations of {label} ({input_kind}), medians over sweeps", title_justify="left")
        columns = ("MHz", "kind", "C/N dB", "C/I dB", "heard", "stereo", "occupied kHz", "PI", "PS",
                   "RDS errors") + (("C dBm", "N dBm") if cal is not None else ()) + (("name",) if names else ())
        for col in columns:
            table.add_column(col, justify="left" if col in ("kind", "stereo", "PI", "PS", "name") else "right")
        for r in block:
            table.add_row(
                f"{r['freq_hz'] / 1e6:.3f}", r["kind"], _num(r["cn_db"], ".1f", "below floor"),
                _num(r["ci_db"], ".1f"), f"{r['heard_sweeps']} of {r['sweeps']}",
                "yes" if r["stereo"] else "no", _num(None if r["occupied_bw_hz"] is None else r["occupied_bw_hz"] / 1e3, ".0f"),
                r["rds_pi"] or "-", r["rds_ps"] or "-",
                "-" if r["rds_block_error_rate"] is None else f"{100 * r['rds_block_error_rate']:.0f} %",
                *((_num(r["power_dbm"], ".1f"), _num(r["noise_dbm"], ".1f")) if cal is not None else ()),
                *((r["name"] or "-",) if names else ()),
            )
        print_table(table)


def _with_absolute_levels(db_path, rows: list[dict], cal, input_kind: str) -> list[dict]:
    """Rows with dBm/dBuV beside P and N, per configuration at its sweeps' receiver gain (a
    calibration holds at one gain only: another gain is refused with one line)."""
    conn = open_for_reading(db_path)
    try:
        gains = {label: next((s.gain_db for s in list_sweeps(conn, configuration=label, input=input_kind)), None)
                 for label in {r["configuration"] for r in rows}}
    finally:
        conn.close()
    out = []
    for label, gain in gains.items():
        out.extend(with_levels([r for r in rows if r["configuration"] == label], cal, gain))
    return sorted(out, key=lambda r: (r["configuration"], r["freq_hz"]))

