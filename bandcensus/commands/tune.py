"""``bandcensus tune``: live passband of a preamp while its trimmers are turned.

Thin: parses the options, opens the source and the database, finds the reference, and hands
each refresh of :func:`survey.tuning_session.run_tuning` to :class:`analysis.tuning.tracker.TuneTracker`
and to the chosen output (terminal view, JSON lines, local page). Ctrl-C or SIGTERM ends the
session cleanly (exit 0) and says where it was stored.
"""

from __future__ import annotations

import json
import sys
from dataclasses import replace
from pathlib import Path

import click
import numpy as np

from analysis.tuning.hints import FitWorker
from analysis.tuning.reference import load_reference, reference_from_channels
from analysis.tuning.tracker import TUNE_INPUTS, TuneTracker
from bandcensus import __version__
from bandcensus.commands._common import _clean, parse_mhz_range
from survey.errors import ScheduleError
from survey.records import RunInfo, SweepResult
from survey.schedule import parse_duration_s
from survey.store import SurveyStore, open_for_reading
from survey.sweep import run_sweep
from survey.tuning_session import (
    DEFAULT_DWELL_S,
    DEFAULT_FFT_SIZE,
    DEFAULT_MARGIN_HZ,
    DEFAULT_SETTLE_S,
    StopFlag,
    TuneSweep,
    run_tuning,
    tuning_plan,
    tuning_settings,
)

#: Stored input label for each tuning input.
STORED_INPUT = {"noise": "noise-hot", "antenna": "antenna"}
#: Sweeps of the scene without preamp measured as the reference of a simulated session.
SIM_REFERENCE_SWEEPS = 8


def _arrays(result: SweepResult):
    rows = sorted(result.channels, key=lambda c: c.freq_hz)
    return (np.array([c.freq_hz for c in rows], np.float64), np.array([c.power_dbfs for c in rows]),
            np.array([c.noise_dbfs for c in rows]), np.array([c.received for c in rows], bool))


def _simulated_sources(scene_path, configuration, input_label, seed, settings):
    from survey.scene import BARE, load_scene
    from survey.sources.simulated import SimulatedSource

    scene = load_scene(scene_path)
    if configuration is None:
        if len(scene.preamps) != 1:
            raise click.UsageError("the scene has " + str(len(scene.preamps)) + " preamps; choose one with --config ("
                                   + ", ".join(sorted(scene.preamps)) + ")")
        configuration = next(iter(scene.preamps))
    scene.preamp(configuration)  # SceneError naming the choices
    make = lambda label, s: SimulatedSource(scene, label, input_label, seed=s, sample_rate_hz=settings.sample_rate_hz,  # noqa: E731
                                            settle_s=settings.settle_s)
    return make(configuration, seed), (lambda: make(BARE, seed + 1)), configuration, scene


@click.command("tune")
@click.option("--target", "target", required=True, metavar="START-STOP",
              help="Band the preamp should cover, MHz, e.g. 88-100.")
@click.option("--reference", "reference", metavar="LABEL",
              help="Configuration label of stored sweeps of the receiver alone with the same input.")
@click.option("--reference-db", type=click.Path(dir_okay=False, exists=True),
              help="Database holding the reference sweeps (default: --db).")
@click.option("--input", "input_kind", type=click.Choice(TUNE_INPUTS), default="noise", show_default=True,
              help="noise: a noise source feeds the preamp; antenna: the stations on air.")
@click.option("--db", "db_path", default="bandcensus-tune.db", show_default=True, type=click.Path(dir_okay=False),
              help="Database the session is stored in (a run of its own).")
@click.option("--config", "configuration", help="Configuration label of the session's sweeps "
              "(default: the scene's preamp, or 'preamp').")
@click.option("--gain-db", type=float, help="Manual tuner gain, dB (one of the tuner's steps).")
@click.option("--simulate", "simulate", type=click.Path(dir_okay=False), metavar="SCENE.toml",
              help="Use a SIMULATED scene instead of the receiver (its trimmer schedule moves the curve).")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object per refresh instead of the view.")
@click.option("--for", "for_", metavar="DURATION", help="End the session by itself after this long (e.g. 12s, 5m).")
@click.option("--serve", is_flag=True, help="Also serve the view as a page on 127.0.0.1.")
@click.option("--port", default=8765, show_default=True, type=click.IntRange(0, 65535),
              help="Port of the page (0: any free port).")
@click.option("--margin-mhz", default=DEFAULT_MARGIN_HZ / 1e6, show_default=True, type=click.FloatRange(0, 10),
              help="Span measured beyond each end of the target, MHz.")
@click.option("--dwell-ms", default=DEFAULT_DWELL_S * 1e3, show_default=True, type=click.FloatRange(min=1.0),
              help="Samples measured per hop, milliseconds.")
@click.option("--store-every-s", default=1.0, show_default=True, type=click.FloatRange(min=0.0),
              help="Keep one sweep per this many seconds in the database (0: every sweep).")
@click.option("--sample-rate", default=2.4, show_default=True, type=float, help="Sample rate, MS/s.")
@click.option("--ppm", default=0, show_default=True, type=int, help="Frequency correction, whole ppm.")
@click.option("--device", help="Receiver serial number or index (see 'bandcensus devices').")
@click.option("--bias-tee", is_flag=True, help="Power the preamp over the coax (DC on the antenna input). "
              "CAUTION: DC can damage equipment that shorts it.")
@click.option("--seed", default=0, show_default=True, type=int, help="Random seed of a simulated session.")
@click.option("--unpaced", is_flag=True, hidden=True,
              help="Testing: run a simulated session as fast as it renders, not in step with the wall clock.")
def command(target, reference, reference_db, input_kind, db_path, configuration, gain_db, simulate, as_json, for_,
            serve, port, margin_mhz, dwell_ms, store_every_s, sample_rate, ppm, device, bias_tee, seed, unpaced):
    """Show a preamp's gain against frequency live while its trimmers are turned.

    Sweeps only the target band (plus a margin) again and again, about 2.5 times a second at
    2.4 MS/s over 12 MHz, and compares each sweep with a reference of the receiver alone taken
    with the same input (--reference LABEL, stored earlier, e.g. with 'scan --config bare --input
    noise-hot'). Shows the curve, the best one so far, the peak, the -3 dB edges, how much of the
    target lies within 3 dB, and a hint. The session is kept in --db as a run of its own (one
    sweep per second). Stop with Ctrl-C.

    Example: bandcensus tune --simulate recordings_demo/trimmer.toml --target 88-100
    """
    target_hz = parse_mhz_range(target, "--target")
    try:
        duration_s = parse_duration_s(for_, "--for") if for_ else None
    except ScheduleError as exc:
        raise click.BadParameter(str(exc), param_hint="--for")
    rate_hz = float(sample_rate) * 1e6 if float(sample_rate) < 1e5 else float(sample_rate)
    input_label = STORED_INPUT[input_kind]
    settings = tuning_settings(rate_hz, dwell_ms / 1e3, DEFAULT_FFT_SIZE, DEFAULT_SETTLE_S, gain_db, ppm)
    plan = tuning_plan(target_hz, settings, margin_mhz * 1e6)
    if reference is None and reference_db is None and simulate is None:
        raise click.UsageError("give --reference LABEL: stored sweeps of the receiver alone with the same input "
                               f"(e.g. bandcensus scan --db {db_path} --config bare --input {input_label} --sweeps 4)")
    if bias_tee:
        click.echo("Caution: bias tee on: DC on the coax can damage equipment that shorts it (a DC-grounded antenna, "
                   "a splitter, a noise source's or generator's output); use it only to power a preamp made for it",
                   err=True)
    make_reference_source = None
    if simulate:
        source, make_reference_source, configuration, scene = _simulated_sources(
            simulate, configuration, input_label, seed, settings)
        kind_word = "SIMULATED "
        if gain_db is None:  # the simulated receiver's own gain setting
            gain_db = scene.receiver.gain_db
            settings = replace(settings, gain_db=gain_db)
        if input_kind == "noise" and scene.noise_source.enr_db is None and not scene.noise_source.enr_table:
            raise click.UsageError("the scene has no noise source; use --input antenna")
    else:
        from survey.sources.rtl import RtlSource

        configuration = configuration or "preamp"
        kind_word = ""
        if gain_db is None:
            click.echo("Warning: no --gain-db: the tuner AGC changes the gain between the reference and the session; "
                       "the curve is not a gain", err=True)
        source = RtlSource(device, sample_rate_hz=rate_hz, gain_db=gain_db, ppm=ppm, settle_s=settings.settle_s,
                           bias_tee=bias_tee)
    try:
        ref = None
        if reference is not None or reference_db is not None:
            ref_path = reference_db or db_path
            if not Path(ref_path).is_file():
                raise click.UsageError(f"reference database {ref_path} does not exist; give --reference-db PATH")
            conn = open_for_reading(ref_path)
            try:
                ref = load_reference(conn, reference or "bare", input_label, target_hz, str(ref_path))
            finally:
                conn.close()
            other = [g for g in ref.receiver_gain_db if gain_db is None or abs(g - gain_db) > 0.05]
            if other:
                click.echo(f"Warning: the reference was measured at a receiver gain of "
                           f"{', '.join(f'{g:g}' for g in ref.receiver_gain_db)} dB, this session at "
                           f"{'the tuner AGC' if gain_db is None else f'{gain_db:g} dB'}: the curve's level is "
                           "offset (its shape and edges are not)", err=True)
        tracker_box: dict = {}
        stop = StopFlag()
        page = None
        view = None

        def before_first(run_id: int) -> None:
            nonlocal ref
            if ref is not None:
                return
            ref_source = make_reference_source()
            results = [run_sweep(ref_source, plan, settings, "bare", input_label) for _ in range(SIM_REFERENCE_SWEEPS)]
            ref_source.close()
            for r in results:
                store.write_sweep(run_id, r)
            arrays = [_arrays(r) for r in results]
            ref = reference_from_channels(arrays[0][0], np.stack([a[1] for a in arrays]), np.stack([a[2] for a in arrays]),
                                          np.stack([a[3] for a in arrays]), settings.channel_bw_hz, "bare", input_label,
                                          f"scene without preamp, {SIM_REFERENCE_SWEEPS} sweeps")

        def on_sweep(s: TuneSweep) -> None:
            tracker = tracker_box.get("t")
            if tracker is None:
                tracker = tracker_box["t"] = TuneTracker(target_hz, ref, input_kind, settings.channel_bw_hz,
                                                         FitWorker(target_hz, inline=False))
            frame = tracker.update(s.t_s, s.refresh, *_arrays(s.result), stored_sweep_id=s.stored_sweep_id)
            if as_json:
                click.echo(json.dumps(_clean(frame.json_line()), allow_nan=False))
                sys.stdout.flush()
            elif view is not None:
                view.show(frame)
            if page is not None:
                state = frame.page_state()
                state["simulated"] = bool(simulate)
                page.publish(_clean(state))

        store = SurveyStore(db_path)
        try:
            if serve:
                from bandcensus.commands._tune_page import TunePageServer

                try:
                    page = TunePageServer(port)
                except OSError as exc:
                    raise click.UsageError(f"cannot serve on 127.0.0.1:{port} ({exc.strerror}); choose another --port")
                click.echo(f"{kind_word}tuning view at {page.url}", err=True)
                sys.stderr.flush()
            info = RunInfo(source_kind=source.kind, device=json.dumps(source.describe()), tool_version=__version__,
                           settings={"mode": "tune", "target_hz": list(target_hz), "input": input_label,
                                     "configuration": configuration, "reference": reference or "bare",
                                     "reference_db": reference_db, "scene": simulate, "sample_rate_hz": rate_hz,
                                     "dwell_s": settings.dwell_s, "settle_s": settings.settle_s,
                                     "fft_size": settings.fft_size, "margin_hz": margin_mhz * 1e6,
                                     "store_every_s": store_every_s, "gain_db": gain_db, "bias_tee": bias_tee},
                           seed=int(seed) if simulate else None,
                           notes=("SIMULATED " if simulate else "") + "tuning session")
            if not as_json:
                from bandcensus.commands._tune_view import TerminalView

                view = TerminalView(simulated=bool(simulate))
            with stop.installed():
                if view is not None:
                    view.__enter__()
                try:
                    summary = run_tuning(store, source, plan, settings, configuration, input_label, info, on_sweep, stop,
                                         duration_s=duration_s, store_every_s=store_every_s, pace=not unpaced,
                                         before_first=before_first)
                finally:
                    if view is not None:
                        view.__exit__(None, None, None)
                    if "t" in tracker_box:
                        tracker_box["t"].fit_worker.join(10.0)
        finally:
            store.close()
            if page is not None:
                page.close()
    finally:
        source.close()
    how = f"stopped by {summary.stop_signal}" if summary.stop_signal else summary.status
    rate = summary.refreshes / summary.duration_s if summary.duration_s > 0 else float("nan")
    click.echo(f"{kind_word}tuning session {how} after {summary.duration_s:.1f} s: {summary.refreshes} refreshes "
               f"({rate:.2f}/s), {summary.sweeps_stored} sweeps stored as run {summary.run_id} in {db_path} "
               f"(configuration {configuration}, input {input_label}); list them with: bandcensus runs --db {db_path}",
               err=as_json)
