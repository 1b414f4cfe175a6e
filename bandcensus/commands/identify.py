"""``bandcensus identify``: name the stations in a SigMF recording from their RDS."""

from __future__ import annotations

import click
from rich.table import Table

from bandcensus.commands._common import echo_json, json_option
from bandcensus.commands._tables import print_table
from survey.rds import merge_rds
from survey.rds.columns import json_fields
from survey.rds.from_recording import identify_in_recording
from survey.station_names import name_for, read_station_names


@click.command("identify")
@click.argument("recording", type=click.Path(dir_okay=False))
@click.option("--freq-mhz", "freqs_mhz", type=float, multiple=True, required=True,
              help="Station frequency in MHz (repeat for several); decoded in every capture that holds it.")
@click.option("--names", "names_path", type=click.Path(dir_okay=False),
              help="CSV of freq_mhz,name rows naming stations that send no RDS name.")
@json_option
def command(recording, freqs_mhz, names_path, as_json):
    """Read RDS (PI, PS name, programme type, block error rate) of stations in a recording.

    Each capture holding a station is decoded on its own and the results are merged: a PI only
    when confirmed, PS characters only from groups whose blocks all check. A whole PS name
    needs about 0.44 s of IQ in one capture, or several shorter captures.
    """
    names = read_station_names(names_path) if names_path else {}
    found = identify_in_recording(recording, [f * 1e6 for f in freqs_mhz])
    rows = []
    for freq_hz, results in found:
        ident = merge_rds(results)
        rows.append({
            "freq_mhz": freq_hz / 1e6,
            "captures": len(results),
            **json_fields(ident),
            "rds_blocks": ident.blocks_received,
            "rds_block_errors": ident.blocks_errored,
            "name": (ident.ps.strip() if ident.ps else None) or name_for(names, freq_hz),
        })
    if as_json:
        echo_json({"recording": str(recording), "stations": rows})
        return
    table = Table(title=f"RDS in {recording}", title_justify="left")
    for col in ("MHz", "captures", "PI", "PS", "PTY", "block errors", "name"):
        table.add_column(col, no_wrap=True, justify="right" if col in ("MHz", "captures", "PTY", "block errors") else "left")
    for r in rows:
        bler = "no sync" if r["rds_block_error_rate"] is None else f"{100 * r['rds_block_error_rate']:.0f} %"
        table.add_row(f"{r['freq_mhz']:.1f}", str(r["captures"]), r["rds_pi"] or "-", r["rds_ps"] or "-",
                      "-" if r["rds_pty"] is None else str(r["rds_pty"]), bler, r["name"] or "-")
    print_table(table)
