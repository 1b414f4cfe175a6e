"""The life cycle of one capture run, shared by every capture command.

``replay``, ``simulate``, ``scan`` and any other command that stores sweeps go through
:class:`CaptureSession`, so they stop, fail and clean up the same way:

* **Begin**: runs of this database left ``running`` by a writer process that no longer exists
  (killed with ``kill -9``, power cut) are marked ``interrupted``; the new run row is written
  with the writer's process id and host name (``settings["writer"]``), so the next writer or
  ``bandcensus runs`` can tell a live run from a dead one.
* **Stop**: SIGINT (Ctrl-C) and SIGTERM only set :attr:`CaptureSession.stop`; the sweep engine
  checks it between hops, the sweep in progress is stored with ``complete = 0`` and the run
  ends ``stopped`` (a ``stop`` event names the signal). A switch command that is running is
  terminated (:func:`survey.schedule.run_switch_command`). The command exits 0.
* **Failure**: any other exception ends the run ``failed``; everything committed stays.
* **End**: always; leftovers (``*.partial`` files of unfinished IQ recordings) are removed,
  including those of earlier writers that died.

Rules from the reliability notes (signal handlers only set a flag; a service manager sends
SIGKILL 90 s after SIGTERM, so a stop must take about a hop, not a sweep).
The library never prints: the command prints :meth:`CaptureSession.summary`.
"""

from __future__ import annotations

import os
import re
import signal
import threading
import time
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable, Iterable, Iterator, Sequence

from survey.errors import ScheduleError, StoreError
from survey.writer import (  # noqa: F401 (re-exported)
    INTERRUPTED, WRITER_KEY, process_alive, shown_status, writer_gone, writer_identity,
)
from survey.records import RunInfo
from survey.runner import MeasuredSweep, SweepOutcome, record_sweep, store_sweep
from survey.store import SurveyStore, list_runs

_PARTIAL = re.compile(r"\.(\d+)-[0-9a-f]+\.partial$")


class StopRequest(threading.Event):
    """A stop flag that SIGINT/SIGTERM set; nothing else happens in the handler."""

    def __init__(self) -> None:
        super().__init__()
        self.signal_name: str | None = None

    def _handler(self, signum, frame) -> None:
        self.signal_name = signal.Signals(signum).name
        self.set()

    @contextmanager
    def installed(self, signals: Sequence[int] = (signal.SIGINT, signal.SIGTERM)) -> Iterator["StopRequest"]:
        """Install the handlers for the duration of a ``with`` block (no-op outside the main thread)."""
        if threading.current_thread() is not threading.main_thread():
            yield self
            return
        previous = {s: signal.signal(s, self._handler) for s in signals}
        try:
            yield self
        finally:
            for s, h in previous.items():
                signal.signal(s, h)


def mark_interrupted_runs(store: SurveyStore) -> list[int]:
    """Mark every ``running`` run whose writer is gone as ``interrupted``; returns their ids.

    The end time written is when this was noticed (the true end is the last sweep's end).
    """
    done = []
    for run in list_runs(store.conn):
        if run["status"] == "running" and writer_gone(run["settings"]):
            store.add_event(run["id"], "interrupted",
                            "the writing process ended without closing the run (killed or crashed); "
                            "every sweep committed before is intact; end time is when this was noticed")
            store.end_run(run["id"], INTERRUPTED)
            done.append(run["id"])
    return done


def remove_partials(directory: str | os.PathLike | None, *, only_dead_writers: bool = True) -> int:
    """Remove unfinished recording files (``*.<pid>-<id>.partial``) in ``directory``.

    With ``only_dead_writers`` (default) only files whose writing process is gone or is this
    process are removed, so a scan running next door keeps its files. Returns the count.
    """
    if directory is None:
        return 0
    folder = Path(directory)
    if not folder.is_dir():
        return 0
    removed = 0
    for path in folder.glob(".*.partial"):
        m = _PARTIAL.search(path.name)
        if m is None:
            continue
        pid = int(m.group(1))
        if only_dead_writers and pid != os.getpid() and process_alive(pid):
            continue
        try:
            path.unlink()
            removed += 1
        except OSError:
            pass
    return removed


@dataclass(frozen=True)
class SessionSummary:
    """How a capture run ended, for the command's closing line."""

    run_id: int
    status: str
    sweeps_stored: int
    sweeps_incomplete: int
    elapsed_s: float
    stop_signal: str | None = None
    by_configuration: dict = field(default_factory=dict)

    def line(self) -> str:
        """One line such as ``Run 3 stopped by SIGTERM: 2 sweeps stored, 1 incomplete, elapsed 4.1 s``."""
        how = f"stopped by {self.stop_signal}" if self.status == "stopped" and self.stop_signal else self.status
        per = ", ".join(f"{k} {v}" for k, v in self.by_configuration.items())
        per = f" ({per})" if per else ""
        stored = f"{self.sweeps_stored} sweep{'' if self.sweeps_stored == 1 else 's'}"
        return (f"Run {self.run_id} {how}: {stored} stored{per}, "
                f"{self.sweeps_incomplete} incomplete, elapsed {self.elapsed_s:.1f} s")


class CaptureSession:
    """One capture run: begin, sweeps, stop on SIGINT/SIGTERM, end. Use as a context manager.

    Parameters
    ----------
    store : SurveyStore
        Open database (the caller closes it).
    run_info : RunInfo
        Stored in the run row; the writer's pid and host are added to its settings.
    stop : threading.Event, optional
        Shared stop flag (default a new :class:`StopRequest`).
    install_signals : bool
        Route SIGINT and SIGTERM to the stop flag while the session is open (main thread only).
    keep_iq_dirs : iterable of paths
        Folders whose ``*.partial`` leftovers are removed at the start and on every exit.
    clock : callable
        Monotonic seconds, for the elapsed time.

    Example
    -------
    >>> with CaptureSession(store, info) as session:        # doctest: +SKIP
    ...     while not session.stopped:
    ...         session.record(source, plan, settings, "bare", "antenna")
    >>> print(session.summary().line())                      # doctest: +SKIP
    """

    def __init__(self, store: SurveyStore, run_info: RunInfo, *, stop: threading.Event | None = None,
                 install_signals: bool = True, keep_iq_dirs: Iterable[str | os.PathLike | None] = (),
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.store = store
        self.stop = stop if stop is not None else StopRequest()
        self._install = install_signals and isinstance(self.stop, StopRequest)
        self._dirs = [d for d in keep_iq_dirs if d is not None]
        self._clock = clock
        settings = dict(run_info.settings or {})
        settings[WRITER_KEY] = writer_identity()
        self._info = replace(run_info, settings=settings)
        self.run_id: int | None = None
        self.status = "running"
        self.stored = 0
        self.incomplete = 0
        self.by_configuration: dict[str, int] = {}
        self.interrupted_runs: list[int] = []
        self._t0 = clock()
        self._signals = None

    # -- life cycle ---------------------------------------------------------------------------
    def __enter__(self) -> "CaptureSession":
        if self._install:
            self._signals = self.stop.installed()
            self._signals.__enter__()
        try:
            for d in self._dirs:
                remove_partials(d)
            self.interrupted_runs = mark_interrupted_runs(self.store)
            self.run_id = self.store.begin_run(self._info)
        except BaseException:
            self._restore_signals()
            raise
        self._t0 = self._clock()
        return self

    def __exit__(self, exc_type, exc, tb) -> bool:
        swallow = False
        if exc_type is None:
            self.status = "stopped" if self.stop.is_set() else "finished"
        elif issubclass(exc_type, KeyboardInterrupt):
            # Ctrl-C outside the handlers' reach (e.g. before they were installed): still a stop.
            self.status, swallow = "stopped", True
            if isinstance(self.stop, StopRequest) and self.stop.signal_name is None:
                self.stop.signal_name = "SIGINT"
            self.stop.set()
        else:
            self.status = "failed"
        try:
            if self.run_id is not None:
                if self.status == "stopped":
                    why = getattr(self.stop, "signal_name", None) or "stop request"
                    self.store.add_event(self.run_id, "stop", f"stopped by {why} after {self.stored} sweep(s)")
                elif isinstance(exc, ScheduleError):
                    self.store.add_event(self.run_id, "schedule-error", str(exc))
                self.store.end_run(self.run_id, self.status)
        except StoreError:
            if exc_type is None or swallow:
                raise  # closing the run failed (disk full, locked): that is the error to report
        finally:
            self._cleanup()
        return swallow

    def _restore_signals(self) -> None:
        if self._signals is not None:
            signals, self._signals = self._signals, None
            signals.__exit__(None, None, None)

    def _cleanup(self) -> None:
        self._restore_signals()
        for d in self._dirs:
            remove_partials(d)

    # -- sweeps -------------------------------------------------------------------------------
    @property
    def stopped(self) -> bool:
        """True once a stop was requested."""
        return self.stop.is_set()

    @property
    def stop_signal(self) -> str | None:
        """Name of the signal that stopped the run (``SIGTERM``, ``SIGINT``), if any."""
        return getattr(self.stop, "signal_name", None)

    def record(self, source, plan, settings, configuration: str, input: str, **kwargs) -> SweepOutcome:
        """Measure and store one sweep (:func:`survey.runner.record_sweep`), stopping between hops
        when a stop is requested (the sweep is then stored with ``complete = 0``)."""
        if self.run_id is None:
            raise StoreError("capture session not begun; use it in a 'with' block")
        outcome = record_sweep(self.store, self.run_id, source, plan, settings, configuration, input,
                               should_stop=self.stop.is_set, **kwargs)
        self.count(outcome)
        return outcome

    def store_measured(self, measured: MeasuredSweep) -> SweepOutcome:
        """Store and count a sweep measured elsewhere (:func:`survey.runner.measure_sweep`, e.g. in a
        worker process, :mod:`survey.replay_workers`); its ``should_stop`` should follow :attr:`stop`."""
        if self.run_id is None:
            raise StoreError("capture session not begun; use it in a 'with' block")
        outcome = store_sweep(self.store, self.run_id, measured)
        self.count(outcome)
        return outcome

    def count(self, outcome: SweepOutcome) -> None:
        """Count a stored sweep (complete or not) in the summary."""
        if outcome.result.complete:
            self.stored += 1
            label = outcome.result.configuration
            self.by_configuration[label] = self.by_configuration.get(label, 0) + 1
        else:
            self.incomplete += 1

    def summary(self) -> SessionSummary:
        """The run's outcome so far (final after the ``with`` block)."""
        return SessionSummary(run_id=int(self.run_id or 0), status=self.status, sweeps_stored=self.stored,
                              sweeps_incomplete=self.incomplete, elapsed_s=self._clock() - self._t0,
                              stop_signal=self.stop_signal if self.status == "stopped" else None,
                              by_configuration=dict(self.by_configuration))


__all__ = [
    "CaptureSession", "INTERRUPTED", "SessionSummary", "StopRequest", "WRITER_KEY", "mark_interrupted_runs",
    "process_alive", "remove_partials", "shown_status", "writer_gone", "writer_identity",
]
