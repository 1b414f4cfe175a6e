"""Receiver in a child process, watched by the parent: stalls and crashes become recorded gaps.

A synchronous read from the receiver can block forever after an unplug or a wedged device
(reliability notes), and a signal handler cannot run inside a blocking C call. So the receiver
lives in a child process; the parent-side :class:`WatchedSource` implements
:class:`~survey.sources.base.IQSource` and forwards ``tune`` / ``read`` over a pipe.

Protocol: the child streams every hop's samples in chunks (``chunk_samples``, about 256 KiB of
``cu8``); every message is a heartbeat. When no message arrives within ``stall_timeout_s`` or
the child dies or reports a driver error, the parent

1. kills the child (SIGKILL) and records a ``receiver-error`` event;
2. backs off (exponential, ``backoff_initial_s`` doubling up to ``backoff_max_s``) and starts a
   new child (a new driver object: pyrtlsdr closes the device on any error);
3. records a ``gap`` event (from the fault to the reopening, with the reason) and raises
   :class:`SweepInterrupted`.

**Choice:** the sweep in progress when a fault strikes is *dropped*, not stored:
:func:`survey.runner.record_sweep` stores nothing when the sweep raises, and the schedule goes
on with the next sweep. The gap event is always recorded. After ``max_reopen`` failed
reopenings in a row, or ``max_reopen`` faults without one good hop in between, the parent
stops with :class:`~survey.errors.ReceiverError` asking for a USB power cycle.

The child's source comes from an injectable, picklable ``factory`` (a class or a
:func:`functools.partial` of one), so tests can run fault-injecting sources in the child.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import signal
import threading
import time
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from survey.errors import ReceiverError
from survey.records import IQBlock
from survey.sources.base import IQSource


class SweepInterrupted(ReceiverError):
    """A receiver fault (or a stop request) interrupted the sweep in progress; it is not stored."""


EventSink = Callable[[str, str], None]


@dataclass(frozen=True)
class WatchdogSettings:
    """Timeouts and retry policy of :class:`WatchedSource` (seconds)."""

    stall_timeout_s: float = 5.0
    open_timeout_s: float = 30.0
    max_reopen: int = 5
    backoff_initial_s: float = 0.5
    backoff_max_s: float = 30.0
    chunk_samples: int = 131_072
    start_method: str = "fork"
    stop_grace_s: float = 0.8


def _watch_parent(parent_pid: int) -> None:
    while True:
        time.sleep(0.5)
        if os.getppid() != parent_pid:
            os._exit(3)


def _error_message(exc: BaseException) -> tuple:
    return ("error", type(exc).__name__, getattr(exc, "errno", None), str(exc) or type(exc).__name__)


def _child_main(conn: Any, factory: Callable[[], IQSource], chunk_samples: int, parent_pid: int) -> None:
    """Body of the receiver process: open the source, then serve tune/read/bias/close requests."""
    # The parent handles Ctrl-C and SIGTERM and closes the child itself.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    threading.Thread(target=_watch_parent, args=(parent_pid,), daemon=True).start()
    try:
        source = factory()
    except BaseException as exc:
        conn.send(_error_message(exc))
        return
    try:
        conn.send(("ready", source.kind, float(source.sample_rate_hz), source.fixed_centers_hz, source.describe()))
        while True:
            try:
                msg = conn.recv()
            except (EOFError, OSError):
                break
            op = msg[0]
            try:
                if op == "tune":
                    source.tune(msg[1])
                    conn.send(("ok",))
                elif op == "read":
                    remaining = msg[1]
                    while True:
                        k = None if remaining is None else min(chunk_samples, remaining)
                        block = source.read(k)
                        raw = np.ascontiguousarray(block.raw)
                        conn.send(("chunk", float(block.center_hz), float(block.sample_rate_hz), block.datatype,
                                   block.started_utc, raw.dtype.str))
                        conn.send_bytes(memoryview(raw).cast("B"))
                        if remaining is None:
                            break
                        remaining -= block.n_samples
                        if remaining <= 0:
                            break
                    conn.send(("done",))
                elif op == "bias":
                    source.set_bias_tee(bool(msg[1]))
                    conn.send(("ok", source.describe()))
                elif op == "close":
                    break
            except BaseException as exc:
                conn.send(_error_message(exc))
                break  # after a driver error the source is discarded: the parent starts anew
    finally:
        try:
            source.close()
        except BaseException:
            pass
        conn.close()


class _ChildGone(Exception):
    """The child died, stalled or reported an error; ``reason`` says which."""

    def __init__(self, reason: str, stopped: bool = False):
        super().__init__(reason)
        self.reason = reason
        self.stopped = stopped


class WatchedSource:
    """IQ source whose receiver runs in a watched child process.

    Parameters
    ----------
    factory : callable
        Picklable callable returning the real source in the child (e.g.
        ``functools.partial(RtlSource, device=0, gain_db=29.7)``).
    settings : WatchdogSettings
        Stall timeout, reopen attempts, back-off.
    on_event : callable, optional
        ``on_event(kind, message)`` for ``receiver-error`` and ``gap`` events (the schedule
        writes them to the database).
    stop_event : threading.Event, optional
        Set by a stop request: back-off waits end early and a busy child is abandoned after
        ``stop_grace_s``.

    Raises
    ------
    ReceiverError
        At construction when the first opening fails (no device, bad setting): no retry, since
        the user must fix it.
    """

    def __init__(
        self,
        factory: Callable[[], IQSource],
        settings: WatchdogSettings | None = None,
        on_event: EventSink | None = None,
        stop_event: threading.Event | None = None,
    ):
        self.factory = factory
        self.settings = settings or WatchdogSettings()
        self.on_event = on_event
        self.stop_event = stop_event
        self._ctx = mp.get_context(self.settings.start_method)
        self._proc = None
        self._conn = None
        self._bias_tee = False
        self._consecutive_faults = 0
        self._reset_ahead()
        self.faults = 0
        self.gaps = 0
        self.gap_s = 0.0
        self._start()

    # -- child management ------------------------------------------------------------------
    def _start(self) -> None:
        parent_conn, child_conn = self._ctx.Pipe(duplex=True)
        proc = self._ctx.Process(
            target=_child_main,
            args=(child_conn, self.factory, int(self.settings.chunk_samples), os.getpid()),
            name="bandcensus-receiver",
            daemon=True,
        )
        proc.start()
        child_conn.close()
        self._proc, self._conn = proc, parent_conn
        try:
            msg = self._recv(self.settings.open_timeout_s)
        except _ChildGone as gone:
            self._kill()
            raise ReceiverError(f"receiver did not open: {gone.reason}") from None
        if msg[0] == "error":
            self._kill()
            raise ReceiverError(msg[3])
        _, self.kind, self._rate_hz, fixed, self._describe = msg
        self._fixed = None if fixed is None else tuple(fixed)
        if self._bias_tee:
            try:
                self._describe = self._request(("bias", True))[1]
            except _ChildGone as gone:
                self._kill()
                raise ReceiverError(f"receiver did not accept the bias tee: {gone.reason}") from None

    def _kill(self) -> None:
        self._reset_ahead()
        proc, conn = self._proc, self._conn
        self._proc = self._conn = None
        if proc is not None and proc.is_alive():
            proc.kill()
        if proc is not None:
            proc.join(timeout=2.0)
        if conn is not None:
            conn.close()

    def _recv(self, timeout_s: float) -> tuple:
        """Next message from the child; a message is a heartbeat, silence past the timeout a stall."""
        start = time.monotonic()
        deadline = start + timeout_s
        stop_seen = None
        while True:
            now = time.monotonic()
            if self.stop_event is not None and self.stop_event.is_set():
                stop_seen = stop_seen or now
                deadline = min(deadline, stop_seen + self.settings.stop_grace_s)
            wait = max(0.0, min(deadline - now, 0.1))
            try:
                if self._conn.poll(wait):
                    return self._conn.recv()
            except (EOFError, OSError):
                code = None
                if self._proc is not None:
                    self._proc.join(timeout=0.5)
                    code = self._proc.exitcode
                raise _ChildGone(f"receiver process ended unexpectedly (exit code {code})") from None
            if not self._proc.is_alive():
                if self._conn.poll(0):
                    continue
                raise _ChildGone(f"receiver process died (exit code {self._proc.exitcode})")
            if time.monotonic() >= deadline:
                if stop_seen is not None:
                    raise _ChildGone("stop requested while the receiver was busy", stopped=True)
                raise _ChildGone(f"no samples for {timeout_s:.1f} s (receiver stalled)")

    def _request(self, message: tuple) -> tuple:
        try:
            self._conn.send(message)
        except (OSError, EOFError, ValueError):
            raise _ChildGone("receiver process is gone (pipe closed)") from None
        msg = self._recv(self.settings.stall_timeout_s + self._settle_allowance())
        if msg[0] == "error":
            raise _ChildGone(f"{msg[3]}")
        return msg

    def _settle_allowance(self) -> float:
        settle = self._describe.get("settle_s", 0.0) if isinstance(self._describe, dict) else 0.0
        return float(settle or 0.0)

    def _emit(self, kind: str, message: str) -> None:
        if self.on_event is not None:
            self.on_event(kind, message)

    def _stopping(self) -> bool:
        return self.stop_event is not None and self.stop_event.is_set()

    def _fault(self, gone: _ChildGone, during: str) -> None:
        """Kill, record, back off, reopen; then raise SweepInterrupted (or ReceiverError)."""
        from survey.store import utc_now

        fault_utc = utc_now()
        t0 = time.monotonic()
        self._kill()
        if gone.stopped or self._stopping():
            if not gone.stopped:
                self._emit("receiver-error", f"{during}: {gone.reason} (stopping, not reopened)")
            raise SweepInterrupted(f"{gone.reason} ({during})")
        self.faults += 1
        self._consecutive_faults += 1
        self._emit("receiver-error", f"{during}: {gone.reason}")
        limit = int(self.settings.max_reopen)
        if self._consecutive_faults > limit:
            msg = (f"receiver failed {self._consecutive_faults} times in a row without one good hop "
                   f"(last: {gone.reason}); giving up after {limit} attempts; unplug and replug the "
                   "receiver (USB power cycle)")
            self._emit("receiver-error", msg)
            raise ReceiverError(msg)
        last = gone.reason
        for attempt in range(1, limit + 1):
            delay = min(self.settings.backoff_initial_s * 2 ** (attempt - 1), self.settings.backoff_max_s)
            if self.stop_event is not None:
                if self.stop_event.wait(delay):
                    raise SweepInterrupted("stop requested while waiting to reopen the receiver")
            else:
                time.sleep(delay)
            try:
                self._start()
            except ReceiverError as exc:
                last = str(exc)
                self._emit("receiver-error", f"reopen attempt {attempt} of {limit} failed: {exc}")
                continue
            gap_s = time.monotonic() - t0
            self.gaps += 1
            self.gap_s += gap_s
            self._emit("gap", f"no samples from {fault_utc} to {utc_now()} ({gap_s:.1f} s): {gone.reason}; "
                              f"receiver reopened after {attempt} attempt(s); sweep in progress dropped")
            raise SweepInterrupted(f"{during}: {gone.reason}; receiver reopened, sweep dropped")
        msg = (f"receiver could not be reopened after {limit} attempts (last: {last}); "
               "unplug and replug the receiver (USB power cycle)")
        self._emit("receiver-error", msg)
        raise ReceiverError(msg)

    def _ensure_open(self) -> None:
        if self._proc is None:
            raise ReceiverError("the receiver is closed; open a new source")

    # -- IQSource --------------------------------------------------------------------------
    @property
    def sample_rate_hz(self) -> float:
        """Actual sample rate reported by the child's source, Hz."""
        return self._rate_hz

    @property
    def fixed_centers_hz(self) -> tuple[float, ...] | None:
        """Capture centres of a recording in the child, else None."""
        return self._fixed

    def describe(self) -> dict:
        """The child's source description plus the watchdog's policy."""
        d = dict(self._describe) if isinstance(self._describe, dict) else {"device": self._describe}
        d["watchdog"] = {"stall_timeout_s": self.settings.stall_timeout_s, "max_reopen": self.settings.max_reopen}
        return d

    def plan_ahead(self, centers_hz, n_samples: int | None) -> None:
        """Announce the hops of the coming sweep so the child reads hop k+1 while hop k is processed.

        Optional (the schedule calls it): without it every hop is requested on demand. A tune or
        read that differs from the announcement simply discards the read-ahead.
        """
        self._ahead = [float(c) for c in centers_hz] if n_samples is not None else []
        self._ahead_n = None if n_samples is None else int(n_samples)

    def _collect(self) -> IQBlock:
        header = None
        parts: list[np.ndarray] = []
        while True:
            msg = self._recv(self.settings.stall_timeout_s)
            if msg[0] == "chunk":
                if header is None:
                    header = msg
                data = self._conn.recv_bytes()
                parts.append(np.frombuffer(data, dtype=np.dtype(msg[5])))
            elif msg[0] == "done":
                break
            elif msg[0] == "error":
                raise _ChildGone(msg[3])
        raw = np.concatenate(parts) if len(parts) > 1 else parts[0].copy()
        return IQBlock(center_hz=header[1], sample_rate_hz=header[2], datatype=header[3], raw=raw,
                       started_utc=header[4])

    def _wait_ok(self) -> None:
        msg = self._recv(self.settings.stall_timeout_s + self._settle_allowance())
        if msg[0] == "error":
            raise _ChildGone(msg[3])

    def _drain(self) -> None:
        """Receive and discard a read-ahead that is not wanted after all."""
        if self._pending_tune is not None:
            self._pending_tune = None
            self._wait_ok()
        if self._pending_read is not None:
            self._pending_read = None
            self._collect()

    def _reset_ahead(self) -> None:
        self._ahead, self._ahead_n = [], None
        self._pending_tune = self._pending_read = None

    def tune(self, center_hz: float) -> None:
        """Tune the child's receiver (including its settle time)."""
        self._ensure_open()
        c = float(center_hz)
        if c in self._ahead:
            del self._ahead[: self._ahead.index(c) + 1]
        else:
            self._ahead = []  # off the announced plan: no more read-ahead this sweep
        try:
            if self._pending_tune is not None and self._pending_tune == c:
                self._pending_tune = None
                self._wait_ok()  # the read-ahead already tuned there
                return
            self._drain()
            self._request(("tune", c))
        except (OSError, EOFError):
            self._reset_ahead()
            self._fault(_ChildGone("receiver process is gone (pipe closed)"), f"tuning to {c / 1e6:.3f} MHz")
        except _ChildGone as gone:
            self._reset_ahead()
            self._fault(gone, f"tuning to {c / 1e6:.3f} MHz")

    def read(self, n_samples: int | None) -> IQBlock:
        """Read one hop's samples, streamed from the child in chunks (each one a heartbeat)."""
        self._ensure_open()
        n = None if n_samples is None else int(n_samples)
        try:
            if self._pending_read is not None and self._pending_read == n and self._pending_tune is None:
                self._pending_read = None
            else:
                self._drain()
                self._conn.send(("read", n))
            block = self._collect()
            if self._ahead and self._ahead_n == n:
                nxt = self._ahead[0]
                self._conn.send(("tune", nxt))
                self._conn.send(("read", n))
                self._pending_tune, self._pending_read = nxt, n
        except (OSError, EOFError):
            self._reset_ahead()
            self._fault(_ChildGone("receiver process is gone (pipe closed)"), "reading samples")
        except _ChildGone as gone:
            self._reset_ahead()
            self._fault(gone, "reading samples")
        self._consecutive_faults = 0
        return block

    def set_bias_tee(self, enabled: bool) -> None:
        """Switch the bias tee in the child (reapplied after every reopening).

        **Caution:** DC on the coax can damage equipment that shorts it.
        """
        self._ensure_open()
        self._bias_tee = bool(enabled)
        try:
            self._describe = self._request(("bias", bool(enabled)))[1]
        except _ChildGone as gone:
            self._fault(gone, "switching the bias tee")

    def close(self) -> None:
        """Ask the child to close the receiver; kill it if it does not end promptly. Safe twice."""
        proc, conn = self._proc, self._conn
        if proc is None:
            return
        try:
            self._drain()  # a read-ahead in flight would block the child on a full pipe
        except (_ChildGone, OSError, EOFError):
            self._reset_ahead()
            self._kill()
            return
        try:
            conn.send(("close",))
        except (OSError, EOFError, ValueError):
            pass
        proc.join(timeout=1.0)
        self._kill()

