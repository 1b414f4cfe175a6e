"""``bandcensus diagnose``: name how a preamp makes reception worse, with the evidence."""

from __future__ import annotations

import click

from analysis.diagnose.core import DEFAULT_CLIP_THRESHOLD
from analysis.workflows import diagnose_chain
from bandcensus.commands._common import db_option, echo_json, json_option
from bandcensus.commands._csv import write_csv
from bandcensus.commands._noise_source import noise_options_from, noise_source_options
from bandcensus.commands._text import plural


def _fmt(key: str, value) -> str:
    if isinstance(value, float):
        if key.endswith("_hz"):
            return f"{value / 1e6:.3f} MHz"
        if key.endswith("_fraction"):
            return f"{value:.3g}"
        return f"{value:.1f}"
    return str(value)


def _target_hz(text: str | None) -> tuple[float, float] | None:
    """``START-STOP`` in MHz as Hz, or None; a malformed range is a usage error."""
    if text is None:
        return None
    try:
        lo, hi = (float(x) * 1e6 for x in text.split("-"))
    except ValueError:
        raise click.BadParameter(f"{text!r} is not START-STOP in MHz, e.g. 88-100", param_hint="--target") from None
    if not hi > lo:
        raise click.BadParameter(f"{text!r}: STOP must be above START", param_hint="--target")
    return lo, hi


@click.command("diagnose")
@db_option
@click.option("--base", required=True, help="Configuration label without the preamp (e.g. bare).")
@click.option("--test", required=True, help="Configuration label with the preamp.")
@click.option("--attenuated", default=None,
              help="Label of sweeps of the test chain through a known attenuator at its input.")
@click.option("--attenuation-db", type=float, default=None, help="Loss of that attenuator, dB.")
@click.option("--clip-threshold", type=float, default=DEFAULT_CLIP_THRESHOLD, show_default=True,
              help="Fraction of 8-bit samples at the rails per hop counted as clipping.")
@click.option("--target", default=None,
              help="Band the preamp should cover, START-STOP in MHz, for the passband check (default: the band plan).")
@noise_source_options
@json_option
@click.option("--csv", "as_csv", is_flag=True, help="Print the findings as CSV, one row each with its evidence.")
@click.option("--explain", is_flag=True, help="Also print each finding's evidence and what every check looked at.")
def command(db_path, base, test, attenuated, attenuation_db, clip_threshold, target, enr_db, enr_table, cold_k,
            receiver_nf_db, as_json, as_csv, explain):
    """Check the --test configuration against --base for the four ways a preamp makes things worse.

    Clipping of the receiver's 8-bit converter, intermodulation products of strong stations,
    an oscillating preamp and noise added after the preamp's tuned circuits (a noisy supply);
    then whether its passband covers the stations heard in the target band.
    A run through a known attenuator (--attenuated LABEL --attenuation-db X) separates real
    stations (they drop by X) from third-order products (they drop by 3X).
    """
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    if (attenuated is None) != (attenuation_db is None):
        raise click.UsageError("give --attenuated LABEL together with --attenuation-db X")
    options = noise_options_from(enr_db, enr_table, cold_k, receiver_nf_db)
    result = diagnose_chain(
        db_path, base, test, attenuated=attenuated, attenuation_db=attenuation_db, clip_threshold=clip_threshold,
        enr_db=options.enr_db, enr_table=options.enr_table, cold_k=options.cold_k,
        receiver_nf_db=options.receiver_nf_db, target_hz=_target_hz(target),
    )
    if as_json:
        echo_json(result.to_dict())
        return
    if as_csv:
        rows, fields = finding_rows(result.findings)
        write_csv(rows, fields)
        return
    n = len(result.findings)
    click.echo(f"Diagnosis of '{test}' against '{base}': " + plural(n, "finding"))
    for f in result.findings:
        where = "broadband" if f.freq_hz is None else f"at {f.freq_hz / 1e6:.3f} MHz"
        click.echo(f"{f.severity.upper()}: {f.kind} {where}: {f.advice}")
        if explain:
            for key, value in f.evidence.items():
                click.echo(f"  {key}: {_fmt(key, value)}")
    if explain:
        click.echo(("No fault found. " if not n else "") + "Checked:")
        for line in result.checked:
            click.echo(f"  {line}")
        for note in result.notes:
            click.echo(f"note: {note}")
    else:
        checks = [line.split(":", 1)[0] for line in result.checked]
        click.echo(("No fault found. " if not n else "") + f"Checked: {', '.join(checks)} (--explain for the evidence"
                   + (f" and {plural(len(result.notes), 'note')})" if result.notes else ")"))


#: Leading CSV columns of the findings; each finding's evidence follows in further columns.
FINDING_FIELDS = ["severity", "kind", "freq_hz", "advice"]


def finding_rows(findings) -> tuple[list[dict], list[str]]:
    """Rows (one per finding) and columns: the fixed ones, then every evidence key in first-seen order.

    Evidence keys carry their unit (``_db``, ``_k``, ``_hz``), so the CSV writer rounds each to
    the precision it carries.
    """
    fields = list(FINDING_FIELDS)
    rows = []
    for f in findings:
        row = {"severity": f.severity, "kind": f.kind, "freq_hz": f.freq_hz, "advice": f.advice}
        for key, value in f.evidence.items():
            if key not in fields:
                fields.append(key)
            row.setdefault(key, value)
        rows.append(row)
    return rows, fields
