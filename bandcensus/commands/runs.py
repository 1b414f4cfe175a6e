"""``bandcensus runs``: list the runs in a database."""

from __future__ import annotations

import json

import click
from rich.table import Table

from bandcensus.commands._common import db_option, echo_json, json_option
from bandcensus.commands._tables import print_table
from survey.writer import shown_status
from survey.store import list_runs, open_for_reading
from survey.text import terminal_label


def runs_payload(runs: list[dict]) -> dict:
    """``{"devices": {"d1": ...}, "runs": [...]}``: each distinct device description once.

    Every run names its device by key (``device_ref``) instead of repeating the description,
    which for a long replay or a week of scans is the same text run after run.
    """
    devices: dict[str, object] = {}
    keys: dict[str, str] = {}
    out = []
    for r in runs:
        text = json.dumps(r.get("device"), sort_keys=True)
        if text not in keys:
            keys[text] = f"d{len(keys) + 1}"
            devices[keys[text]] = r.get("device")
        row = {k: v for k, v in r.items() if k != "device"}
        row["device_ref"] = keys[text]
        out.append(row)
    return {"devices": devices, "runs": out}


@click.command("runs")
@db_option
@json_option
def command(db_path, as_json):
    """List runs with their source, status, sweep counts, configurations and inputs.

    With --json, each distinct device is given once under "devices" and runs refer to it by
    "device_ref".
    """
    conn = open_for_reading(db_path)
    try:
        runs = list_runs(conn)
    finally:
        conn.close()
    for r in runs:  # a run left 'running' by a process that is gone is shown as interrupted
        r["stored_status"] = r["status"]
        r["status"] = shown_status(r)
    if as_json:
        echo_json(runs_payload(runs))
        return
    if not runs:
        click.echo(f"{db_path}: no runs yet")
        return
    table = Table(title=f"Runs in {terminal_label(db_path)}", title_justify="left")
    for col in ("id", "started (UTC)", "source", "status", "sweeps", "incomplete", "gaps"):
        table.add_column(col, no_wrap=True, justify="right" if col in ("id", "sweeps", "incomplete", "gaps") else "left")
    table.add_column("configurations")
    table.add_column("inputs")
    for r in runs:
        table.add_row(str(r["id"]), terminal_label(str(r["started_utc"])[:16].replace("T", " ")),
                      terminal_label(r["source_kind"]), terminal_label(r["status"]),
                      str(r["complete_sweeps"]), str(r["incomplete_sweeps"]), str(r["gaps"]),
                      ", ".join(terminal_label(c) for c in r["configurations"]),
                      ", ".join(terminal_label(i) for i in r["inputs"]))
    print_table(table)
