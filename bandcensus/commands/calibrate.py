"""``bandcensus calibrate``: dBFS to dBm at the receiver input from generator sweeps of known level."""

from __future__ import annotations

import click

from analysis.calibration import (
    DBUV_MINUS_DBM_50_OHM,
    calibrate_from_generator,
    calibration_to_dict,
    read_levels_csv,
    save_calibration,
)
from bandcensus.commands._common import db_option, echo_json
from bandcensus.commands._csv import write_csv
from bandcensus.commands._tables import Column, print_fitted
from bandcensus.commands._text import display_path, plural

_COLUMNS = (
    Column("MHz"),
    Column("generator dBm", short="gen. dBm"),
    Column("tone dBFS", short="dBFS"),
    Column("offset dB", short="offset"),
    Column("spread dB", short="spread", drop_order=2),
    Column("C/N dB", short="C/N", drop_order=1),
    Column("sweeps", short="n", drop_order=3),
)
_CSV_FIELDS = ["freq_hz", "level_dbm", "tone_dbfs", "offset_db", "spread_db", "cn_db", "sweeps"]


@click.command("calibrate")
@db_option
@click.option("--config", "configuration", required=True,
              help="Configuration label of the generator sweeps (the chain they were taken with).")
@click.option("--level-dbm", type=float,
              help="Generator level at the receiver input, dBm (cable loss included), the same at every frequency.")
@click.option("--levels", "levels_path", type=click.Path(dir_okay=False),
              help="CSV of generator levels per frequency, header freq_mhz,level_dbm (instead of --level-dbm).")
@click.option("--out", "out_path", required=True, type=click.Path(dir_okay=False),
              help="Calibration file to write (JSON), for --calibration in other commands.")
@click.option("--json", "as_json", is_flag=True, help="Print the calibration as JSON.")
@click.option("--csv", "as_csv", is_flag=True, help="Print the calibration points as CSV.")
def command(db_path, configuration, level_dbm, levels_path, out_path, as_json, as_csv):
    """Turn dBFS into dBm at the receiver input, from sweeps of a signal generator of known level.

    Record the generator sweeps first with the generator on the receiver input and the input
    labelled generator (scan --input generator --gain-db G), stepping the generator across the
    band between sweeps (or a comb of tones with --levels). For every tone found, the offset
    dBm - dBFS is stored; between tones it is interpolated linearly in frequency. The
    calibration holds at the receiver gain of those sweeps only; other commands refuse it at
    any other gain. dBuV is the voltage across 50 ohm: dBm + 106.99.
    """
    if (level_dbm is None) == (levels_path is None):
        raise click.UsageError("give the generator level with --level-dbm, or a file with --levels (one of them)")
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    levels = read_levels_csv(levels_path) if levels_path else None
    cal = calibrate_from_generator(db_path, configuration, level_dbm=level_dbm, levels=levels)
    written = save_calibration(cal, out_path)
    if as_json:
        echo_json({**calibration_to_dict(cal), "file": str(written)})
        return
    rows = [dict(freq_hz=p.freq_hz, level_dbm=p.level_dbm, tone_dbfs=p.tone_dbfs, offset_db=p.offset_db,
                 spread_db=p.spread_db, cn_db=p.cn_db, sweeps=p.sweeps) for p in cal.points]
    if as_csv:
        write_csv(rows, _CSV_FIELDS)
        return
    title = (f"Calibration at receiver gain {cal.gain_db:g} dB from {plural(len(cal.sweep_ids), 'generator sweep')} "
             f"of '{cal.configuration}' ({cal.level_source})")
    cells = [[f"{p.freq_hz / 1e6:.2f}", f"{p.level_dbm:.2f}", f"{p.tone_dbfs:.2f}", f"{p.offset_db:+.2f}",
              f"{p.spread_db:.2f}", f"{p.cn_db:.1f}", str(p.sweeps)] for p in cal.points]
    print_fitted(title, _COLUMNS, cells)
    lo, hi = cal.points[0].freq_hz / 1e6, cal.points[-1].freq_hz / 1e6
    span = (f"between {lo:.2f} and {hi:.2f} MHz (outside, the end values are held)" if hi > lo
            else f"measured at {lo:.2f} MHz only (the same offset is used at every frequency)")
    click.echo(f"dBm at the receiver input = dBFS + offset, {span}; dBuV (50 ohm) = dBm + "
               f"{DBUV_MINUS_DBM_50_OHM:.2f}.")
    click.echo(f"Written to {display_path(written)}; use it with --calibration at receiver gain {cal.gain_db:g} dB.")
