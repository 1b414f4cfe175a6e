"""Progress bar for long jobs (replay, simulate, scan, report) on standard error.

The library reports progress through callbacks (:class:`survey.sweep.HopProgress` after each
hop; the schedule's progress records in a live scan) and never prints. This module turns those
callbacks into one rich progress line::

    sweep 3 of 10 [bare] hop 5 of 12  ━━━━━━━━━━━━━━━━╺━━━━━━━━━━━━━━━━━━━━━━━  0:00:33 elapsed  0:01:20 left

shown only when standard error is a terminal and ``--quiet`` was not given, and removed when
the job ends. The time left is the elapsed time scaled by the work left (sweeps done plus the
fraction of the current sweep's hops), or the schedule's own estimate in a timed scan.

Typical use in a command::

    with sweep_progress(n_sweeps, quiet) as progress:
        for k in range(n_sweeps):
            progress.start_sweep(label)
            record_sweep(..., on_hop=progress.on_hop)
            progress.on_sweep()
"""

from __future__ import annotations

import time
from contextlib import contextmanager
from functools import lru_cache
from typing import TYPE_CHECKING, Any, Callable, Iterator

if TYPE_CHECKING:  # rich is imported only when a line is drawn (a quiet run never loads it)
    from rich.console import Console


def _clock_text(seconds: float | None) -> str:
    if seconds is None or seconds != seconds or seconds < 0:
        return "-:--:--"
    s = int(round(seconds))
    return f"{s // 3600}:{s % 3600 // 60:02d}:{s % 60:02d}"


@lru_cache(maxsize=1)
def _columns() -> tuple[type, type]:
    """The elapsed-time and time-left columns (rich column classes, built on first use)."""
    from rich.progress import ProgressColumn, Task
    from rich.text import Text

    class _ElapsedColumn(ProgressColumn):
        """Elapsed time of the task, ``H:MM:SS elapsed``."""

        def render(self, task: Task) -> Text:
            return Text(f"{_clock_text(task.elapsed or 0.0)} elapsed")

    class _LeftColumn(ProgressColumn):
        """Time left: the schedule's estimate when given, else elapsed scaled by the work left."""

        def render(self, task: Task) -> Text:
            given = task.fields.get("left_s")
            if given is not None:
                return Text(f"{_clock_text(given)} left")
            if task.total is None or not task.completed or task.elapsed is None:
                return Text("")
            left = task.elapsed * (task.total - task.completed) / task.completed
            return Text(f"{_clock_text(left)} left")

    return _ElapsedColumn, _LeftColumn


class SweepProgress:
    """Turns sweep and hop callbacks into a progress line (a no-op when not ``enabled``).

    Parameters
    ----------
    total_sweeps : int or None
        Sweeps planned (None: open-ended, e.g. a scan for a duration).
    console : rich Console or None
        Where to draw (standard error in the commands); None only when not ``enabled``.
    enabled : bool
        False draws nothing and costs next to nothing per callback.
    clock : callable
        Monotonic seconds; injected by tests.
    auto_refresh : bool
        Redraw on a timer (so elapsed time moves between hops); tests redraw on each event.
    """

    def __init__(self, total_sweeps: int | None, console: Console | None, enabled: bool = True,
                 clock: Callable[[], float] = time.monotonic, auto_refresh: bool = True):
        self.total_sweeps = total_sweeps
        self.enabled = enabled
        self._auto_refresh = auto_refresh
        self._sweeps_done = 0
        self._hops_done = 0
        self._n_hops: int | None = None
        self._label = ""
        self._in_sweep = False
        self._progress = None
        self._task = None
        if console is None and not enabled:
            return  # nothing is drawn: rich is not needed
        from rich.progress import BarColumn, Progress, TextColumn

        elapsed, left = _columns()
        self._progress = Progress(
            TextColumn("{task.description}", markup=False), BarColumn(), elapsed(), left(),
            console=console, transient=True, disable=not enabled, auto_refresh=auto_refresh,
            refresh_per_second=4, get_time=clock, redirect_stdout=False, redirect_stderr=False,
        )
        self._task = self._progress.add_task(self._describe(), total=total_sweeps, left_s=None)

    # -- the callbacks ----------------------------------------------------------------------
    def start_sweep(self, label: str = "") -> None:
        """A sweep begins (``label``: configuration and input, shown in brackets)."""
        self._label = label
        self._hops_done = 0
        self._in_sweep = True
        self._show()

    def on_hop(self, hop: Any) -> None:
        """After each hop: takes a :class:`survey.sweep.HopProgress` (uses its ``n_hops``)."""
        if not self._in_sweep:
            self.start_sweep(self._label)
        self._n_hops = int(getattr(hop, "n_hops", 0)) or self._n_hops
        self._hops_done += 1
        self._show()

    def on_sweep(self, *_: Any) -> None:
        """After each sweep (any arguments, e.g. the stored outcome, are ignored)."""
        self._sweeps_done += 1
        self._in_sweep = False
        self._hops_done = 0
        self._show()

    def on_schedule(self, event: Any) -> None:
        """Adaptor for a live scan's schedule progress records.

        Reads ``event`` (``'hop'``, ``'sweep'``, ``'wait'``, ``'gap'``), ``sweep_number`` (1-based),
        ``sweeps_total``, ``configuration``, ``n_hops``, ``time_left_s`` and ``next_sweep_in_s``.
        """
        kind = getattr(event, "event", "")
        if getattr(event, "sweeps_total", None) and self.total_sweeps is None:
            self.total_sweeps = int(event.sweeps_total)
            if self._progress is not None:
                self._progress.update(self._task, total=self.total_sweeps)
        if self._progress is not None:
            self._progress.update(self._task, left_s=getattr(event, "time_left_s", None))
        label = getattr(event, "configuration", None) or self._label
        if kind == "hop":
            if not self._in_sweep:
                self._sweeps_done = max(self._sweeps_done, int(getattr(event, "sweep_number", 1)) - 1)
                self.start_sweep(label)
            self.on_hop(event)
        elif kind == "sweep":
            self._sweeps_done = max(self._sweeps_done, int(getattr(event, "sweep_number", 1)) - 1)
            self.on_sweep()
        elif kind == "wait":
            wait = getattr(event, "next_sweep_in_s", None)
            self._show(f"next sweep in {wait:.0f} s" if wait is not None else "waiting for the next sweep")
        elif kind == "gap":
            self.note(f"receiver fault: sweep [{label}] dropped, receiver reopened")

    def note(self, text: str) -> None:
        """Print a line above the progress line (when shown)."""
        if self.enabled:
            self._progress.console.print(text, markup=False, highlight=False)

    # -- drawing ----------------------------------------------------------------------------
    def _describe(self, override: str | None = None) -> str:
        if override is not None:
            return override
        number = self._sweeps_done + (1 if self._in_sweep else 0)
        total = f" of {self.total_sweeps}" if self.total_sweeps else ""
        text = f"sweep {max(number, 1)}{total}"
        if self._label:
            text += f" [{self._label}]"
        if self._in_sweep and self._n_hops:
            text += f" hop {self._hops_done} of {self._n_hops}"
        return text

    def _show(self, override: str | None = None) -> None:
        if not self.enabled:
            return
        fraction = self._hops_done / self._n_hops if (self._in_sweep and self._n_hops) else 0.0
        self._progress.update(self._task, completed=self._sweeps_done + min(fraction, 1.0),
                              description=self._describe(override))
        if not self._auto_refresh:
            self._progress.refresh()

    def __iter__(self) -> Iterator[Callable[..., None]]:
        """``with sweep_progress(...) as (on_hop, on_sweep):`` unpacks the two callbacks."""
        return iter((self.on_hop, self.on_sweep))

    def __enter__(self) -> "SweepProgress":
        if self._progress is not None:
            self._progress.start()
        return self

    def __exit__(self, *exc: Any) -> None:
        if self._progress is not None:
            self._progress.stop()


@contextmanager
def sweep_progress(total_sweeps: int | None, quiet: bool = False, *, console: Console | None = None,
                   clock: Callable[[], float] = time.monotonic,
                   auto_refresh: bool = True) -> Iterator[SweepProgress]:
    """A :class:`SweepProgress` on standard error, shown only on a terminal and without ``quiet``."""
    if quiet and console is None:
        out = None
    elif console is not None:
        out = console
    else:
        from rich.console import Console

        out = Console(stderr=True)
    display = SweepProgress(total_sweeps, out, enabled=(not quiet) and out.is_terminal, clock=clock,
                            auto_refresh=auto_refresh)
    with display:
        yield display


@contextmanager
def step_progress(quiet: bool = False, *, console: Console | None = None,
                  auto_refresh: bool = True) -> Iterator[Callable[[str, int, int], None]]:
    """A progress line for a job told of its steps as ``on_step(what, k, n)`` (e.g. the report:
    ``step 2 of 4: comparison, noise and diagnosis``), on standard error, shown only on a
    terminal and without ``quiet``; yields the callback (a no-op when not shown)."""
    if quiet:
        yield lambda what, k, n: None
        return
    if console is None:
        from rich.console import Console

        console = Console(stderr=True)
    if not console.is_terminal:
        yield lambda what, k, n: None
        return
    from rich.progress import BarColumn, Progress, TextColumn

    elapsed, left = _columns()
    bar = Progress(TextColumn("{task.description}"), BarColumn(), elapsed(), left(),
                   console=console, transient=True, auto_refresh=auto_refresh)
    task = bar.add_task("", total=None)

    def on_step(what: str, k: int, n: int) -> None:
        bar.update(task, description=f"step {k + 1} of {n}: {what}", total=n, completed=k)
        if not auto_refresh:
            bar.refresh()

    with bar:
        yield on_step
