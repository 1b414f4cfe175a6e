"""Repeated sweeps: alternation, switch commands, bias tee per label, clean stop, clock jumps."""

from __future__ import annotations

import os
import signal
import sys
import time
from datetime import datetime, timedelta, timezone

import pytest

from fault_sources import FaultFactory, NoiseSource
from survey.bandplan import parse_band
from survey.errors import ScheduleError
from survey.records import RunInfo, SweepSettings
from survey.schedule import StopRequest, parse_duration_s, parse_until, run_schedule
from survey.store import SurveyStore, read_events
from survey.watchdog import WatchdogSettings, WatchedSource

SETTINGS = SweepSettings(band="custom:88-96:100", dwell_s=0.003, settle_s=0.0, fft_size=512)
BAND = parse_band("custom:88-96:100")
INFO = RunInfo("simulated", "white noise", "test", {})


@pytest.fixture
def store(tmp_path):
    s = SurveyStore(tmp_path / "s.db")
    yield s
    s.close()


def _rows(store):
    return store.conn.execute(
        "SELECT configuration, complete, (SELECT COUNT(*) FROM hops h WHERE h.sweep_id = s.id),"
        " (SELECT COUNT(*) FROM channels c WHERE c.sweep_id = s.id) FROM sweeps s ORDER BY sequence"
    ).fetchall()


def test_alternating_labels_are_interleaved(store):
    summary = run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["bare", "preamp"],
                           run_info=INFO, sweeps=5)
    rows = _rows(store)
    assert [r[0] for r in rows] == ["bare", "preamp", "bare", "preamp", "bare"]
    assert all(r[1] == 1 for r in rows) and len({(r[2], r[3]) for r in rows}) == 1
    assert summary.by_configuration == {"bare": 3, "preamp": 2} and summary.status == "finished"
    assert store.conn.execute("SELECT status FROM runs").fetchone()[0] == "finished"


def test_switch_command_runs_without_shell_with_label(store, tmp_path):
    log = tmp_path / "switch.log"
    trap = tmp_path / "trap"
    script = "import os,sys; open(sys.argv[1],'a').write(os.environ['BANDCENSUS_CONFIGURATION']+' '+sys.argv[2]+'\\n')"
    cmd = f"{sys.executable} -c \"{script}\" {log} ';touch {trap}'"
    run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["A", "B"], run_info=INFO, sweeps=4,
                 switch_commands={"A": cmd, "B": cmd})
    assert log.read_text().split("\n")[:4] == [f"A ;touch {trap}", f"B ;touch {trap}"] * 2
    assert not trap.exists()  # the ';' reached the program as text: no shell ran
    kinds = [e["kind"] for e in read_events(store.conn)]
    assert kinds.count("switch") == 4


def test_failing_switch_command_stops_the_run(store):
    cmd = f"{sys.executable} -c \"import sys; sys.stderr.write('relay not found'); sys.exit(3)\""
    with pytest.raises(ScheduleError, match="exited with status 3: relay not found"):
        run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["A", "B"], run_info=INFO,
                     sweeps=4, switch_commands={"B": cmd})
    assert [r[0] for r in _rows(store)] == ["A"]  # the committed sweep stays
    assert store.conn.execute("SELECT status FROM runs").fetchone()[0] == "failed"


def test_switch_command_timeout(store):
    # The timeout path is proven by its message and by the command's process being gone
    # (it would sleep 300 s); no wall-clock bound.
    marker = store.path.with_name("slow.pid")
    cmd = f"{sys.executable} -c \"import os, time; open('{marker}', 'w').write(str(os.getpid())); time.sleep(300)\""
    with pytest.raises(ScheduleError, match="did not finish within 0.3 s"):
        run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["A"], run_info=INFO,
                     sweeps=1, switch_commands={"A": cmd}, switch_timeout_s=0.3)
    if marker.exists() and marker.read_text():
        from survey.session import process_alive

        assert not process_alive(int(marker.read_text()))


def test_bias_tee_only_for_chosen_labels(store):
    calls = []

    class Source(NoiseSource):
        def set_bias_tee(self, enabled):
            calls.append(enabled)

    run_schedule(store, Source(), BAND, SETTINGS, configurations=["bare", "powered"], run_info=INFO,
                 sweeps=4, bias_tee_labels=["powered"])
    assert calls == [False, True, False, True]


class JumpingClock:
    """Real monotonic clock; the wall clock jumps forward by ``jump_s`` after ``after`` reads."""

    def __init__(self, jump_s, after):
        self.jump_s, self.after, self.reads = jump_s, after, 0

    def monotonic(self):
        return time.monotonic()

    def wall(self):
        self.reads += 1
        return time.time() + (self.jump_s if self.reads > self.after else 0.0)


def test_clock_jump_recorded_once(store):
    summary = run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["A"], run_info=INFO,
                           sweeps=4, clock=JumpingClock(3600.0, after=3))
    events = [e for e in read_events(store.conn) if e["kind"] == "clock-jump"]
    assert len(events) == 1 and "+3600" in events[0]["message"] and summary.clock_jumps == 1
    assert summary.sweeps_stored == 4


def test_no_clock_jump_below_threshold(store):
    summary = run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["A"], run_info=INFO,
                           sweeps=3, clock=JumpingClock(1.5, after=2))
    assert summary.clock_jumps == 0


def test_stop_between_hops_marks_sweep_incomplete(store):
    stop = StopRequest()

    def progress(p):
        if p.event == "hop" and p.sweep_number == 2 and p.hop_index == 1:
            stop.set()

    summary = run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["A"], run_info=INFO,
                           sweeps=10, stop=stop, progress=progress)
    rows = _rows(store)
    assert [r[1] for r in rows] == [1, 0] and rows[1][2] == 2 < rows[0][2]
    assert summary.status == "stopped" and summary.sweeps_stored == 1 and summary.sweeps_incomplete == 1
    assert any(e["kind"] == "stop" for e in read_events(store.conn))


def test_signal_handler_only_sets_the_flag():
    stop = StopRequest()
    before = signal.getsignal(signal.SIGTERM)
    with stop.installed():
        os.kill(os.getpid(), signal.SIGTERM)
        deadline = time.monotonic() + 2
        while not stop.is_set() and time.monotonic() < deadline:
            time.sleep(0.01)
    assert stop.is_set() and stop.signal_name == "SIGTERM"
    assert signal.getsignal(signal.SIGTERM) is before


def _calibrated_interval_s() -> float:
    """An interval comfortably longer than one sweep on this machine now: three times the
    slowest of three calibration sweeps, at least 0.3 s (so the test's bounds scale with load)."""
    from survey.sweep import plan_for_source, run_sweep

    src = NoiseSource()
    plan = plan_for_source(BAND, src, SETTINGS)
    took = []
    for _ in range(3):
        t0 = time.monotonic()
        run_sweep(src, plan, SETTINGS, "A", "antenna")
        took.append(time.monotonic() - t0)
    return max(0.3, 3.0 * max(took))


def test_duration_with_interval(store):
    every = _calibrated_interval_s()
    progress = []
    summary = run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["A"], run_info=INFO,
                           duration_s=2.17 * every, every_s=every, progress=progress.append)
    assert summary.sweeps_stored == 3  # starts at 0, 1 and 2 intervals
    starts = [datetime.fromisoformat(r[0].replace("Z", "+00:00"))
              for r in store.conn.execute("SELECT started_utc FROM sweeps ORDER BY sequence")]
    assert all((b - a).total_seconds() > 0.66 * every for a, b in zip(starts, starts[1:]))
    waits = [p for p in progress if p.event == "wait"]
    assert waits and all(p.next_sweep_in_s <= every + 1e-6 and p.time_left_s is not None for p in waits)
    done = [p for p in progress if p.event == "sweep"]
    assert done[-1].last_sweep_s > 0 and done[-1].noise_floor_dbfs_hz is not None


def test_receiver_fault_drops_sweep_and_records_gap(store, tmp_path):
    src = WatchedSource(FaultFactory(str(tmp_path / "state"), "unplug", at_read=30),
                        WatchdogSettings(stall_timeout_s=1.0, backoff_initial_s=0.02))
    summary = run_schedule(store, src, BAND, SETTINGS, configurations=["A", "B"], run_info=INFO, sweeps=4)
    src.close()
    rows = _rows(store)
    assert [r[0] for r in rows] == ["A", "B", "A", "B"] and all(r[1] == 1 for r in rows)
    assert len({r[2] for r in rows}) == 1  # every stored sweep has all its hops
    kinds = [e["kind"] for e in read_events(store.conn)]
    assert kinds.count("gap") == 1 and kinds.count("receiver-error") == 1
    assert summary.sweeps_dropped == 1


def test_parse_duration():
    assert parse_duration_s("8h") == 28_800 and parse_duration_s("5m") == 300
    assert parse_duration_s("1h30m") == 5_400 and parse_duration_s("2.5h") == 9_000
    for bad in ("", "8", "8x", "h", "0m", "-5m"):
        with pytest.raises(ScheduleError):
            parse_duration_s(bad)


def test_parse_until_next_occurrence():
    tz = timezone(timedelta(hours=2))
    now = datetime(2026, 3, 1, 7, 0, tzinfo=tz)
    assert parse_until("06:30", now) == datetime(2026, 3, 2, 6, 30, tzinfo=tz)
    assert parse_until("23:59", now) == datetime(2026, 3, 1, 23, 59, tzinfo=tz)
    assert parse_until("07:00", now) == datetime(2026, 3, 2, 7, 0, tzinfo=tz)
    for bad in ("6.30", "24:00", "06:60", "soon"):
        with pytest.raises(ScheduleError, match="HH:MM"):
            parse_until(bad, now)


def test_bad_labels_refused(store):
    with pytest.raises(ScheduleError, match="not among the configurations"):
        run_schedule(store, NoiseSource(), BAND, SETTINGS, configurations=["A"], run_info=INFO,
                     switch_commands={"C": "true"})
