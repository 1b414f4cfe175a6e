"""``bandcensus noise``: noise figures, preamp gain and outside noise from the noise runs."""

from __future__ import annotations

import click

from analysis.noise.workflow import analyse_noise
from analysis.selection import Survey
from analysis.workflows import added_noise_for
from bandcensus.commands._common import db_option, echo_json, json_option
from bandcensus.commands._noise_source import noise_options_from, noise_source_options
from bandcensus.commands._csv import write_csv
from bandcensus.commands._tables import Column, print_fitted
from bandcensus.commands._text import display_path, plural

#: Table columns: (point key, heading, format).
_COLUMNS = (
    ("receiver_nf_db", "receiver NF dB", "{:.2f}"),
    ("system_nf_db", "system NF dB", "{:.2f}"),
    ("preamp_gain_db", "preamp gain dB", "{:.2f}"),
    ("preamp_nf_db", "preamp NF dB", "{:.2f}"),
    ("preamp_nf_uncertainty_db", "± dB", "{:.2f}"),
    ("antenna_temp_k", "Ta K", "{:.0f}"),
    ("outside_fa_db", "Fa dB", "{:.1f}"),
    ("predicted_benefit_db", "C/N gain dB", "{:+.2f}"),
    ("projected_benefit_db", "other rx dB", "{:+.2f}"),
)
_SUMMARY = (
    ("passband_peak_freq_hz", "passband peak", lambda v: f"{v / 1e6:.2f} MHz"),
    ("passband_peak_gain_db", "peak gain", lambda v: f"{v:.2f} dB"),
    ("receiver_nf_db", "receiver NF", lambda v: f"{v:.2f} dB"),
    ("system_nf_db", "system NF", lambda v: f"{v:.2f} dB"),
    ("preamp_gain_db", "preamp gain", lambda v: f"{v:.2f} dB"),
    ("preamp_nf_db", "preamp NF", lambda v: f"{v:.2f} dB"),
    ("preamp_nf_uncertainty_db", "preamp NF standard uncertainty", lambda v: f"{v:.2f} dB"),
    ("preamp_nf_terminated_db", "preamp NF (terminated ratio)", lambda v: f"{v:.2f} dB"),
    ("station_minus_hot_cold_gain_db", "gain on stations minus hot-minus-cold gain", lambda v: f"{v:+.2f} dB"),
    ("antenna_temp_k", "antenna noise temperature", lambda v: f"{v:.0f} K"),
    ("outside_fa_db", "outside noise Fa", lambda v: f"{v:.1f} dB"),
    ("closest_environment", "closest P.372 environment", str),
    ("max_possible_improvement_db", "largest improvement any preamp could give", lambda v: f"{v:.2f} dB"),
    ("predicted_benefit_db", "this preamp's C/N gain on the measuring receiver", lambda v: f"{v:+.2f} dB"),
    ("projected_benefit_db", "this preamp's C/N gain on the other receiver", lambda v: f"{v:+.2f} dB"),
)


#: Summary rows shown only with --explain (cross-checks of the main figures).
_DETAIL = frozenset({"passband_peak_gain_db", "preamp_nf_terminated_db", "station_minus_hot_cold_gain_db"})
#: The noise workflow's own 1/G split of the preamp temperature: a cross-check, not printed; the
#: added noise after the preamp is the one estimate every command prints (added_noise_for).
_NOT_PRINTED = ("noise_after_gain_k", "noise_after_gain_uncertainty_k", "preamp_nf_at_input_db")
#: Short headers and drop order of the per-channel columns (in the order of ``_COLUMNS``).
_SHORT = ("rx NF", "sys NF", "G", "NF", "±", "Ta", "Fa", "C/N+", "other")
_DROP = (None, 3, None, None, 2, None, 1, None, 0)
#: CSV columns (units in the names), one row per channel.
CSV_FIELDS = ["freq_hz", "occupied"] + [key for key, _, _ in _COLUMNS]


def _cell(value, fmt: str) -> str:
    return "-" if value is None else fmt.format(value)


@click.command("noise")
@db_option
@click.option("--receiver", required=True, help="Configuration label of the receiver alone (e.g. bare).")
@click.option("--system", default=None,
              help="Configuration label of preamp + receiver (without it: the receiver's NF and the site's "
                   "outside noise only).")
@noise_source_options
@click.option("--enr-uncertainty-db", type=float, default=0.2, show_default=True,
              help="Standard uncertainty of the ENR, dB.")
@click.option("--for-receiver-nf-db", type=float,
              help="Project the preamp's C/N gain onto another receiver of this NF, dB.")
@json_option
@click.option("--csv", "as_csv", is_flag=True, help="Print the per-channel values as CSV.")
@click.option("--channels", is_flag=True, help="Also print the per-channel table (every few channels).")
@click.option("--explain", is_flag=True, help="Also print the assumptions and how to remove them.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), help="Write a PNG figure here.")
def command(db_path, receiver, system, enr_db, enr_table, cold_k, receiver_nf_db, enr_uncertainty_db,
            for_receiver_nf_db, as_json, as_csv, channels, explain, plot_path):
    """Noise figure of receiver, system and preamp; preamp gain; outside noise beside ITU-R P.372.

    Uses whichever sweeps exist for the two configurations: noise-hot + noise-cold (Y-factor
    with second-stage correction and hot-minus-cold gain), terminated (ratio with a known gain
    and receiver NF) and antenna + terminated (outside noise temperature Ta and Fa). States
    every assumption and which runs would remove it.
    """
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    options = noise_options_from(enr_db, enr_table, cold_k, receiver_nf_db)
    with Survey(db_path) as survey:
        result = analyse_noise(
            survey, receiver, system, enr_uncertainty_db=enr_uncertainty_db, for_receiver_nf_db=for_receiver_nf_db,
            **options.workflow_kwargs(),
        )
        added, finding = added_noise_for(survey, receiver, system, options) if system else ("", None)
    if plot_path:
        from analysis.noise.plots import plot_noise

        plot_noise(result, plot_path)
    payload = result.to_dict()
    for key in _NOT_PRINTED:
        payload["summary"].pop(key, None)
    if system:
        payload["added_noise_after_preamp"] = {"line": added,
                                               "evidence": None if finding is None else dict(finding.evidence)}
    if as_json:
        echo_json(payload)
        return
    if as_csv:
        write_csv(payload["points"], CSV_FIELDS)
        return
    if channels:
        _print_channels(payload, receiver, system)
    s = payload["summary"]
    what = f" and '{system}' (preamp + receiver)" if system else " (receiver alone)"
    rows = []
    for key, label, fmt in _SUMMARY:
        if s.get(key) is not None and (explain or key not in _DETAIL):
            if key == "projected_benefit_db":
                label += f" (NF {s['for_receiver_nf_db']:g} dB)"
            rows.append([label, fmt(s[key])])
    print_fitted(f"Noise of '{receiver}'{what}, {s['summary_region']}",
                 [Column("quantity", justify="left"), Column("value")], rows)
    if system:
        if finding is None and not explain and not added.startswith("added-noise: not checked"):
            added = "none found (the chain diagnosis's check; --explain for its fit)"
        click.echo(f"Added noise after the preamp (the diagnosis's estimate): {added}")
    click.echo("Workflows: " + ", ".join(payload["workflows"]))
    n = len(payload["assumptions"])
    if explain:
        click.echo("Assumptions (and how to remove them):")
        for a in payload["assumptions"]:
            click.echo(f"  - {a}")
    elif n:
        click.echo(f"{plural(n, 'assumption')} stated with --explain (and how to remove them).")
    if plot_path:
        click.echo(f"Figure: {display_path(plot_path)}")


def _print_channels(payload: dict, receiver: str, system: str | None) -> None:
    """The per-channel table, thinned to about 30 rows."""
    points = payload["points"]
    step = max(1, -(-len(points) // 30))
    what = f" and '{system}' (preamp + receiver)" if system else ""
    rows = [[f"{p['freq_hz'] / 1e6:.2f}" + ("*" if p.get("occupied") else "")]
            + [_cell(p[k], fmt) for k, _, fmt in _COLUMNS] for p in points[::step]]
    print_fitted(f"Noise: '{receiver}' (receiver alone){what}" + (f", every {step}th channel" if step > 1 else "")
                 + "; * station channel: Ta there is from the local floor only",
                 [Column("MHz")] + [Column(head, short=short, drop_order=drop) for (_, head, _), short, drop
                                    in zip(_COLUMNS, _SHORT, _DROP)], rows)
