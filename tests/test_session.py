"""One stop path for every capture command (survey.session): signals, dead writers, leftovers.

No wall-clock limits: a stop is checked by what was stored (the sweep in progress kept with
``complete = 0``, at most one hop measured after the signal, judged from the hops' own UTC
stamps) and a terminated switch command by its process being gone, not by seconds elapsed.
"""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from datetime import datetime, timezone
from pathlib import Path

import pytest

from bandcensus.cli import main
from fault_sources import NoiseSource
from survey.bandplan import parse_band
from survey.records import RunInfo, SweepSettings
from survey.session import (
    CaptureSession, StopRequest, mark_interrupted_runs, process_alive, remove_partials, shown_status,
    writer_gone,
)
from survey.store import SurveyStore, list_runs, open_for_reading
from survey.sweep import plan_for_source

ROOT = Path(__file__).resolve().parents[1]
SCENE = ROOT / "recordings_demo" / "quorrelby_hill.toml"
DEMO = sorted((ROOT / "recordings_demo" / "sigmf").glob("*.sigmf-meta"))
BAND = "custom:88-96:100"
SETTINGS = SweepSettings(band=BAND, dwell_s=0.003, settle_s=0.0, fft_size=512)
ENV = dict(os.environ, PYTHONPATH=str(ROOT))


def _utc_now() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _dead_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def _spawn(args, cwd):
    return subprocess.Popen([sys.executable, "-m", "bandcensus", *args], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=ENV, cwd=cwd)


def _wait_for_sweeps(db: Path, n: int, proc, limit_s: float = 900.0) -> None:
    """Wait until ``n`` sweeps are committed (the limit only guards against a hang)."""
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        assert proc.poll() is None, proc.communicate()
        if db.exists():
            try:
                conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=5)
                k = conn.execute("SELECT COUNT(*) FROM sweeps").fetchone()[0]
                conn.close()
                if k >= n:
                    return
            except sqlite3.OperationalError:
                pass
        time.sleep(0.05)
    pytest.fail("no sweep was committed")


def _check_stopped(db: Path, signal_utc: str, signame: str) -> list:
    conn = sqlite3.connect(db)
    try:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        status, ended = conn.execute("SELECT status, ended_utc FROM runs").fetchone()
        assert status == "stopped" and ended is not None
        (message,) = conn.execute("SELECT message FROM events WHERE kind = 'stop'").fetchone()
        assert signame in message
        after = conn.execute("SELECT COUNT(*) FROM hops WHERE started_utc > ?", (signal_utc,)).fetchone()[0]
        assert after <= 1, after  # the stop is taken between hops: at most the hop in flight
        return conn.execute("SELECT complete FROM sweeps ORDER BY id").fetchall()
    finally:
        conn.close()


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])
def test_simulate_stops_on_signal_keeping_the_sweep_in_progress(tmp_path, signum):
    db = tmp_path / "sim.db"
    proc = _spawn(["simulate", str(SCENE), "--db", str(db), "--config", "bare", "--sweeps", "400",
                   "--dwell-ms", "40", "--keep-iq", str(tmp_path / "iq")], tmp_path)
    try:
        _wait_for_sweeps(db, 1, proc)
        time.sleep(0.15)  # somewhere inside the next sweep
        signal_utc = _utc_now()
        proc.send_signal(signum)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert f"stopped by {signal.Signals(signum).name}" in out and "incomplete" in out
    completes = _check_stopped(db, signal_utc, signal.Signals(signum).name)
    assert len(completes) < 400 and all(c == (1,) for c in completes[:-1])
    assert not list((tmp_path / "iq").glob(".*.partial"))  # leftovers removed on the stop path
    assert "Aborted" not in err and "Traceback" not in err


@pytest.mark.parametrize("jobs", ["1", "2"])  # in this process; in two worker processes
def test_replay_stops_on_sigint_and_keeps_earlier_recordings(tmp_path, jobs):
    db = tmp_path / "rep.db"
    proc = _spawn(["replay", *map(str, DEMO * 5), "--db", str(db), "--quiet", "--fft-size", "512", "--jobs", jobs],
                  tmp_path)
    try:
        _wait_for_sweeps(db, 2, proc)
        signal_utc = _utc_now()
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert "stopped by SIGINT" in out
    conn = sqlite3.connect(db)
    n = conn.execute("SELECT COUNT(*) FROM sweeps").fetchone()[0]
    recs = {r[0] for r in conn.execute("SELECT recording FROM sweeps")}
    conn.close()
    assert 2 <= n < len(DEMO) * 5
    assert recs <= {str(p) for p in DEMO}  # sweeps.recording names the file measured


def test_sigterm_terminates_a_running_switch_command(tmp_path):
    db = tmp_path / "sw.db"
    marker = tmp_path / "switch.pid"
    switch = f"sh -c 'echo $$ > {marker}; exec sleep 300'"
    proc = _spawn(["scan", "--db", str(db), "--simulate-scene", str(SCENE), "--alternate", "bare,preamp-peaked",
                   "--switch", f"bare={switch}", "--band", BAND, "--dwell-ms", "5", "--quiet"], tmp_path)
    try:
        deadline = time.monotonic() + 120
        while not (marker.exists() and marker.read_text().strip()):
            assert proc.poll() is None and time.monotonic() < deadline, proc.communicate()
            time.sleep(0.05)
        child = int(marker.read_text())
        assert process_alive(child)
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert "stopped by SIGTERM" in out
    assert not process_alive(child)  # terminated, not waited out for its 300 s
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT status FROM runs").fetchone()[0] == "stopped"
    conn.close()


def test_ctrl_c_reaching_the_switch_command_too_is_a_stop_not_a_failure(tmp_path):
    """Ctrl-C in a terminal reaches the whole process group: the switch dies of it as well."""
    from survey.schedule import run_switch_command

    stop = StopRequest()
    script = tmp_path / "die.sh"
    script.write_text("#!/bin/sh\nkill -INT $PPID\nkill -INT $$\nsleep 5\n")  # as a terminal's Ctrl-C does
    script.chmod(0o755)
    with stop.installed():
        assert run_switch_command(str(script), "bare", 30.0, stop=stop) is False
    assert stop.signal_name == "SIGINT"
    lone = tmp_path / "lone.sh"
    lone.write_text("#!/bin/sh\nkill -INT $$\nsleep 5\n")  # the command dies alone: a failure
    lone.chmod(0o755)
    with pytest.raises(Exception, match="exited with status"):
        run_switch_command(str(lone), "bare", 30.0, stop=StopRequest())


def test_dead_writer_is_shown_interrupted_and_marked_by_the_next_writer(tmp_path):
    db = tmp_path / "k.db"
    iq = tmp_path / "iq"
    proc = _spawn(["simulate", str(SCENE), "--db", str(db), "--config", "bare", "--sweeps", "400",
                   "--dwell-ms", "40", "--keep-iq", str(iq)], tmp_path)
    _wait_for_sweeps(db, 1, proc)
    time.sleep(0.1)
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=60)
    conn = open_for_reading(db)
    (run,) = list_runs(conn)
    conn.close()
    assert run["status"] == "running" and shown_status(run) == "interrupted"
    assert main(["runs", "--db", str(db), "--json"]) == 0
    # the next writer marks it and removes the dead writer's unfinished IQ files
    partial = iq / f".x.sigmf-data.{proc.pid}-abc.partial"
    partial.write_bytes(b"\0" * 10)
    assert main(["simulate", str(SCENE), "--db", str(db), "--config", "bare", "--band", BAND,
                 "--dwell-ms", "5", "--keep-iq", str(iq), "--json"]) == 0
    conn = open_for_reading(db)
    statuses = [r["status"] for r in list_runs(conn)]
    kinds = [r[0] for r in conn.execute("SELECT kind FROM events")]
    conn.close()
    assert statuses == ["interrupted", "finished"] and "interrupted" in kinds
    assert not partial.exists()


def test_writer_gone_rules():
    host = __import__("socket").gethostname()
    assert writer_gone({"writer": {"pid": _dead_pid(), "host": host}})
    assert not writer_gone({"writer": {"pid": os.getpid(), "host": host}})
    assert not writer_gone({"writer": {"pid": _dead_pid(), "host": host + "-elsewhere"}})  # cannot know
    assert not writer_gone({})
    assert not writer_gone("not a dict")


def test_remove_partials_spares_live_writers(tmp_path):
    live = tmp_path / f".a.sigmf-data.{os.getppid()}-1f.partial"
    dead = tmp_path / f".b.sigmf-data.{_dead_pid()}-2e.partial"
    other = tmp_path / "keep.partial"
    for p in (live, dead, other):
        p.write_bytes(b"x")
    assert remove_partials(tmp_path) == 1
    assert live.exists() and other.exists() and not dead.exists()


class _StopAfter(NoiseSource):
    def __init__(self, stop, after_reads):
        super().__init__()
        self.stop, self.after, self.reads = stop, after_reads, 0

    def read(self, n):
        self.reads += 1
        if self.reads == self.after:
            self.stop.set()
        return super().read(n)


def test_session_stores_the_sweep_in_progress_incomplete(tmp_path):
    store = SurveyStore(tmp_path / "x.db")
    stop = threading.Event()
    source = _StopAfter(stop, 3)
    plan = plan_for_source(parse_band(BAND), source, SETTINGS)
    with CaptureSession(store, RunInfo("simulated", "noise", "test", {}), stop=stop, install_signals=False) as s:
        s.record(source, plan, SETTINGS, "A", "antenna")
    assert s.status == "stopped" and s.incomplete == 1 and s.stored == 0
    assert source.reads == 3 < len(plan.hops)
    conn = store.conn
    assert conn.execute("SELECT complete, (SELECT COUNT(*) FROM hops) FROM sweeps").fetchone() == (0, 3)
    settings = json.loads(conn.execute("SELECT settings FROM runs").fetchone()[0])
    assert settings["writer"]["pid"] == os.getpid()
    store.close()


def test_session_marks_failure_and_keeps_the_error(tmp_path):
    store = SurveyStore(tmp_path / "f.db")
    with pytest.raises(ZeroDivisionError):
        with CaptureSession(store, RunInfo("simulated", "noise", "test", {}), install_signals=False):
            1 / 0
    assert store.conn.execute("SELECT status FROM runs").fetchone()[0] == "failed"
    assert mark_interrupted_runs(store) == []
    store.close()
