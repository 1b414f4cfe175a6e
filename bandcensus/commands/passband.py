"""``bandcensus passband``: measure a preamp's passband, check a target band, advise retuning."""

from __future__ import annotations

import click
from rich.table import Table

from analysis.errors import BadParameterError
from analysis.passband.data import load_gain_curve, load_readings_csv
from analysis.passband.fit import fit_trust
from analysis.passband.report import analyse_passband
from analysis.selection import Survey
from analysis.workflows import passband_for
from bandcensus.commands._common import echo_json, json_option, parse_mhz_range
from bandcensus.commands._csv import write_csv
from bandcensus.commands._tables import print_table
from bandcensus.commands._text import display_path, plural


def _target_from_band(band: str) -> tuple[float, float]:
    from survey.bandplan import parse_band
    from survey.errors import PlanError

    try:
        plan = parse_band(band)
    except PlanError as exc:
        raise BadParameterError(f"{exc}; or give the target band directly with --target START-STOP (MHz)") from exc
    return float(plan.start_hz), float(plan.stop_hz)


def _mhz(v: float | None, digits: int = 2) -> str:
    return "-" if v is None or v != v else f"{v / 1e6:.{digits}f}"


@click.command(name="passband")
@click.option("--db", "db_path", type=click.Path(dir_okay=False), default=None,
              help="Survey database holding sweeps with and without the preamp.")
@click.option("--base", default=None, help="Configuration label of the sweeps without the preamp.")
@click.option("--test", default=None, help="Configuration label of the sweeps with the preamp.")
@click.option("--points", "points_path", type=click.Path(dir_okay=False), default=None,
              help="CSV of hand readings with columns freq_mhz,level_db (relative levels).")
@click.option("--target", default=None, help="Band the preamp should cover, START-STOP in MHz (default: the band plan).")
@click.option("--band", default=None,
              help="Band plan giving the default target (default: the sweeps' band, or europe for readings).")
@click.option("--source", "source", type=click.Choice(["best", "noise-source", "stations", "noise-floor"]),
              default="best", show_default=True,
              help="Which database data give the gain (best: noise source, else stations, else floor rise).")
@click.option("--bin-khz", default=100.0, show_default=True, type=float,
              help="Bin width dense spectra are averaged into, kHz.")
@click.option("--circuits", type=click.IntRange(1, 3), default=None,
              help="Number of tuned circuits when known (otherwise chosen by BIC from 1 to 3).")
@click.option("--q-unloaded", type=click.FloatRange(min=1.0, min_open=True), default=None,
              help="Unloaded Q of the coils for the insertion loss (default: 150, assumed and flagged).")
@json_option
@click.option("--csv", "as_csv", is_flag=True, help="Print the measured gain points and the fitted curve as CSV.")
@click.option("--explain", is_flag=True, help="Also print the fitted circuits, the stagger plan and the data notes.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), default=None, help="Write a PNG figure.")
def command(db_path, base, test, points_path, target, band, source, bin_khz, circuits, q_unloaded, as_json,
            as_csv, explain, plot_path) -> None:
    """Measure the passband of a preamp and how well it covers a band.

    Gain against frequency comes from the database (noise-source sweeps, else stations received
    in both configurations, else the noise-floor rise, shape only) or from hand readings
    (--points). A model of 1 to 3 tuned circuits is fitted; the -3 dB and -6 dB widths, the
    stations outside the passband and a maximally flat stagger tuning that would cover the
    target are printed.
    """
    if as_json and as_csv:
        raise click.UsageError("choose one of --json and --csv")
    if (db_path is None) == (points_path is None):
        raise click.UsageError("give either --db PATH with --base and --test, or --points FILE.csv (not both)")
    if db_path is not None and (not base or not test):
        raise click.UsageError("--db needs --base LABEL (without the preamp) and --test LABEL (with it)")
    if points_path is not None and (base or test or source != "best"):
        raise click.UsageError("--base, --test and --source go with --db, not with --points")
    if bin_khz <= 0:
        raise click.BadParameter("must be positive", param_hint="--bin-khz")
    target_hz = parse_mhz_range(target, "--target") if target is not None else None
    if points_path is not None:
        curve = load_readings_csv(points_path)
    else:
        curve = load_gain_curve(db_path, base, test, bin_hz=bin_khz * 1e3,
                                prefer=None if source == "best" else source)
    if target_hz is None:
        target_hz = _target_from_band(band or curve.band or "europe")
    report = analyse_passband(curve, target_hz, circuits=circuits, q_unloaded=q_unloaded)
    trusted, why = fit_trust(report.fit, curve.freqs_hz, curve.gain_db, curve.sigma_db)
    if not trusted and db_path is not None and source == "best":
        with Survey(db_path) as survey:
            fallback, reason = passband_for(survey, base, test, target_hz, circuits=circuits,
                                            q_unloaded=q_unloaded)
        if fallback is not None:
            click.echo(f"note: the {curve.source} fit is not trusted ({why}); using {fallback.curve.source} data",
                       err=True)
            report, trusted = fallback, True
        else:
            why = reason
    if not trusted:
        if as_json:
            echo_json({"verdict": "not enough data to fit", "reason": why, "source": curve.source,
                       "n_points": curve.n_points})
            return
        click.echo(f"Not enough data to fit a passband: {why}.")
        click.echo(f"data: {curve.source}, {curve.n_points} points; record noise-hot/noise-cold sweeps of both "
                   "configurations, or more sweeps, for a curve that a tuned-circuit model can be trusted on")
        return
    if plot_path:
        from analysis.passband.plots import plot_passband

        plot_passband(report, plot_path)
    if as_json:
        echo_json(report.to_dict())
        return
    if as_csv:
        write_csv(curve_rows(report), CSV_FIELDS)
        return
    if explain:
        _print_report(report, plot_path)
    else:
        _print_short(report, plot_path)


#: CSV columns: one row per measured gain point, with the fitted model there (units in the names).
CSV_FIELDS = ["freq_hz", "gain_db", "sigma_db", "fitted_gain_db", "in_target"]


def curve_rows(report) -> list[dict]:
    """One row per measured point: measured gain, its standard uncertainty, the fitted gain there."""
    import numpy as np

    curve, fit, cov = report.curve, report.fit, report.coverage
    freqs = np.asarray(curve.freqs_hz, dtype=float)
    fitted = np.asarray(fit.response_db(freqs), dtype=float)
    sigma = np.asarray(curve.sigma_db, dtype=float)
    lo, hi = cov.target_hz
    return [{"freq_hz": float(f), "gain_db": float(g), "sigma_db": float(s),
             "fitted_gain_db": float(m), "in_target": bool(lo <= f <= hi)}
            for f, g, s, m in zip(freqs, curve.gain_db, sigma, fitted)]


def _print_short(report, plot_path) -> None:
    """The verdict, the measured edges, the stations left out, and the retune plan in one line."""
    fit, cov, plan, curve = report.fit, report.coverage, report.plan, report.curve
    click.echo(report.verdict())
    rel = " (relative)" if curve.relative else ""
    click.echo(f"peak {_mhz(fit.peak_hz, 2)} MHz, {fit.peak_gain_db:.1f} dB{rel}; -3 dB edges "
               f"{_mhz(fit.edges_3db_hz[0], 2)}-{_mhz(fit.edges_3db_hz[1], 2)} MHz; ripple over the target "
               f"{cov.ripple_db:.1f} dB; from {curve.source} ({plural(curve.n_points, 'point')})")
    outside = cov.uncovered_stations_hz
    if len(outside):
        click.echo(f"stations outside the -3 dB edges: {', '.join(_mhz(f, 1) for f in outside)} MHz")
    if len(outside) or not cov.target_covered:
        click.echo(f"retune: {plural(len(plan.stages), 'circuit')} at "
                   + ", ".join(f"{_mhz(st.f0_hz, 2)} MHz (Q {st.q:.1f})" for st in plan.stages)
                   + " for a maximally flat passband over the target (--explain for the stagger plan)")
    if plot_path:
        click.echo(f"Figure: {display_path(plot_path)}")


def _print_report(report, plot_path) -> None:
    fit, cov, plan, curve = report.fit, report.coverage, report.plan, report.curve
    click.echo(report.verdict())
    rel = " (relative)" if curve.relative else ""
    click.echo(f"data: {curve.source}, {curve.n_points} points{rel}; model chosen by {fit.criterion}")
    for note in list(curve.notes) + list(fit.notes):
        click.echo(f"note: {note}")
    t = Table(title="Measured passband (from the fitted curve)", title_justify="left")
    for col in ("quantity", "value"):
        t.add_column(col, justify="left" if col == "quantity" else "right")
    t.add_row("peak", f"{_mhz(fit.peak_hz, 3)} MHz, {fit.peak_gain_db:.1f} dB{rel}")
    t.add_row("-3 dB edges", f"{_mhz(fit.edges_3db_hz[0], 3)} - {_mhz(fit.edges_3db_hz[1], 3)} MHz")
    t.add_row("-3 dB width", f"{_mhz(fit.bw_3db_hz, 3)} MHz")
    t.add_row("-6 dB edges", f"{_mhz(fit.edges_6db_hz[0], 3)} - {_mhz(fit.edges_6db_hz[1], 3)} MHz")
    t.add_row("-6 dB width", f"{_mhz(fit.bw_6db_hz, 3)} MHz")
    t.add_row("residual rms", f"{fit.residual_rms_db:.2f} dB")
    t.add_row("target", f"{_mhz(cov.target_hz[0])} - {_mhz(cov.target_hz[1])} MHz")
    t.add_row("ripple over target", f"{cov.ripple_db:.1f} dB (worst {cov.worst_db:.1f} dB below peak)")
    t.add_row("stations outside -3 dB", ", ".join(_mhz(s) for s in cov.uncovered_stations_hz) or "-")
    print_table(t)
    c = Table(title=f"Fitted tuned circuits ({fit.n_circuits}, {fit.shape})", title_justify="left")
    for col in ("circuit", "f0 MHz", "loaded Q", "own -3 dB width MHz"):
        c.add_column(col, justify="right")
    for i, s in enumerate(fit.stages, 1):
        c.add_row(str(i), _mhz(s.f0_hz, 3), f"{s.q:.1f}", _mhz(s.bw_hz, 3))
    print_table(c)
    p = Table(title=f"Maximally flat stagger plan for {_mhz(plan.bandwidth_hz, 1)} MHz around "
                    f"{_mhz(plan.center_hz, 3)} MHz ({plan.center_kind} centre)", title_justify="left")
    for col in ("circuit", "f0 MHz", "loaded Q", "own -3 dB width MHz"):
        p.add_column(col, justify="right")
    for i, s in enumerate(plan.stages, 1):
        p.add_row(str(i), _mhz(s.f0_hz, 3), f"{s.q:.1f}", _mhz(s.bw_hz, 3))
    print_table(p)
    click.echo(
        f"plan checked with the exact circuit response: edges {plan.edge_atten_db[0]:.2f} / "
        f"{plan.edge_atten_db[1]:.2f} dB, ripple {plan.ripple_db:.2f} dB over the target"
    )
    qu = f"unloaded Q {plan.q_unloaded:g}" + (" (assumed: give --q-unloaded)" if plan.q_unloaded_assumed else "")
    click.echo("insertion loss of the planned circuits at resonance, -20 log10(1 - Ql/Qu) with " + qu + ": "
               + ", ".join(f"{v:.2f} dB" for v in plan.insertion_loss_db))
    if plan.peak_gain_change_db is not None:
        click.echo(f"peak gain change of the retuned passive circuits against the fitted ones: "
                   f"{plan.peak_gain_change_db:+.1f} dB ({qu})")
    if plot_path:
        click.echo(f"figure: {plot_path}")
