"""``bandcensus replay``: measure SigMF recordings into the survey database."""

from __future__ import annotations

import statistics

import click

from bandcensus import __version__
from bandcensus.commands._common import FiniteFloat, db_option, echo_json, json_option
from bandcensus.commands._progress import sweep_progress
from bandcensus.commands._stored import aggregate_warnings, configuration_lines, stored_line, stored_run
from bandcensus.commands._text import display_path, plural
from survey.bandplan import parse_band
from survey.records import INPUT_KINDS, RunInfo, SweepSettings
from survey.errors import RecordingError, SurveyError
from survey.replay_workers import MAX_DEFAULT_WORKERS, ReplayJob, ReplayMeasurer, default_workers
from survey.session import CaptureSession
from survey.sources.recording import open_recording
from survey.store import SurveyStore
from survey.sweep import plan_for_source
from survey.text import plain_text, terminal_label


def inside_guard(plan, source, settings) -> tuple[int, ...]:
    """Channels left out of a single-capture plan only because they overlap the DC guard."""
    centre = source.fixed_centers_hz[0]
    half_usable = settings.usable_fraction * source.sample_rate_hz / 2.0
    half_bw = settings.channel_bw_hz / 2.0
    return tuple(int(f) for f in plan.uncovered_hz
                 if abs(f - centre) + half_bw <= half_usable and abs(f - centre) - half_bw < settings.dc_guard_hz)


def _open_with_progress(path: str, quiet: bool):
    """Open a recording; show the pass over its data (checksum, sample check) when it is large."""
    if quiet:
        return open_recording(path)
    from rich.console import Console
    from rich.progress import BarColumn, DownloadColumn, Progress, TextColumn

    console = Console(stderr=True)
    with Progress(TextColumn("checking {task.description}"), BarColumn(), DownloadColumn(), console=console,
                  transient=True, disable=quiet or not console.is_terminal) as bar:
        task = bar.add_task(terminal_label(display_path(path)), total=None)
        return open_recording(path, progress=lambda done, total: bar.update(task, completed=done, total=total))


@click.command("replay")
@click.argument("recordings", nargs=-1, required=True, type=click.Path(dir_okay=False))
@db_option
@click.option("--config", "configuration", help="Configuration label (default: from our own recordings).")
@click.option("--input", "input_kind", type=click.Choice(INPUT_KINDS),
              help="What the receiver input saw (default: from our own recordings, else antenna).")
@click.option("--band", default="europe", show_default=True,
              help="Band plan: europe, americas, japan[:UPPER_MHZ], oirt or custom:START-STOP:RASTER_KHZ.")
@click.option("--channel-bw-khz", default=200.0, show_default=True, type=click.FloatRange(min=1.0),
              help="Channel integration bandwidth in kHz.")
@click.option("--usable-fraction", default=0.75, show_default=True, type=click.FloatRange(0.1, 1.0),
              help="Flat inner fraction of each capture's sample rate that is measured.")
@click.option("--dc-guard-khz", default=20.0, show_default=True, type=click.FloatRange(min=0.0),
              help="Half-width in kHz around each capture's centre excluded for the DC spike.")
@click.option("--fft-size", default=2048, show_default=True, type=click.IntRange(64, 1 << 18),
              help="FFT length of the averaged periodogram.")
@click.option("--skip-ms", type=FiniteFloat(0.0, 60_000.0),
              help="Leave out this much of the start of every capture, ms (default: detect a start-up "
                   "transient and leave it out; 0: keep everything).")
@click.option("--channels", "show_channels", is_flag=True,
              help="Also print each recording's per-channel table (every raster channel).")
@click.option("--jobs", "workers", type=click.IntRange(min=1), metavar="N",
              help=f"Measure up to N recordings at once, in N processes (default: the cores available, at most "
                   f"{MAX_DEFAULT_WORKERS}; 1: one at a time in this process). Sweeps are stored in the order given.")
@click.option("--quiet", is_flag=True, help="Print only errors and the closing line.")
@json_option
def command(recordings, db_path, configuration, input_kind, band, channel_bw_khz, usable_fraction,
            dc_guard_khz, fft_size, skip_ms, show_channels, workers, quiet, as_json):
    """Replay SigMF RECORDINGS (one sweep each) into the database at --db.

    Any SigMF recording of the band replays: ours (one capture per hop) or a foreign one
    (captures at arbitrary centres, datatype cu8, ci8, ci16_le or cf32_le). Every channel whose
    whole bandwidth a capture covers is measured; the rest are listed as not covered.
    """
    plan_band = parse_band(band)
    # Open (and so validate: metadata, checksum, finite samples, FFT fill) every recording
    # before anything is written.
    sources = [_open_with_progress(path, quiet or as_json) for path in recordings]
    jobs = []
    warnings_out = []
    notes_by_path: dict[str, list[str]] = {}
    for path, source in zip(recordings, sources):
        notes_by_path[str(source.path)] = source.skip_start(None if skip_ms is None else skip_ms / 1e3)
        warnings_out.extend(source.check_fft(fft_size))
        labels = source.metadata_labels()
        cfg = configuration or labels.get("configuration")
        if not cfg:
            raise click.UsageError(f"{path} carries no configuration label; give --config LABEL")
        inp = input_kind or labels.get("input") or "antenna"
        if inp not in INPUT_KINDS:
            raise RecordingError(f"{path} has input label {inp!r}, not one of ours; give --input "
                                 f"({', '.join(INPUT_KINDS)})")
        settings = SweepSettings(
            band=plan_band.name,
            channel_bw_hz=channel_bw_khz * 1e3,
            sample_rate_hz=source.sample_rate_hz,
            usable_fraction=usable_fraction,
            dc_guard_hz=dc_guard_khz * 1e3,
            dwell_s=float(statistics.median(source.capture_lengths())) / source.sample_rate_hz,
            settle_s=0.0,
            fft_size=fft_size,
            gain_db=labels.get("gain_db"),
            ppm=int(labels.get("ppm") or 0),
        )
        plan = plan_for_source(plan_band, source, settings)
        # One capture cannot be re-tuned away from its DC spike: the channels the plan leaves
        # out for the guard are measured from a DC-notched spectrum instead of dropped.
        notch = inside_guard(plan, source, settings) if source.n_captures == 1 and settings.dc_guard_hz > 0 else ()
        jobs.append((path, source, cfg, inp, settings, plan, notch))
    if not quiet:
        for text in aggregate_warnings(warnings_out, [str(s.path) for s in sources]):
            click.echo(f"Warning: {plain_text(text)}", err=True)

    info = RunInfo(
        source_kind="recording",
        # each distinct receiver once (48 recordings of one receiver name it once)
        device="; ".join(dict.fromkeys(str(s.describe().get("hw") or s.describe().get("path")) for s in sources)),
        tool_version=__version__,
        settings={"band": band, "channel_bw_hz": channel_bw_khz * 1e3, "usable_fraction": usable_fraction,
                  "dc_guard_hz": dc_guard_khz * 1e3, "fft_size": fft_size,
                  "recordings": [str(p) for p in recordings]},
        seed=next((s.metadata_labels().get("seed") for s in sources if s.metadata_labels().get("seed") is not None), None),
    )
    replay_jobs = [
        ReplayJob(source, plan, settings, cfg, inp, recording=str(path), dc_notch_hz=settings.dc_guard_hz,
                  notch_channels_hz=notch, notes="; ".join(notes_by_path.get(str(source.path), []) + [
                      w.split(": ", 1)[1] for w in warnings_out if w.startswith(f"{source.path}:")]))
        for path, source, cfg, inp, settings, plan, notch in jobs
    ]
    store = None
    summaries = []
    try:
        # The worker processes are forked first: before the database is opened and before the
        # progress line starts its thread.
        with ReplayMeasurer(replay_jobs, workers or default_workers()) as measurer:
            store = SurveyStore(db_path)
            with CaptureSession(store, info) as session, sweep_progress(len(jobs), quiet or as_json) as progress:
                run_id = session.run_id
                measured = measurer.results(should_stop=session.stop.is_set, on_hop=progress.on_hop)
                for path, source, cfg, inp, settings, plan, notch in jobs:
                    if session.stopped:
                        break
                    progress.start_sweep(terminal_label(cfg) if progress.enabled else cfg)  # drawn only when shown
                    try:
                        sweep = next(measured, None)
                        if sweep is None:  # stopped, and the sweep in flight never came back
                            break
                        outcome = session.store_measured(sweep)
                    except (SurveyError, OSError) as exc:
                        done = f"; the sweeps of the {len(summaries)} earlier recording(s) are stored" if summaries else ""
                        text = str(exc) if isinstance(exc, SurveyError) else (exc.strerror or str(exc))
                        if str(path) not in text:
                            text = f"{path}: {text}"
                        raise (type(exc) if isinstance(exc, SurveyError) else RecordingError)(f"{text}{done}") from exc
                    summaries.append((path, outcome, plan))
                    progress.on_sweep()
                    source.close()
    finally:
        if store is not None:
            store.close()
        for s in sources:
            s.close()
    summary = session.summary()

    payload = []
    for path, outcome, plan in summaries:
        rows = [
            {"freq_hz": c.freq_hz, "power_dbfs": c.power_dbfs, "noise_dbfs": c.noise_dbfs,
             "cn_db": c.cn_db, "received": c.received, "detected": c.received, "sweeps": 1}
            for c in sorted(outcome.result.channels, key=lambda c: c.freq_hz)
        ]
        clips = [h.clip_fraction for h in outcome.result.hops if h.clip_fraction is not None]
        payload.append({"recording": str(path), "sweep_id": outcome.sweep_id, "complete": outcome.result.complete,
                        "max_clip_fraction": max(clips) if clips else None,
                        "no_signal": bool(outcome.no_signal_hops), "notes": outcome.result.notes,
                        "configuration": outcome.result.configuration, "input": outcome.result.input,
                        "channels": rows, "uncovered_hz": sorted(set(plan.uncovered_hz) - {r["freq_hz"] for r in rows})})
    if as_json:
        echo_json({"run_id": run_id, "status": summary.status, "stop_signal": summary.stop_signal,
                   "sweeps": payload})
        return
    _print_outcome(payload, plan_band.name, summary, db_path, run_id, show_channels, quiet, notes_by_path)


def _print_outcome(payload: list[dict], band_name: str, summary, db_path: str, run_id: int,
                   show_channels: bool, quiet: bool, notes_by_path: dict[str, list[str]]) -> None:
    """Answer first (stations per configuration), then the closing line; details on request."""
    single = len(payload) == 1
    clipped = [(item["recording"], item["max_clip_fraction"]) for item in payload if item["max_clip_fraction"]]
    dead = [item for item in payload if item["no_signal"]]
    if not quiet:
        if len(clipped) == 1:
            click.echo(f"Warning: {plain_text(display_path(clipped[0][0]))}: clipping up to "
                       f"{100 * clipped[0][1]:.3f} % of samples (within one step of full scale): lower the gain",
                       err=True)
        elif clipped:
            click.echo(f"Warning: {plural(len(clipped), 'recording')} clip, up to {100 * max(c for _, c in clipped):.3f} "
                       "% of samples (within one step of full scale): lower the gain", err=True)
        noted = {path: notes for path, notes in notes_by_path.items() if notes}
        if len(noted) == 1:
            path, notes = next(iter(noted.items()))
            for note in notes:
                click.echo(f"note: {plain_text(display_path(path))}: {plain_text(note)}")
        elif noted:
            click.echo(f"note: {plural(len(noted), 'recording')}: start-up samples left out of "
                       f"{plural(sum(len(n) for n in noted.values()), 'capture')} (each sweep's notes say how much)")
        for item in dead:
            click.echo(f"{plain_text(display_path(item['recording']))}: sweep {item['sweep_id']}: "
                       f"{plain_text(item['notes'])}")
        for item in payload:
            if item["no_signal"] or not (single or show_channels):
                continue
            detected = sum(1 for r in item["channels"] if r["received"])
            click.echo(f"{plain_text(display_path(item['recording']))}: sweep {item['sweep_id']} "
                       f"({plain_text(item['configuration'])}, {item['input']}): "
                       f"{plural(len(item['channels']), 'channel')} measured, {detected} detected, "
                       f"{len(item['uncovered_hz'])} of band '{band_name}' not covered by the recording")
            if show_channels:
                from bandcensus.commands._tables import channel_rows_table, print_table  # rich: only for tables

                print_table(channel_rows_table(item["channels"],
                                               f"Recording {terminal_label(display_path(item['recording']))}"))
    run = stored_run(db_path, run_id)
    if not quiet:
        for line in configuration_lines(run):
            click.echo(line)
    if summary.status == "stopped" and not quiet:
        click.echo(summary.line())
    click.echo(stored_line(run, db_path, summary.sweeps_incomplete,
                           (summary.stop_signal or "a stop request") if summary.status == "stopped" else None))
