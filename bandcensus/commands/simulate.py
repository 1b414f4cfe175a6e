"""``bandcensus simulate``: sweep a simulated scene into the survey database."""

from __future__ import annotations

import re
from pathlib import Path

import click

from bandcensus import __version__
from bandcensus.commands._common import FiniteFloat, db_option, echo_json, json_option, seed_type
from bandcensus.commands._progress import sweep_progress
from bandcensus.commands._stored import configuration_lines, stored_line, stored_run
from bandcensus.commands._text import display_path, plural
from survey.bandplan import parse_band
from survey.records import RunInfo, SweepSettings
from survey.errors import SceneError
from survey.scene import SIM_INPUTS, Scene, load_scene
from survey.session import CaptureSession
from survey.sources.simulated import SimulatedSource
from survey.store import SurveyStore
from survey.sweep import plan_for_source
from survey.text import plain_text, terminal_label

_UNITS_S = {"": 1.0, "s": 1.0, "m": 60.0, "min": 60.0, "h": 3600.0}


#: Longest interval accepted (one year): longer ones are typing mistakes and overflow clocks.
MAX_INTERVAL_S = 366 * 86400.0


def parse_interval_s(text: str) -> float:
    """``"60s"``, ``"5m"``, ``"1h"`` or ``"90"`` (seconds) to seconds; click.BadParameter otherwise."""
    m = re.fullmatch(r"\s*([0-9]*\.?[0-9]+)\s*(s|m|min|h)?\s*", str(text)[:100])
    if not m:
        shown = str(text) if len(str(text)) <= 40 else str(text)[:37] + "..."
        raise click.BadParameter(f"expected a duration such as 60s, 5m or 1h, got {shown!r}", param_hint="--every")
    seconds = float(m.group(1)) * _UNITS_S[m.group(2) or ""]
    if not seconds <= MAX_INTERVAL_S:
        raise click.BadParameter(f"{m.group(0).strip()[:40]} is longer than a year; give at most 366 days",
                                 param_hint="--every")
    return seconds


def load_scene_file(path: str) -> "Scene":
    """Load a scene file, refusing one that is not text (binary data) with a one-line SceneError."""
    if not Path(path).is_file():
        return load_scene(path)  # its own message for a missing file or a folder
    try:
        with open(path, "rb") as fh:
            head = fh.read(1 << 20)
    except OSError as exc:
        raise SceneError(f"{path}: cannot read the scene file ({exc.strerror}); check the path") from None
    try:
        head.decode("utf-8")
    except UnicodeDecodeError as exc:
        if exc.start < len(head) - 4:  # not just a character cut at the 1 MiB boundary
            raise SceneError(f"{path} is not a text scene file (binary data at byte {exc.start}); "
                             "give a scene .toml file such as recordings_demo/quorrelby_hill.toml") from None
    if b"\0" in head:
        raise SceneError(f"{path} is not a text scene file (NUL bytes); give a scene .toml file") from None
    return load_scene(path)


@click.command("simulate")
@click.argument("scene_path", metavar="SCENE.toml", type=click.Path(dir_okay=False))
@db_option
@click.option("--config", "configuration", help="Configuration label: bare or a preamp named in the scene.")
@click.option("--input", "input_kind", type=click.Choice(SIM_INPUTS), default="antenna", show_default=True,
              help="What the simulated receiver input sees.")
@click.option("--sweeps", default=1, show_default=True, type=click.IntRange(min=1), help="Number of sweeps.")
@click.option("--every", "every", default="60s", show_default=True,
              help="Simulated time from one sweep start to the next (e.g. 60s, 5m, 1h).")
@click.option("--alternate", help="Alternate configurations sweep by sweep, e.g. bare,preamp-peaked.")
@click.option("--seed", default=0, show_default=True, type=seed_type, help="Random seed (recorded with the run).")
@click.option("--band", default="europe", show_default=True,
              help="Band plan: europe, americas, japan[:UPPER_MHZ], oirt or custom:START-STOP:RASTER_KHZ.")
@click.option("--dwell-ms", default=100.0, show_default=True, type=FiniteFloat(0.5, 10_000.0),
              help="Samples measured per hop, in milliseconds.")
@click.option("--keep-iq", "keep_iq", type=click.Path(file_okay=False),
              help="Keep each sweep's IQ as a SigMF recording in this folder.")
@click.option("--quiet", is_flag=True, help="Print only errors and the closing line.")
@json_option
def command(scene_path, db_path, configuration, input_kind, sweeps, every, alternate, seed, band, dwell_ms,
            keep_iq, quiet, as_json):
    """Sweep the SIMULATED scene in SCENE.toml into the database at --db.

    The scene (stations, outside noise, preamps, receiver) is rendered as 8-bit IQ on a simulated
    clock and measured by the same sweep engine as a live receiver. Give --config for one
    configuration, or --alternate A,B to switch between them sweep by sweep (A/B pairs).

    Prints the stations detected per configuration (C/N, the carrier-to-noise ratio that some
    call SNR, at or above the detection margin) and a closing line saying what was stored; a
    progress line on standard error while it works (on a terminal, without --quiet).
    """
    interval_s = parse_interval_s(every)
    scene = load_scene_file(scene_path)
    if alternate:
        labels = [a.strip() for a in alternate.split(",") if a.strip()]
        if len(labels) < 2:
            raise click.BadParameter("give at least two labels separated by commas, e.g. bare,preamp-a",
                                     param_hint="--alternate")
    elif configuration:
        labels = [configuration]
    else:
        raise click.UsageError("give --config LABEL (or --alternate A,B); the scene offers "
                               + ", ".join(scene.configurations))
    for label in labels:
        scene.preamp(label)  # SceneError naming the choices for an unknown label
    plan_band = parse_band(band)
    source = SimulatedSource(scene, labels[0], input_kind, seed=seed)
    settings = SweepSettings(
        band=plan_band.name, dwell_s=dwell_ms / 1e3, settle_s=0.0,
        gain_db=scene.receiver.gain_db, ppm=int(round(scene.receiver.ppm)),
    )
    plan = plan_for_source(plan_band, source, settings)
    device = source.describe()
    fields = {"device": f"SIMULATED receiver, scene '{scene.name}'", "seed": int(seed),
              "description": f"SIMULATED sweep of scene '{scene.name}' (invented stations), seed {seed}"}
    store = SurveyStore(db_path)
    done = []
    info = RunInfo(
        source_kind="simulated", device=device, tool_version=__version__,
        settings={"scene": str(scene_path), "band": band, "dwell_s": settings.dwell_s, "every_s": interval_s,
                  "configurations": labels, "input": input_kind, "sweeps": sweeps,
                  "sample_rate_hz": source.sample_rate_hz},
        seed=int(seed), notes="SIMULATED",
    )
    try:
        with CaptureSession(store, info, keep_iq_dirs=[keep_iq]) as session:
            run_id = session.run_id
            with sweep_progress(sweeps, quiet or as_json) as progress:
                for k in range(sweeps):
                    if session.stopped:
                        break
                    label = labels[k % len(labels)]
                    source.set_chain(label, input_kind)
                    progress.start_sweep(f"{terminal_label(label)}, {input_kind}")
                    start_s = source.time_s
                    outcome = session.record(source, plan, settings, label, input_kind,
                                             keep_iq_dir=keep_iq, recording_fields=fields, on_hop=progress.on_hop)
                    done.append(outcome)
                    progress.on_sweep()
                    if k + 1 < sweeps:
                        source.advance(max(0.0, interval_s - (source.time_s - start_s)))
    finally:
        store.close()
        source.close()
    summary = session.summary()
    rows = [
        {"sweep_id": o.sweep_id, "configuration": o.result.configuration, "input": o.result.input,
         "started_utc": o.result.started_utc, "channels": len(o.result.channels),
         "received": sum(1 for c in o.result.channels if c.received),
         "detected": sum(1 for c in o.result.channels if c.received),
         "max_clip_fraction": max((h.clip_fraction or 0.0) for h in o.result.hops) if o.result.hops else None,
         "complete": bool(o.result.complete),
         "recording": None if o.recording_path is None else str(o.recording_path)}
        for o in done
    ]
    if as_json:
        echo_json({"run_id": run_id, "scene": scene.name, "seed": int(seed), "simulated": True,
                   "status": summary.status, "stop_signal": summary.stop_signal, "sweeps": rows})
        return
    run = stored_run(db_path, run_id)
    if not quiet:
        click.echo(f"SIMULATED scene '{plain_text(scene.name)}' (invented stations), seed {seed}: run {run_id}, "
                   f"{plural(len(rows), 'sweep')} of {plural(len(plan.hops), 'hop')}")
        clipped = [r["max_clip_fraction"] for r in rows if r["max_clip_fraction"]]
        if clipped:
            click.echo(f"Warning: {plural(len(clipped), 'sweep')} clip, up to {100 * max(clipped):.3f} % of samples "
                       "(within one step of full scale)", err=True)
        kept = [r["recording"] for r in rows if r["recording"]]
        if kept:
            click.echo(f"kept the IQ of {plural(len(kept), 'sweep')} in {plain_text(display_path(keep_iq))}")
        for line in configuration_lines(run):
            click.echo(line)
    if summary.status == "stopped" and not quiet:
        click.echo(summary.line())
    click.echo(stored_line(run, db_path, summary.sweeps_incomplete,
                           (summary.stop_signal or "a stop request") if summary.status == "stopped" else None))


__all__ = ["command", "parse_interval_s"]
