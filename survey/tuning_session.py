"""A tuning session: fast repeated sweeps of a narrow span while someone aligns a preamp.

Each refresh is one sweep of the target span plus a margin, on the channel raster of the span
(200 kHz channels, 200 kHz apart, so the points are independent), with a short dwell, through the
same sweep engine (:func:`survey.sweep.run_sweep`) as a survey. The session hands every sweep to
a callback and keeps a thinned copy in the database as a run of its own: one sweep per
``store_every_s`` of session time (its hop and channel rows), so "before" and "after" alignment
can be compared later with the usual commands.

Default settings, chosen for at least two refreshes a second over 88-100 MHz at 2.4 MS/s: dwell
20 ms, FFT 512 points (4.7 kHz bins, about 93 averages), settle 13.65 ms (32 768 samples, the
least the live receiver discards after a retune). Over 86.8-101.2 MHz that is 12 hops, 0.404 s of
receiver time per refresh, 2.5 refreshes a second. Each 200 kHz point then has a radiometer
precision of ``1/sqrt(B tau) = 1/sqrt(200e3 * 0.020) = 1.6 %`` (0.069 dB) per refresh
(Dicke 1946) for an ideal filter; measured on simulated IQ, 0.094 dB (the Hann window's cost in a
band integral; see the README, "Aligning a preamp").

Stopping: :class:`StopFlag` (the capture session's :class:`survey.session.StopRequest`) is a :class:`threading.Event` that SIGINT/SIGTERM set (the handler
does nothing else); the loop checks it between hops and ends the session cleanly, storing
nothing partial. It has the shape of the stop request of the survey schedule, so the two can
be folded into one later.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, replace
from typing import Callable

from survey.bandplan import custom_band, plan_hops
from survey.errors import PlanError
from survey.records import HopPlan, RunInfo, SweepResult, SweepSettings
from survey.session import StopRequest
from survey.sources.base import IQSource
from survey.store import SurveyStore
from survey.sweep import run_sweep

#: Channel raster and bandwidth of the tuning curve, Hz: adjacent points do not overlap.
CURVE_STEP_HZ = 200_000
#: Default margin measured beyond each end of the target, Hz.
DEFAULT_MARGIN_HZ = 1_200_000
#: Default tuning settings (see the module notes for the rate and precision they give).
DEFAULT_DWELL_S = 0.020
DEFAULT_FFT_SIZE = 512
DEFAULT_SETTLE_S = 32_768 / 2.4e6


#: The tuning loop stops as every capture command does: SIGINT/SIGTERM only set this flag.
StopFlag = StopRequest


def tuning_settings(sample_rate_hz: float = 2.4e6, dwell_s: float = DEFAULT_DWELL_S,
                    fft_size: int = DEFAULT_FFT_SIZE, settle_s: float = DEFAULT_SETTLE_S,
                    gain_db: float | None = None, ppm: int = 0) -> SweepSettings:
    """Sweep settings of a tuning session (band label ``tune``; 200 kHz channels)."""
    return SweepSettings(band="tune", channel_bw_hz=float(CURVE_STEP_HZ), sample_rate_hz=float(sample_rate_hz),
                         dwell_s=float(dwell_s), settle_s=float(settle_s), fft_size=int(fft_size),
                         gain_db=gain_db, ppm=int(ppm))


def tuning_plan(target_hz: tuple[float, float], settings: SweepSettings,
                margin_hz: float = DEFAULT_MARGIN_HZ) -> HopPlan:
    """Hops covering the target plus ``margin_hz`` on each side, on a 200 kHz channel raster.

    The raster starts at the target's lower edge rounded down to 100 kHz minus the margin.
    """
    lo, hi = float(target_hz[0]), float(target_hz[1])
    if not (0 < lo < hi) or margin_hz < 0:
        raise PlanError(f"target {lo / 1e6:g}-{hi / 1e6:g} MHz with margin {margin_hz / 1e6:g} MHz is not a band; "
                        "give START-STOP such as 88-100")
    start = int((lo - margin_hz) // 100_000 * 100_000)
    stop = int(-(-(hi + margin_hz) // 100_000) * 100_000)
    if start <= settings.sample_rate_hz / 2:
        raise PlanError(f"target {lo / 1e6:g}-{hi / 1e6:g} MHz reaches down to the sample rate; tune a higher band")
    band = custom_band(start, stop, CURVE_STEP_HZ, name="tune")
    return plan_hops(band.channels_hz, sample_rate_hz=settings.sample_rate_hz,
                     usable_fraction=settings.usable_fraction, dc_guard_hz=settings.dc_guard_hz,
                     channel_bw_hz=settings.channel_bw_hz)


@dataclass(frozen=True)
class TuneSweep:
    """One refresh handed to the callback: session time (s, on the source's clock), the sweep,
    its number (1-based) and the id it was stored under (None when thinned out)."""

    t_s: float
    refresh: int
    result: SweepResult
    stored_sweep_id: int | None


@dataclass(frozen=True)
class TuneSummary:
    """How a session ended: refreshes made, sweeps stored, session time, and why it stopped."""

    run_id: int
    refreshes: int
    sweeps_stored: int
    duration_s: float
    status: str
    stop_signal: str | None


class SessionClock:
    """Session time in seconds: the source's own sample clock when it has one (``time_s``,
    the simulated source), else the monotonic clock. ``pace`` makes a simulated session keep
    step with the wall clock (a live view of a simulation), and is a no-op for a receiver."""

    def __init__(self, source: IQSource, pace: bool):
        self._source = source
        self._sim = hasattr(source, "time_s")
        self._t0_source = float(getattr(source, "time_s", 0.0))
        self._t0_wall = time.monotonic()
        self._pace = pace and self._sim

    def now_s(self) -> float:
        """Seconds since the session started."""
        if self._sim:
            return float(self._source.time_s) - self._t0_source
        return time.monotonic() - self._t0_wall

    def pace(self, stop: threading.Event) -> None:
        """Wait until the wall clock has caught up with the simulated clock (or a stop)."""
        if self._pace:
            ahead = self.now_s() - (time.monotonic() - self._t0_wall)
            if ahead > 0:
                stop.wait(ahead)


def run_tuning(
    store: SurveyStore,
    source: IQSource,
    plan: HopPlan,
    settings: SweepSettings,
    configuration: str,
    input: str,
    run_info: RunInfo,
    on_sweep: Callable[[TuneSweep], None],
    stop: threading.Event,
    *,
    duration_s: float | None = None,
    store_every_s: float = 1.0,
    pace: bool = True,
    before_first: Callable[[int], None] | None = None,
) -> TuneSummary:
    """Sweep ``plan`` again and again until ``stop`` is set or ``duration_s`` of session time passed.

    Parameters
    ----------
    store : SurveyStore
        Where the session's run and its thinned sweeps go.
    on_sweep : callable
        Called after every complete sweep with a :class:`TuneSweep` (display, JSON lines...).
    stop : threading.Event
        Checked between hops; a sweep cut short is dropped (never stored, never shown).
    duration_s : float, optional
        Session time after which the session ends by itself (the source's clock).
    store_every_s : float
        One sweep is stored per this much session time (the first one always; 0 stores all).
    pace : bool
        Keep a simulated session in step with the wall clock.
    before_first : callable, optional
        Called with the run id before the first tuning sweep (e.g. to measure a reference into it).
    """
    run_id = store.begin_run(run_info)
    clock = SessionClock(source, pace)
    refreshes = stored = 0
    last_stored_s: float | None = None
    status = "failed"
    try:
        if before_first is not None:
            before_first(run_id)
        clock = SessionClock(source, pace)
        while not stop.is_set():
            result = run_sweep(source, plan, settings, configuration, input, should_stop=stop.is_set)
            if not result.complete:
                break
            refreshes += 1
            t_s = clock.now_s()
            sweep_id = None
            if last_stored_s is None or t_s - last_stored_s >= store_every_s - 1e-9:
                sweep_id = store.write_sweep(run_id, replace(result, notes=f"tune refresh {refreshes}"))
                stored += 1
                last_stored_s = t_s
            history = getattr(source, "history", None)
            if isinstance(history, list) and len(history) > 4096:
                del history[:-256]  # the simulated source's log of reads: keep it bounded
            on_sweep(TuneSweep(t_s, refreshes, result, sweep_id))
            if duration_s is not None and t_s >= duration_s:
                break
            clock.pace(stop)
        status = "stopped" if stop.is_set() else "finished"
    finally:
        store.end_run(run_id, status)
    return TuneSummary(run_id, refreshes, stored, clock.now_s(), status, getattr(stop, "signal_name", None))
