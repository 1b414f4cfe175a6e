"""Repeated sweeps: counts and durations, alternating configurations, switch commands, clean stop.

Rules (from the reliability notes on long runs):

* Scheduling uses the **monotonic** clock; timestamps are UTC wall time. When the two disagree
  by more than ``jump_threshold_s`` (default 2 s) since the last check, a ``clock-jump`` event
  is recorded and the schedule carries on by the monotonic clock.
* A stop request (SIGINT/SIGTERM through :class:`StopRequest`) only sets an event; the loop
  checks it between hops (``should_stop`` of :func:`survey.sweep.run_sweep`). The sweep in
  progress is stored with ``complete = 0`` (never as complete) and the run ends ``stopped``
  within about a hop's time, well inside the 2 s a service manager should be given.
* A receiver fault (:class:`survey.watchdog.SweepInterrupted`) drops the sweep in progress;
  the watchdog has recorded the gap; the same configuration is measured again next.
* A :class:`~survey.errors.StoreError` (disk full, database locked) ends the run at once:
  everything committed before stays.
* Alternating labels are measured in turn (A B A B ...), each sweep stored with its label.
  Before the first sweep of a label after another label, that label's switch command is run
  (argv from :func:`shlex.split`, never a shell; ``BANDCENSUS_CONFIGURATION`` holds the label);
  it must exit 0 within ``switch_timeout_s``, else :class:`~survey.errors.ScheduleError`. The bias
  tee is switched on for the labels chosen and off for the others.

The library never prints: progress goes to a callback (:class:`ScheduleProgress`).
"""

from __future__ import annotations

import math
import os
import re
import shlex
import signal
import subprocess
import threading
import time
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from survey.errors import ScheduleError
from survey.records import BandPlan, RunInfo, SweepSettings
from survey.session import CaptureSession, StopRequest  # noqa: F401 (StopRequest re-exported)
from survey.sources.base import IQSource
from survey.store import SurveyStore
from survey.sweep import HopProgress, plan_for_source
from survey.watchdog import SweepInterrupted

_DURATION = re.compile(r"(\d+(?:\.\d+)?)\s*([hms])", re.IGNORECASE)
_SCALE = {"h": 3600.0, "m": 60.0, "s": 1.0}


#: Longest duration or interval accepted (one year): longer ones are typing mistakes.
MAX_DURATION_S = 366 * 86400.0


def parse_duration_s(text: str, option: str = "--for") -> float:
    """Parse ``8h``, ``5m``, ``90s``, ``1h30m`` or ``2.5h`` into seconds (> 0)."""
    s = str(text).strip().replace(" ", "")
    if not s or _DURATION.sub("", s):
        shown = str(text) if len(str(text)) <= 40 else str(text)[:37] + "..."
        raise ScheduleError(f"{option} {shown!r} is not a duration; write e.g. 8h, 5m, 90s or 1h30m")
    total = sum(float(v) * _SCALE[u.lower()] for v, u in _DURATION.findall(s))
    if not total <= MAX_DURATION_S:
        shown = s if len(s) <= 40 else s[:37] + "..."
        raise ScheduleError(f"{option} {shown!r} is longer than a year; give at most 366 days (e.g. 720h for 30 days)")
    if total <= 0:
        raise ScheduleError(f"{option} {text!r} is zero; give a positive duration")
    return total


def parse_until(text: str, now: datetime | None = None) -> datetime:
    """Next occurrence of ``HH:MM`` (local time) strictly after ``now``; returns an aware datetime."""
    m = re.fullmatch(r"\s*(\d{1,2}):(\d{2})\s*", str(text))
    if not m or int(m.group(1)) > 23 or int(m.group(2)) > 59:
        raise ScheduleError(f"--until {text!r} is not a time of day; write HH:MM in local time, e.g. 06:30")
    now = now or datetime.now().astimezone()
    if now.tzinfo is None:
        now = now.astimezone()
    target = now.replace(hour=int(m.group(1)), minute=int(m.group(2)), second=0, microsecond=0)
    if target <= now:
        target = target + timedelta(days=1)
    return target


class SystemClock:
    """The real clocks: ``monotonic()`` for scheduling, ``wall()`` (POSIX seconds) for stamps."""

    def monotonic(self) -> float:
        return time.monotonic()

    def wall(self) -> float:
        return time.time()


def run_switch_command(command: str, label: str, timeout_s: float = 30.0,
                       stop: threading.Event | None = None, poll_s: float = 0.05) -> bool:
    """Run a configuration's switch command (no shell); raise ScheduleError unless it exits 0 in time.

    With ``stop``: when a stop is requested while the command runs, the command is terminated
    (SIGTERM, then SIGKILL after 1 s) and False is returned; a command that dies of the same
    Ctrl-C as this process (SIGINT reaches the whole foreground process group) is a stop too,
    not a failure. Returns True when the command ran to a clean end.
    """
    try:
        argv = shlex.split(command)
    except ValueError as exc:
        raise ScheduleError(f"switch command for '{label}' cannot be parsed ({exc}); check its quotes") from exc
    if not argv:
        raise ScheduleError(f"switch command for '{label}' is empty; give a program to run")
    env = dict(os.environ, BANDCENSUS_CONFIGURATION=label)
    try:
        proc = subprocess.Popen(argv, env=env, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)
    except FileNotFoundError:
        raise ScheduleError(f"switch command for '{label}': program {argv[0]!r} not found; give its full path") from None
    except PermissionError:
        raise ScheduleError(f"switch command for '{label}': {argv[0]!r} is not executable; chmod +x it") from None
    deadline = time.monotonic() + float(timeout_s)
    stopped = False
    try:
        while True:
            try:
                out, err = proc.communicate(timeout=poll_s)
                break
            except subprocess.TimeoutExpired:
                pass
            if stop is not None and stop.is_set():
                stopped = True
                proc.terminate()
                try:
                    out, err = proc.communicate(timeout=1.0)
                except subprocess.TimeoutExpired:
                    proc.kill()
                    out, err = proc.communicate()
                break
            if time.monotonic() >= deadline:
                proc.kill()
                proc.communicate()
                raise ScheduleError(f"switch command for '{label}' did not finish within {timeout_s:g} s; "
                                    "make it faster or raise the timeout")
    finally:
        if proc.poll() is None:  # an exception (e.g. KeyboardInterrupt) left it running
            proc.kill()
            proc.wait()
    if stopped:
        return False
    if proc.returncode < 0 and stop is not None and -proc.returncode in (signal.SIGINT, signal.SIGTERM):
        stop.wait(0.5)  # the same signal is on its way to this process's handler
        if stop.is_set():
            return False
    if proc.returncode != 0:
        tail = (err or out or "").strip().splitlines()
        why = f": {tail[-1]}" if tail else ""
        raise ScheduleError(f"switch command for '{label}' exited with status {proc.returncode}{why}; "
                            "run it by hand to check it")
    return True


@dataclass(frozen=True)
class ScheduleProgress:
    """What the progress callback is told: after each hop (``event='hop'``), after each sweep
    (``'sweep'``), while waiting for the next one (``'wait'``), and on a dropped sweep (``'gap'``)."""

    event: str
    sweep_number: int
    sweeps_total: int | None
    time_left_s: float | None
    elapsed_s: float
    configuration: str | None = None
    hop_index: int | None = None
    n_hops: int | None = None
    next_sweep_in_s: float | None = None
    last_sweep_s: float | None = None
    noise_floor_dbfs_hz: float | None = None
    strongest: tuple[tuple[int, float, float | None], ...] = ()
    gaps: int = 0


@dataclass(frozen=True)
class ScheduleSummary:
    """How a run of sweeps ended."""

    run_id: int
    status: str
    sweeps_stored: int
    sweeps_incomplete: int
    sweeps_dropped: int
    gaps: int
    clock_jumps: int
    elapsed_s: float
    by_configuration: dict = field(default_factory=dict)
    stop_signal: str | None = None


def _strongest(result, n: int = 3) -> tuple:
    rows = sorted((c for c in result.channels if c.received), key=lambda c: c.power_dbfs, reverse=True)[:n]
    return tuple((int(c.freq_hz), float(c.power_dbfs), None if c.cn_db is None else float(c.cn_db)) for c in rows)


def run_schedule(
    store: SurveyStore,
    source: IQSource,
    band: BandPlan,
    settings: SweepSettings,
    *,
    configurations: Sequence[str],
    input: str = "antenna",
    run_info: RunInfo,
    sweeps: int | None = None,
    duration_s: float | None = None,
    every_s: float = 0.0,
    switch_commands: dict[str, str] | None = None,
    switch_timeout_s: float = 30.0,
    bias_tee_labels: Sequence[str] = (),
    stop: threading.Event | None = None,
    clock=None,
    progress: Callable[[ScheduleProgress], None] | None = None,
    keep_iq_dir: str | Path | None = None,
    jump_threshold_s: float = 2.0,
) -> ScheduleSummary:
    """Run sweeps until ``sweeps`` are stored, ``duration_s`` has passed, or a stop request.

    Parameters
    ----------
    configurations : sequence of str
        One label, or several measured in turn (A B A B ...).
    sweeps : int, optional
        Number of sweeps to store (all labels together). With neither ``sweeps`` nor
        ``duration_s``: one sweep, or, when ``every_s`` is given, until stopped.
    duration_s : float, optional
        No sweep starts after this many seconds (monotonic clock); ``--until`` is converted to it.
    every_s : float
        Sweep start interval, s (0: back to back). A sweep longer than the interval is
        followed at once by the next one.
    switch_commands : dict, optional
        Label -> command line run before that label's sweeps.
    bias_tee_labels : sequence of str
        Labels measured with the bias tee on (``source.set_bias_tee``); off for the others.
        **Caution:** DC on the coax can damage equipment that shorts it.
    stop : threading.Event, optional
        Set to stop (e.g. a :class:`StopRequest` with its signal handlers installed).
    clock : object, optional
        ``monotonic()`` and ``wall()`` (seconds); default the system clocks. Tests inject jumps.

    Returns
    -------
    ScheduleSummary
    """
    labels = [str(c) for c in configurations]
    if not labels or any(not c.strip() for c in labels):
        raise ScheduleError("no configuration label given; use --config LABEL or --alternate A,B")
    if sweeps is not None and int(sweeps) < 1:
        raise ScheduleError(f"--sweeps {sweeps} must be at least 1")
    if every_s < 0:
        raise ScheduleError(f"--every {every_s} s is negative; give 0 or more")
    switch_commands = dict(switch_commands or {})
    unknown = sorted(set(switch_commands) - set(labels)) + sorted(set(bias_tee_labels) - set(labels))
    if unknown:
        raise ScheduleError(f"label(s) {', '.join(unknown)} are not among the configurations {', '.join(labels)}")
    if bias_tee_labels and not hasattr(source, "set_bias_tee"):
        raise ScheduleError(f"the {source.kind} source has no bias tee; drop --bias-tee")
    if sweeps is None and duration_s is None and every_s == 0:
        sweeps = 1
    stop = stop or threading.Event()
    clock = clock or SystemClock()
    plan = plan_for_source(band, source, settings)

    session = CaptureSession(store, run_info, stop=stop, install_signals=False, keep_iq_dirs=[keep_iq_dir])
    with session:
        run_id = session.run_id
        if hasattr(source, "on_event"):
            source.on_event = lambda kind, message: store.add_event(run_id, kind, message)
        mono0, wall0 = clock.monotonic(), clock.wall()
        last_offset = 0.0
        deadline = None if duration_s is None else mono0 + float(duration_s)
        stored = incomplete = dropped = jumps = 0
        counts: dict[str, int] = {}
        next_start = mono0
        last_sweep_s = floor = None
        strongest: tuple = ()
        prev_label = None
        attempt = 0

        def elapsed() -> float:
            return clock.monotonic() - mono0

        def time_left() -> float | None:
            return None if deadline is None else max(0.0, deadline - clock.monotonic())

        def tell(event: str, **kw) -> None:
            if progress is not None:
                progress(ScheduleProgress(event=event, sweep_number=stored + incomplete + 1 if event == "hop" else stored,
                                          sweeps_total=sweeps, time_left_s=time_left(), elapsed_s=elapsed(),
                                          last_sweep_s=last_sweep_s, noise_floor_dbfs_hz=floor, strongest=strongest,
                                          gaps=dropped, **kw))

        while not stop.is_set():
            now = clock.monotonic()
            offset = (clock.wall() - wall0) - (now - mono0)
            if abs(offset - last_offset) > jump_threshold_s:
                jumps += 1
                store.add_event(run_id, "clock-jump",
                                f"wall clock moved {offset - last_offset:+.1f} s against the monotonic clock; "
                                "the schedule follows the monotonic clock, timestamps the new wall time")
                last_offset = offset
            if sweeps is not None and stored >= sweeps:
                break
            if deadline is not None and now >= deadline:
                break
            if next_start > now:
                wait = next_start - now
                if deadline is not None and next_start >= deadline:
                    break
                tell("wait", next_sweep_in_s=wait, configuration=labels[attempt % len(labels)])
                stop.wait(min(wait, 1.0))
                continue
            label = labels[attempt % len(labels)]
            if label != prev_label:
                if label in switch_commands:
                    if not run_switch_command(switch_commands[label], label, switch_timeout_s, stop=stop):
                        break
                    store.add_event(run_id, "switch", f"ran the switch command for '{label}'")
                if bias_tee_labels:
                    source.set_bias_tee(label in bias_tee_labels)
                prev_label = label
            t0 = clock.monotonic()

            def on_hop(h: HopProgress, _label=label) -> None:
                tell("hop", configuration=_label, hop_index=h.hop_index, n_hops=h.n_hops)

            if hasattr(source, "plan_ahead") and source.fixed_centers_hz is None:
                source.plan_ahead([h.center_hz for h in plan.hops],
                                  max(settings.fft_size, int(round(settings.dwell_s * source.sample_rate_hz))))
            try:
                outcome = session.record(source, plan, settings, label, input,
                                         keep_iq_dir=keep_iq_dir, on_hop=on_hop)
            except SweepInterrupted:
                dropped += 1
                tell("gap", configuration=label)
                continue
            if outcome.result.complete:
                stored += 1
                counts[label] = counts.get(label, 0) + 1
                attempt += 1
            else:
                incomplete += 1
            last_sweep_s = clock.monotonic() - t0
            floors = [h.floor_dbfs_hz for h in outcome.result.hops if np.isfinite(h.floor_dbfs_hz)]
            floor = float(np.median(floors)) if floors else None
            strongest = _strongest(outcome.result)
            now = clock.monotonic()
            if every_s > 0:
                next_start = mono0 + (math.floor((now - mono0) / every_s) + 1) * every_s
            else:
                next_start = now
            tell("sweep", configuration=label,
                 next_sweep_in_s=max(0.0, next_start - now))
    status = session.status
    return ScheduleSummary(run_id=run_id, status=status, sweeps_stored=stored, sweeps_incomplete=incomplete,
                           sweeps_dropped=dropped, gaps=dropped, clock_jumps=jumps, elapsed_s=elapsed(),
                           by_configuration=counts, stop_signal=getattr(stop, "signal_name", None))
