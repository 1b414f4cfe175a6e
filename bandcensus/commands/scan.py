"""``bandcensus scan``: survey the band with the USB receiver into the database.

The receiver runs in a watched child process (:mod:`survey.watchdog`); the schedule
(:mod:`survey.schedule`) repeats sweeps, alternates configurations and stops cleanly on
SIGINT/SIGTERM. Exit codes: 0 done or stopped by a signal, 1 failure (one line), 2 bad usage.
"""

from __future__ import annotations

import functools
import importlib
import json
import time
from datetime import datetime

import click

from bandcensus import __version__
from bandcensus.commands._common import FiniteFloat, db_option
from bandcensus.commands._progress import sweep_progress
from bandcensus.commands._stored import configuration_lines, stored_line, stored_run
from bandcensus.commands._text import plural
from survey.bandplan import parse_band
from survey.errors import ScheduleError
from survey.records import INPUT_KINDS, RunInfo, SweepSettings
from survey.schedule import ScheduleProgress, StopRequest, parse_duration_s, parse_until, run_schedule
from survey.store import SurveyStore
from survey.text import plain_text
from survey.watchdog import WatchdogSettings, WatchedSource


def _sample_rate_hz(value: float) -> float:
    """``2.4`` (MS/s) or ``2400000`` (Hz) to Hz."""
    return float(value) * 1e6 if float(value) < 1e5 else float(value)


def _device(text: str | None):
    if text is None:
        return None
    return text.strip()


def _switches(items: tuple[str, ...]) -> dict[str, str]:
    out = {}
    for item in items:
        label, sep, command = item.partition("=")
        if not sep or not label.strip() or not command.strip():
            raise click.BadParameter(f"expected LABEL=COMMAND, got {item!r}", param_hint="--switch")
        out[label.strip()] = command.strip()
    return out


def _factory(device, sample_rate_hz, gain_db, ppm, settle_s, simulate_scene, source_factory, label, input_kind, seed):
    if source_factory:
        module, _, name = source_factory.partition(":")
        try:
            return getattr(importlib.import_module(module), name), "test"
        except (ImportError, AttributeError) as exc:
            raise click.BadParameter(f"cannot import {source_factory!r}: {exc}", param_hint="--source-factory")
    if simulate_scene:
        from survey.sources.simulated import SimulatedSource

        from bandcensus.commands.simulate import load_scene_file

        scene = load_scene_file(simulate_scene)
        configuration = label if label in scene.configurations else "bare"
        return functools.partial(SimulatedSource, scene, configuration, input_kind, seed,
                                 sample_rate_hz=sample_rate_hz, settle_s=settle_s), "simulated"
    from survey.sources.rtl import RtlSource

    return functools.partial(RtlSource, device, sample_rate_hz=sample_rate_hz, gain_db=gain_db, ppm=ppm,
                             settle_s=settle_s), "rtl"


class _Reporter:
    """Schedule progress: the progress line on a terminal, else one log line per sweep on stderr.

    An unattended scan (a service, output to a file) keeps a short log of each sweep and of
    each receiver fault; on a terminal the progress line shows sweep, hop, elapsed and time
    left instead, and receiver faults are printed above it.
    """

    def __init__(self, progress) -> None:
        from rich.console import Console

        self.progress = progress
        self.console = Console(stderr=True, highlight=False, markup=False, soft_wrap=True)

    def __call__(self, p: ScheduleProgress) -> None:
        if self.progress.enabled:
            self.progress.on_schedule(p)
            return
        total = f" of {p.sweeps_total}" if p.sweeps_total else ""
        left = f", {p.time_left_s / 60:.1f} min left" if p.time_left_s is not None else ""
        if p.event == "sweep":
            strongest = ", ".join(f"{f / 1e6:.1f} MHz {pw:.1f} dBFS" for f, pw, _ in p.strongest) or "none detected"
            floor = "n/a" if p.noise_floor_dbfs_hz is None else f"{p.noise_floor_dbfs_hz:.1f} dBFS/Hz"
            nxt = f", next in {p.next_sweep_in_s:.0f} s" if p.next_sweep_in_s else ""
            self.console.print(f"sweep {p.sweep_number}{total} [{plain_text(p.configuration)}] took {p.last_sweep_s:.1f} s; "
                               f"floor {floor}; strongest {strongest}; elapsed {p.elapsed_s:.0f} s{left}{nxt}")
        elif p.event == "gap":
            self.console.print(f"receiver fault: sweep [{plain_text(p.configuration)}] dropped, receiver reopened "
                               f"({p.gaps} so far)")


@click.command("scan")
@db_option
@click.option("--config", "configuration", help="Configuration label (what is in the chain), e.g. bare or preamp-a.")
@click.option("--input", "input_kind", type=click.Choice(INPUT_KINDS), default="antenna", show_default=True,
              help="What the receiver input sees.")
@click.option("--band", default="europe", show_default=True,
              help="Band plan: europe, americas, japan[:UPPER_MHZ], oirt or custom:START-STOP:RASTER_KHZ.")
@click.option("--gain-db", type=FiniteFloat(-20.0, 100.0), help="Manual tuner gain in dB (one of the tuner's steps; "
              "'bandcensus devices' lists them). Default: tuner AGC, not recommended for measurements.")
@click.option("--ppm", default=0, show_default=True, type=click.IntRange(-1000, 1000), help="Frequency correction, whole ppm.")
@click.option("--sample-rate", "sample_rate", default=2.4, show_default=True, type=FiniteFloat(0.2, 3.2e6),
              help="Sample rate in MS/s (or in Hz when 100000 or more).")
@click.option("--dwell-ms", default=100.0, show_default=True, type=FiniteFloat(0.5, 10_000.0),
              help="Samples measured per hop, milliseconds.")
@click.option("--settle-ms", default=20.0, show_default=True, type=click.FloatRange(min=0.0),
              help="Samples discarded after each retune, milliseconds (at least 32768 samples are).")
@click.option("--keep-iq", type=click.Path(file_okay=False), help="Keep each sweep's IQ as SigMF in this folder.")
@click.option("--device", help="Receiver serial number or index (see 'bandcensus devices').")
@click.option("--sweeps", type=click.IntRange(min=1), help="Number of sweeps to store.")
@click.option("--for", "for_", metavar="DURATION", help="Keep sweeping for this long (e.g. 8h, 90m).")
@click.option("--until", metavar="HH:MM", help="Keep sweeping until this local time (next occurrence).")
@click.option("--every", metavar="DURATION", help="Start a sweep every DURATION (e.g. 5m); default back to back.")
@click.option("--alternate", metavar="A,B", help="Measure these configuration labels in turn.")
@click.option("--switch", "switch", multiple=True, metavar="LABEL=COMMAND",
              help="Run COMMAND (no shell; label in $BANDCENSUS_CONFIGURATION) before LABEL's sweeps; repeatable.")
@click.option("--bias-tee", "bias_tee", multiple=True, metavar="LABEL",
              help="Power the antenna input (DC on the coax) for LABEL's sweeps. CAUTION: DC can damage "
                   "equipment that shorts it; repeatable.")
@click.option("--stall-timeout-s", default=5.0, show_default=True, type=click.FloatRange(min=0.1),
              help="Restart the receiver when it delivers nothing for this long.")
@click.option("--max-reopen", default=5, show_default=True, type=click.IntRange(min=1),
              help="Give up after this many failed reopenings of the receiver.")
@click.option("--simulate-scene", type=click.Path(dir_okay=False), hidden=True,
              help="Testing: use a simulated scene instead of the receiver.")
@click.option("--source-factory", hidden=True, help="Testing: MODULE:CALLABLE building the source.")
@click.option("--quiet", is_flag=True, help="Print only errors and the closing line (no progress, no log lines).")
def command(db_path, configuration, input_kind, band, gain_db, ppm, sample_rate, dwell_ms, settle_ms, keep_iq,
            device, sweeps, for_, until, every, alternate, switch, bias_tee, stall_timeout_s, max_reopen,
            simulate_scene, source_factory, quiet):
    """Survey the band with the USB receiver into the database at --db.

    Each sweep tunes hop by hop across the band and stores every channel's power, local noise
    floor and carrier-to-noise ratio (C/N; some call it SNR, but it is not the audio signal-to-noise
    ratio) in one transaction. On a terminal a progress line shows sweep, hop, elapsed and time left. Stop with Ctrl-C or SIGTERM: the sweep
    in progress is kept marked incomplete and a summary is printed.

    Example: bandcensus scan --db roof.db --alternate bare,preamp --switch preamp="relay on"
    --switch bare="relay off" --for 8h --every 5m --gain-db 29.7
    """
    if alternate:
        labels = [a.strip() for a in alternate.split(",") if a.strip()]
        if len(labels) < 2:
            raise click.BadParameter("give at least two labels, e.g. bare,preamp", param_hint="--alternate")
        if configuration and configuration not in labels:
            raise click.BadParameter(f"--config {configuration!r} is not among the alternate labels",
                                     param_hint="--config")
        if configuration:
            k = labels.index(configuration)
            labels = labels[k:] + labels[:k]
    elif configuration:
        labels = [configuration]
    else:
        raise click.UsageError("give --config LABEL (or --alternate A,B)")
    if sum(x is not None for x in (sweeps, for_, until)) > 1:
        raise click.UsageError("give only one of --sweeps, --for and --until")
    try:
        duration_s = parse_duration_s(for_, "--for") if for_ else None
        if until:
            duration_s = (parse_until(until) - datetime.now().astimezone()).total_seconds()
        every_s = parse_duration_s(every, "--every") if every else 0.0
    except ScheduleError as exc:
        raise click.BadParameter(str(exc))
    switches = _switches(switch)
    plan = parse_band(band)
    rate_hz = _sample_rate_hz(sample_rate)
    settings = SweepSettings(band=band, sample_rate_hz=rate_hz, dwell_s=dwell_ms / 1e3, settle_s=settle_ms / 1e3,
                             gain_db=gain_db, ppm=ppm)
    factory, kind = _factory(_device(device), rate_hz, gain_db, ppm, settle_ms / 1e3, simulate_scene,
                             source_factory, labels[0], input_kind, 0)
    if kind == "rtl":
        from survey.sources.rtl import rate_warning

        text = rate_warning(rate_hz)
        if text:
            click.echo(f"Warning: {text}", err=True)
        if gain_db is None:
            click.echo("Warning: no --gain-db: the tuner AGC changes the gain from hop to hop; "
                       "sweeps are not comparable", err=True)
    if bias_tee:
        click.echo("Caution: bias tee on for " + ", ".join(bias_tee) + ": DC on the coax can damage "
                   "equipment that shorts it", err=True)
    stop = StopRequest()
    started = time.monotonic()
    with stop.installed():
        source = WatchedSource(factory, WatchdogSettings(stall_timeout_s=stall_timeout_s, max_reopen=max_reopen),
                               stop_event=stop)
        try:
            store = SurveyStore(db_path)
            try:
                info = RunInfo(source_kind=source.kind, device=json.dumps(source.describe()),
                               tool_version=__version__,
                               settings={"band": band, "configurations": labels, "input": input_kind,
                                         "gain_db": gain_db, "ppm": ppm, "sample_rate_hz": rate_hz,
                                         "dwell_s": dwell_ms / 1e3, "settle_s": settle_ms / 1e3,
                                         "sweeps": sweeps, "duration_s": duration_s, "every_s": every_s,
                                         "switch": switches, "bias_tee": list(bias_tee)})
                with sweep_progress(sweeps, quiet) as progress:
                    summary = run_schedule(
                        store, source, plan, settings, configurations=labels, input=input_kind, run_info=info,
                        sweeps=sweeps, duration_s=duration_s, every_s=every_s, switch_commands=switches,
                        bias_tee_labels=list(bias_tee), stop=stop, progress=None if quiet else _Reporter(progress),
                        keep_iq_dir=keep_iq,
                    )
            finally:
                store.close()
        finally:
            source.close()
    run = stored_run(db_path, summary.run_id)
    if not quiet:
        for line in configuration_lines(run):
            click.echo(line)
        per_label = ", ".join(f"{k} {v}" for k, v in summary.by_configuration.items())
        how = f"stopped by {summary.stop_signal}" if summary.stop_signal else summary.status
        click.echo(
            f"Run {summary.run_id} {how}: {plural(summary.sweeps_stored, 'sweep')} stored ({per_label or 'none'}), "
            f"{summary.sweeps_incomplete} incomplete, {plural(summary.gaps, 'gap')}, "
            f"{plural(summary.clock_jumps, 'clock jump')}, elapsed {time.monotonic() - started:.1f} s"
        )
    click.echo(stored_line(run, db_path, summary.sweeps_incomplete,
                           (summary.stop_signal or "a stop request") if summary.status == "stopped" else None))
