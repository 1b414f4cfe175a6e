"""``bandcensus channels``: per-channel medians over the sweeps of a configuration."""

from __future__ import annotations

import click

from analysis.channel_stats import channel_table
from analysis.errors import NoDataError
from analysis.selection import Survey
from bandcensus.commands._common import db_option, echo_json
from bandcensus.commands._csv import write_csv
from bandcensus.commands._levels import calibration_option, load_optional, with_levels
from bandcensus.commands._tables import channel_rows_table, print_table
from survey.records import INPUT_KINDS

_CSV_FIELDS = ["freq_hz", "power_dbfs", "noise_dbfs", "cn_db", "received", "received_fraction", "sweeps"]


@click.command("channels")
@db_option
@click.option("--config", "configuration", help="Configuration label (default: one block per configuration).")
@click.option("--input", "input_kind", type=click.Choice(INPUT_KINDS), default="antenna", show_default=True,
              help="Input label of the sweeps to summarise.")
@click.option("--since", help="Only sweeps started at or after this UTC time (ISO 8601).")
@click.option("--until", help="Only sweeps started before this UTC time (ISO 8601).")
@calibration_option
@click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON.")
@click.option("--csv", "as_csv", is_flag=True, help="Print CSV.")
def command(db_path, configuration, input_kind, since, until, calibration_path, as_json, as_csv):
    """Per channel: median power P, noise N, C/N (some call it SNR) over sweeps, and how often it was detected.

    P is signal plus noise in the channel bandwidth (dBFS); N is the local noise floor times
    the bandwidth (dBFS); C/N = (P - N)/N in dB, shown as not received when P does not exceed N
    by the detection margin.
    """
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    with Survey(db_path) as survey:
        if configuration is not None:
            blocks = [(configuration, channel_table(survey, configuration, input=input_kind, since=since, until=until))]
        else:  # one block per configuration: medians are never pooled across configurations
            labels = [c.configuration for c in survey.label_counts() if c.input == input_kind]
            if not labels:
                survey.sweeps(None, input_kind, since, until)  # raises the one-line error naming what exists
            blocks = []
            for label in labels:
                try:
                    blocks.append((label, channel_table(survey, label, input=input_kind, since=since, until=until)))
                except NoDataError:
                    continue  # no sweeps of this label in the time range
            if not blocks:
                survey.sweeps(None, input_kind, since, until)
        cal = load_optional(calibration_path)
        if cal is not None:  # dBm / dBuV beside P and N, at each configuration's receiver gain
            blocks = [(label, with_levels(rows, cal, survey.sweeps(label, input_kind, since, until)[0].gain_db))
                      for label, rows in blocks]
    if as_json:
        if configuration is not None:
            echo_json({"configuration": configuration, "input": input_kind, "channels": blocks[0][1]})
        else:
            echo_json({"input": input_kind,
                       "configurations": [{"configuration": label, "channels": rows} for label, rows in blocks]})
    elif as_csv:
        fields = _CSV_FIELDS + ([] if configuration is not None else ["configuration"])
        if cal is not None:
            fields += ["power_dbm", "power_dbuv", "noise_dbm", "noise_dbuv", "calibrated"]
        write_csv(({**r, "configuration": label} for label, rows in blocks for r in rows), fields)
    else:
        for label, rows in blocks:
            print_table(channel_rows_table(rows, f"Channels of '{label}' ({input_kind}), medians over its sweeps"))
