"""``bandcensus demo``: the whole job on the bundled simulated recordings."""

from __future__ import annotations

from pathlib import Path

import click

from bandcensus.demo import run_demo


@click.command("demo")
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              help="New folder for the outputs (default: bandcensus-demo-<time> in the current folder).")
def command(out_dir):
    """Replay the bundled SIMULATED recordings of an invented town and run every analysis.

    Writes the databases, PNG plots and an HTML report into a new folder and prints, in about
    150 lines, what each analysis says (answer first) with the command line that produced it:
    the station census, the stations' names, each preamp's headlines, the noise figures, the
    passbands, the trouble found, and where the report is.
    """
    from bandcensus.cli import main  # the demo runs the same commands a user would type

    folder, results = run_demo(out_dir, main, click.echo)
    failed = [step for step, code in results if code != 0]
    if failed:
        names = ", ".join(step.argv[0] for step in failed)
        raise click.ClickException(f"demo steps failed: {names} (outputs so far are in {folder})")
