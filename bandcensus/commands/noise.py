"""``bandcensus noise``: noise figures, preamp gain and outside noise from the noise runs."""

from __future__ import annotations

import click
from rich.table import Table

from analysis.noise.workflow import analyse_noise
from bandcensus.commands._common import db_option, echo_json, json_option
from bandcensus.commands._noise_source import noise_options_from, noise_source_options
from bandcensus.commands._tables import print_table

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
    ("noise_after_gain_k", "noise entering after the preamp gain (fit vs 1/G)", lambda v: f"{v:.0f} K"),
    ("preamp_nf_at_input_db", "preamp NF without it", lambda v: f"{v:.2f} dB"),
    ("antenna_temp_k", "antenna noise temperature", lambda v: f"{v:.0f} K"),
    ("outside_fa_db", "outside noise Fa", lambda v: f"{v:.1f} dB"),
    ("closest_environment", "closest P.372 environment", str),
    ("max_possible_improvement_db", "largest improvement any preamp could give", lambda v: f"{v:.2f} dB"),
    ("predicted_benefit_db", "this preamp's C/N gain on the measuring receiver", lambda v: f"{v:+.2f} dB"),
    ("projected_benefit_db", "this preamp's C/N gain on the other receiver", lambda v: f"{v:+.2f} dB"),
)


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
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), help="Write a PNG figure here.")
def command(db_path, receiver, system, enr_db, enr_table, cold_k, receiver_nf_db, enr_uncertainty_db,
            for_receiver_nf_db, as_json, plot_path):
    """Noise figure of receiver, system and preamp; preamp gain; outside noise beside ITU-R P.372.

    Uses whichever sweeps exist for the two configurations: noise-hot + noise-cold (Y-factor
    with second-stage correction and hot-minus-cold gain), terminated (ratio with a known gain
    and receiver NF) and antenna + terminated (outside noise temperature Ta and Fa). States
    every assumption and which runs would remove it.
    """
    options = noise_options_from(enr_db, enr_table, cold_k, receiver_nf_db)
    result = analyse_noise(
        db_path, receiver, system, enr_uncertainty_db=enr_uncertainty_db, for_receiver_nf_db=for_receiver_nf_db,
        **options.workflow_kwargs(),
    )
    if plot_path:
        from analysis.noise.plots import plot_noise

        plot_noise(result, plot_path)
    payload = result.to_dict()
    if as_json:
        echo_json(payload)
        return
    points = payload["points"]
    step = max(1, -(-len(points) // 30))
    what = f" and '{system}' (preamp + receiver)" if system else ""
    grid = Table(title=f"Noise: '{receiver}' (receiver alone){what}"
                 + (f", every {step}th channel" if step > 1 else ""), title_justify="left")
    grid.add_column("MHz", justify="right")
    for _, head, _ in _COLUMNS:
        grid.add_column(head, justify="right")
    for p in points[::step]:
        flag = "*" if p.get("occupied") else ""
        grid.add_row(f"{p['freq_hz'] / 1e6:.2f}{flag}", *[_cell(p[k], fmt) for k, _, fmt in _COLUMNS])
    print_table(grid)
    s = payload["summary"]
    summary = Table(title=f"Summary ({s['summary_region']})", title_justify="left", show_header=False)
    summary.add_column("quantity")
    summary.add_column("value", justify="right")
    for key, label, fmt in _SUMMARY:
        if s.get(key) is not None:
            if key == "projected_benefit_db":
                label += f" (NF {s['for_receiver_nf_db']:g} dB)"
            summary.add_row(label, fmt(s[key]))
    print_table(summary)
    click.echo("* station channel: Ta there is from the local floor only.")
    click.echo("Workflows: " + ", ".join(payload["workflows"]))
    click.echo("Assumptions (and how to remove them):")
    for a in payload["assumptions"]:
        click.echo(f"  - {a}")
    if plot_path:
        click.echo(f"Figure written to {plot_path}")
