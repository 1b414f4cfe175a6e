"""``bandcensus report``: one self-contained HTML page of a night's A/B survey."""

from __future__ import annotations

import click

from bandcensus.commands._common import db_option, parse_mhz_range
from bandcensus.commands._progress import step_progress
from bandcensus.commands._text import display_path
from bandcensus.commands._noise_source import noise_options_from, noise_source_options


@click.command("report")
@db_option
@click.option("--base", required=True, help="Configuration label without the preamp (e.g. bare).")
@click.option("--test", required=True, help="Configuration label with the preamp.")
@click.option("--out", "out_path", required=True, type=click.Path(dir_okay=False),
              help="HTML file to write (replaced if it exists).")
@click.option("--target", default=None,
              help="Band the preamp should cover, START-STOP in MHz (default: the band plan's edges).")
@noise_source_options
@click.option("--quiet", is_flag=True, help="Print only errors and the final line (no progress line).")
def command(db_path, base, test, out_path, target, enr_db, enr_table, cold_k, receiver_nf_db, quiet) -> None:
    """Write one HTML page summing up TEST against BASE: what the preamp did per station,
    its passband, its noise figure, the site's noise, any trouble found and how things moved
    overnight.

    The page is self-contained (inline style, embedded figures, no script, nothing fetched):
    open it offline in any browser, print it, or send it as one file. Sections whose runs are
    missing say so in one line.
    """
    if base == test:
        raise click.UsageError("--base and --test name the same configuration; give two different labels")
    target_hz = parse_mhz_range(target, "--target") if target is not None else None
    from analysis.report.html import write_report  # the analyses and plotting, not needed for --help

    options = noise_options_from(enr_db, enr_table, cold_k, receiver_nf_db)
    with step_progress(quiet) as on_step:
        written = write_report(db_path, base, test, out_path, target_hz=target_hz, enr_db=options.enr_db,
                               enr_table=options.enr_table, cold_k=options.cold_k, on_step=on_step)
    click.echo(f"Report: {display_path(written.path)}")


__all__ = ["command"]
