"""Measure prepared replay jobs in worker processes; the results come back in the jobs' order.

Replaying a recording is CPU work (read, PSD, floor fit, census) that touches no database, so
several recordings can be measured at once, one per core, while one process (the parent)
stores every sweep in the order given: the database is the same as from a serial replay.

* The workers are forked (``multiprocessing`` start method ``fork``) before any thread is
  started, so they inherit the recordings already opened and checked by the parent (memory
  maps), and a job is sent as its index in a module-level list, never pickled. What comes back
  is a :class:`survey.runner.MeasuredSweep`: the readings and the spectra the store keeps, no
  raw samples.
* Serial (today's loop in this process) with one worker, one recording, or where forking is
  unavailable (Windows) or unsafe (macOS, where system libraries may not survive a fork; or a
  process that already runs threads).
* Stop: SIGINT and SIGTERM reach the parent (whose handlers only set its flag); while it waits
  for a result the parent copies its flag into a shared one that every worker checks between
  hops, so the sweeps in progress end after the hop in flight, like a serial sweep. Workers
  ignore SIGINT (Ctrl-C reaches the whole process group; the parent decides). A SIGTERM ends an
  idle worker at once (the pool's own clean-up relies on it); one that reaches a worker while
  it measures sets the shared flag instead, or ends it when a stop is already under way. A
  worker whose parent is gone (``kill -9``) stops after its hop.
* The pool is always terminated and joined when the ``with`` block ends: no process outlives it.

Typical use (``bandcensus replay``)::

    with ReplayMeasurer(jobs, workers) as measurer:           # fork here, before any thread
        results = measurer.results(should_stop=stop.is_set)
        for job in jobs:
            measured = next(results)                         # in order
            store_sweep(store, run_id, measured)
"""

from __future__ import annotations

import ctypes
import multiprocessing
import os
import signal
import sys
import threading
import time
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Sequence

from survey.errors import RecordingError
from survey.records import HopPlan, SweepSettings
from survey.runner import MeasuredSweep, measure_sweep
from survey.sweep import HopProgress

#: Most workers chosen by default: beyond four, reading the recordings, not the CPU, limits.
#: Common practice, no source; the measured gain on two cores is in the README's speed table.
MAX_DEFAULT_WORKERS = 4

#: Seconds between the parent's checks of its stop flag while it waits for a result.
_POLL_S = 0.1

#: Seconds the parent waits, once a stop is requested, for the sweep it is waiting on. A worker
#: ends its sweep after the hop in flight (well under a second for a recording); one that died
#: instead (a signal from outside between its sweep and the hand-over) never answers, and the
#: stop must not wait for it forever.
STOP_GRACE_S = 20.0


@dataclass(frozen=True)
class ReplayJob:
    """One recording ready to measure: the opened source, its plan and what to store with it.

    ``source`` is an :class:`survey.sources.base.IQSource` (a checked recording); the other
    fields are passed on to :func:`survey.runner.measure_sweep`.
    """

    source: Any
    plan: HopPlan
    settings: SweepSettings
    configuration: str
    input: str
    recording: str
    notes: str = ""
    dc_notch_hz: float = 0.0
    notch_channels_hz: tuple[int, ...] = ()


def measure_job(job: ReplayJob, *, on_hop: Callable[[HopProgress], None] | None = None,
                should_stop: Callable[[], bool] | None = None) -> MeasuredSweep:
    """Measure one job in this process (spectra kept, as every replayed sweep stores them)."""
    return measure_sweep(job.source, job.plan, job.settings, job.configuration, job.input,
                         on_hop=on_hop, should_stop=should_stop, recording=job.recording, notes=job.notes,
                         dc_notch_hz=job.dc_notch_hz, notch_channels_hz=job.notch_channels_hz)


def default_workers() -> int:
    """Processes to use by default: the cores this process may run on, at most
    :data:`MAX_DEFAULT_WORKERS` (``os.sched_getaffinity`` where available, else ``os.cpu_count``)."""
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cores = os.cpu_count() or 1
    return max(1, min(cores, MAX_DEFAULT_WORKERS))


def fork_is_safe() -> bool:
    """True where worker processes may be forked here and now: POSIX ``fork`` available, not macOS,
    no other thread running in this process, and no other measurer's pool open."""
    return (sys.platform != "darwin" and "fork" in multiprocessing.get_all_start_methods()
            and threading.active_count() == 1 and not _JOBS)


# -- state shared with the forked workers (set in the parent just before the fork) -------------
_JOBS: Sequence[ReplayJob] = ()
_STOP: Any = None          # multiprocessing RawValue(c_bool): a stop is under way
_PARENT_PID = 0
_HOP_START: list[int] = []  # job k's hops are reported in _HOPS[3 * _HOP_START[k]:] ...
_HOPS: Any = None          # ... as (hop index, centre Hz, floor dB(FS)/Hz) triples (RawArray of doubles)
_HOPS_DONE: Any = None     # hops reported so far per job (RawArray of ints), written after the triple
_MEASURED_BY: Any = None   # pid of the worker that took job k (RawArray of longs; 0: not taken yet)


def _stop_requested() -> bool:
    return bool(_STOP.value) or os.getppid() != _PARENT_PID


def _on_sigterm(signum, frame) -> None:
    if _STOP.value:  # the stop is already under way (e.g. the pool ending): end this worker now
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        os.kill(os.getpid(), signal.SIGTERM)
        return
    _STOP.value = True  # only a flag: every worker stops after its hop in flight


def _worker_start() -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)  # an idle worker ends at once (the pool's clean-up)


def _measure_in_worker(index: int) -> MeasuredSweep:
    _MEASURED_BY[index] = os.getpid()
    start, room = _HOP_START[index], len(_JOBS[index].plan.hops)

    def report(hop: HopProgress) -> None:  # shared memory the parent reads while it waits
        done = _HOPS_DONE[index]
        if done < room:
            _HOPS[3 * (start + done): 3 * (start + done + 1)] = [hop.hop_index, hop.center_hz, hop.floor_dbfs_hz]
            _HOPS_DONE[index] = done + 1

    signal.signal(signal.SIGTERM, _on_sigterm)  # while measuring: a stop, unless one is under way
    try:
        return measure_job(_JOBS[index], on_hop=report, should_stop=_stop_requested)
    finally:
        signal.signal(signal.SIGTERM, signal.SIG_DFL)


def _relay_hops(index: int, reported: int, on_hop: Callable[[HopProgress], None] | None) -> int:
    """Call ``on_hop`` for job ``index``'s hops reported by its worker since ``reported``."""
    done = _HOPS_DONE[index]
    if on_hop is not None:
        n_hops = len(_JOBS[index].plan.hops)
        for k in range(reported, done):
            hop_index, center_hz, floor = _HOPS[3 * (_HOP_START[index] + k): 3 * (_HOP_START[index] + k + 1)]
            on_hop(HopProgress(int(hop_index), n_hops, center_hz, floor))
    return done


def _gone(pid: int) -> bool:
    """True when worker ``pid`` has ended (exited or killed; a zombie not yet reaped counts)."""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:
        return False
    try:  # Linux: a zombie still answers the probe above
        with open(f"/proc/{pid}/stat") as stat:
            return stat.read().rsplit(")", 1)[1].split()[0] in ("Z", "X")
    except (OSError, IndexError):
        return False


def _last_chance(ordered: Any, index: int) -> MeasuredSweep:
    """The result of job ``index`` whose worker has ended: it may still be in the pipe (the worker
    handed it over, then ended); otherwise the sweep is lost and the replay stops with an error
    naming the recording (the pool would wait for it for ever)."""
    try:
        return ordered.next(timeout=2.0)
    except multiprocessing.TimeoutError:
        raise RecordingError(f"{_JOBS[index].recording}: the worker process measuring it ended unexpectedly "
                             "(killed by a signal or out of memory?); run again, or with --jobs 1") from None


class ReplayMeasurer:
    """Measures ``jobs`` with up to ``workers`` processes; use as a context manager.

    Parameters
    ----------
    jobs : sequence of ReplayJob
        The recordings, already opened and checked, in the order they are to be stored.
    workers : int
        Processes to measure with (1: serially in this process). Fewer are used when there are
        fewer jobs, and one where forking is not safe (:func:`fork_is_safe`).

    Enter the ``with`` block before any thread is started (a progress line starts one).
    """

    def __init__(self, jobs: Sequence[ReplayJob], workers: int) -> None:
        self.jobs = list(jobs)
        wanted = max(1, min(int(workers), len(self.jobs)))
        self.workers = wanted if wanted > 1 and fork_is_safe() else 1
        self._pool = None

    @property
    def parallel(self) -> bool:
        """True when the jobs are measured in worker processes."""
        return self._pool is not None

    def __enter__(self) -> "ReplayMeasurer":
        global _JOBS, _STOP, _PARENT_PID, _HOP_START, _HOPS, _HOPS_DONE, _MEASURED_BY
        if self.workers > 1:
            context = multiprocessing.get_context("fork")
            _JOBS, _STOP, _PARENT_PID = self.jobs, context.RawValue(ctypes.c_bool, False), os.getpid()
            rooms = [len(job.plan.hops) for job in self.jobs]
            _HOP_START = [sum(rooms[:k]) for k in range(len(rooms))]
            _HOPS = context.RawArray(ctypes.c_double, 3 * max(1, sum(rooms)))
            _HOPS_DONE = context.RawArray(ctypes.c_int, len(rooms))
            _MEASURED_BY = context.RawArray(ctypes.c_long, len(rooms))
            try:
                self._pool = context.Pool(self.workers, initializer=_worker_start)
            except BaseException:
                _JOBS = ()
                raise
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    def close(self) -> None:
        """Stop and join the workers (the sweeps they were measuring are dropped)."""
        global _JOBS
        pool, self._pool = self._pool, None
        if pool is not None:
            try:
                _STOP.value = True  # any worker still measuring ends at its next hop, or at SIGTERM
                pool.terminate()
                pool.join()
            finally:
                _JOBS = ()

    def results(self, *, should_stop: Callable[[], bool] | None = None,
                on_hop: Callable[[HopProgress], None] | None = None) -> Iterator[MeasuredSweep]:
        """The jobs' measured sweeps, in the jobs' order, each computed when asked for (serial)
        or as soon as a worker is free (parallel).

        ``should_stop`` is checked between hops (serial) or while waiting (parallel: then every
        worker stops after its hop in flight, and each sweep ended early comes back with
        ``complete = False``; if the awaited sweep has not come back ``STOP_GRACE_S`` after the
        stop, the results end there). ``on_hop`` is called after each hop of the job being waited for
        (a worker's hops are relayed through shared memory while the parent waits). An error raised measuring a job is raised here, when
        that job's result is asked for.
        """
        if self._pool is None:
            for job in self.jobs:
                yield measure_job(job, on_hop=on_hop, should_stop=should_stop)
            return
        ordered = self._pool.imap(_measure_in_worker, range(len(self.jobs)), chunksize=1)
        for index in range(len(self.jobs)):
            reported = 0
            give_up_at = None
            while True:
                if should_stop is not None and should_stop():
                    _STOP.value = True
                    give_up_at = give_up_at or time.monotonic() + STOP_GRACE_S
                try:
                    measured = ordered.next(timeout=_POLL_S)
                except multiprocessing.TimeoutError:
                    reported = _relay_hops(index, reported, on_hop)
                    if give_up_at is not None and time.monotonic() > give_up_at:
                        return  # stopping, and the awaited worker is gone: nothing more comes
                    if _gone(_MEASURED_BY[index]):
                        measured = _last_chance(ordered, index)
                    else:
                        continue
                break
            _relay_hops(index, reported, on_hop)
            yield measured


__all__ = ["MAX_DEFAULT_WORKERS", "ReplayJob", "ReplayMeasurer", "default_workers", "fork_is_safe", "measure_job"]
