"""Crash safety of a survey: kill -9 at random moments, SIGTERM, disk full, busy database, readers.

Mirrors how SQLite tests itself (sqlite.org/testing.html, "crash tests" and "I/O error
tests"): kill a writer at random points, then check ``PRAGMA integrity_check`` and the rule
"completed, or completely rolled back": every stored sweep is complete with all its hop and
channel rows.
"""

from __future__ import annotations

import functools
import multiprocessing as mp
import os
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest

from bandcensus.cli import main
from fault_sources import NoiseSource
from survey.bandplan import parse_band
from survey.errors import StoreError
from survey.records import RunInfo, SweepSettings
from survey.schedule import run_schedule
from survey.store import SurveyStore, list_sweeps, open_for_reading, read_channel_matrix
from survey.sweep import plan_for_source

ROOT = Path(__file__).resolve().parents[1]
SCENE = ROOT / "recordings_demo" / "quorrelby_hill.toml"
BAND_TEXT = "custom:88-96:100"
SETTINGS = SweepSettings(band=BAND_TEXT, dwell_s=0.003, settle_s=0.0, fft_size=512)
INFO = RunInfo("simulated", "white noise", "test", {})


@functools.lru_cache(maxsize=1)
def _expected_counts() -> tuple[int, int]:
    plan = plan_for_source(parse_band(BAND_TEXT), NoiseSource(), SETTINGS)
    return len(plan.hops), len(plan.channels_hz)


def _survey_forever(db: str, seed: int) -> None:
    store = SurveyStore(db)
    run_schedule(store, NoiseSource(seed=seed), parse_band(BAND_TEXT), SETTINGS, configurations=["A", "B"],
                 run_info=INFO, sweeps=100_000)


def _check_all_complete(db: Path) -> int:
    n_hops, n_channels = _expected_counts()
    conn = sqlite3.connect(db)
    try:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        rows = conn.execute(
            "SELECT s.id, s.complete, (SELECT COUNT(*) FROM hops h WHERE h.sweep_id = s.id),"
            " (SELECT COUNT(*) FROM channels c WHERE c.sweep_id = s.id),"
            " (SELECT n_channels FROM channel_vectors v WHERE v.sweep_id = s.id) FROM sweeps s"
        ).fetchall()
    finally:
        conn.close()
    for sid, complete, hops, channels, vec in rows:
        assert (complete, hops, channels, vec) == (1, n_hops, n_channels, n_channels), sid
    return len(rows)


def _committed(db: Path) -> int:
    try:
        conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=5)
        try:
            return conn.execute("SELECT COUNT(*) FROM sweeps").fetchone()[0]
        finally:
            conn.close()
    except sqlite3.Error:
        return 0


def test_kill_9_at_random_moments(tmp_path):
    db = tmp_path / "crash.db"
    SurveyStore(db).close()
    rng = np.random.default_rng(20260601)
    ctx = mp.get_context("fork")
    killed_running = 0
    for trial in range(24):
        before = _committed(db)
        proc = ctx.Process(target=_survey_forever, args=(str(db), trial))
        proc.start()
        # Kill at a random moment after this writer's first commit (waiting on the database,
        # not on the clock, so a loaded machine changes only how long the test takes).
        hang_guard = time.monotonic() + 300
        while _committed(db) <= before and proc.is_alive() and time.monotonic() < hang_guard:
            time.sleep(0.005)
        time.sleep(float(rng.uniform(0.0, 0.1)))
        alive = proc.is_alive()
        os.kill(proc.pid, signal.SIGKILL)
        proc.join(5)
        killed_running += alive and proc.exitcode == -signal.SIGKILL
        _check_all_complete(db)
    assert killed_running == 24  # the kills really struck running surveys
    stored = _check_all_complete(db)
    assert stored >= 24  # and every writer had committed before it was killed
    # the killed runs stay 'running' until the next writer marks them interrupted; it still works
    store = SurveyStore(db)
    run_schedule(store, NoiseSource(), parse_band(BAND_TEXT), SETTINGS, configurations=["A"], run_info=INFO, sweeps=1)
    assert store.integrity_ok()
    statuses = [r[0] for r in store.conn.execute("SELECT status FROM runs ORDER BY id")]
    store.close()
    assert statuses[-1] == "finished" and set(statuses[:-1]) == {"interrupted"}


def test_sigterm_stops_between_hops_with_summary(tmp_path):
    """The stop is judged by what was stored, not by seconds: no more than the hop in flight
    may start after the signal (hop UTC stamps against the signal's UTC time)."""
    db = tmp_path / "s.db"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen(
        [sys.executable, "-m", "bandcensus", "scan", "--db", str(db), "--simulate-scene", str(SCENE),
         "--config", "bare", "--every", "1s", "--band", BAND_TEXT, "--dwell-ms", "20"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env, cwd=tmp_path,
    )
    try:
        deadline = time.monotonic() + 60
        for line in proc.stderr:
            if line.startswith("sweep 1 "):
                break
            assert time.monotonic() < deadline
        time.sleep(0.3)
        signal_utc = datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert "stopped by SIGTERM" in out and "stored" in out and "elapsed" in out
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT status FROM runs").fetchone()[0] == "stopped"
    assert conn.execute("SELECT COUNT(*) FROM events WHERE kind = 'stop'").fetchone()[0] == 1
    assert conn.execute("SELECT COUNT(*) FROM hops WHERE started_utc > ?", (signal_utc,)).fetchone()[0] <= 1
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_disk_full_via_max_page_count(tmp_path):
    db = tmp_path / "full.db"
    store = SurveyStore(db)

    def progress(p):
        if p.event == "sweep" and p.sweep_number == 2:
            pages = store.conn.execute("PRAGMA page_count").fetchone()[0]
            store.conn.execute(f"PRAGMA max_page_count = {pages + 2}")

    with pytest.raises(StoreError) as err:
        run_schedule(store, NoiseSource(), parse_band(BAND_TEXT), SETTINGS, configurations=["A"], run_info=INFO,
                     sweeps=50, progress=progress)
    assert "full" in str(err.value) and "free disk space" in str(err.value) and "\n" not in str(err.value)
    store.close()
    assert _check_all_complete(db) == 2


@pytest.fixture
def tiny_fs(tmp_path):
    mount = tmp_path / "tiny"
    mount.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=2m", "tmpfs", str(mount)], capture_output=True)
    if done.returncode != 0:
        pytest.skip("cannot mount a tmpfs here (needs root)")
    yield mount
    subprocess.run(["umount", "-l", str(mount)], capture_output=True)


def test_disk_full_on_tiny_filesystem_through_cli(tiny_fs, capsys):
    db = tiny_fs / "s.db"
    rc = main(["scan", "--db", str(db), "--source-factory", "fault_sources:NoiseSource", "--config", "bare",
               "--sweeps", "100000", "--band", "europe", "--dwell-ms", "3", "--settle-ms", "0", "--quiet"])
    out, err = capsys.readouterr()
    assert rc == 1
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: cannot write to") and "free disk space" in lines[0]
    conn = sqlite3.connect(db)
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    rows = conn.execute("SELECT s.id, (SELECT COUNT(*) FROM hops h WHERE h.sweep_id = s.id),"
                        " (SELECT COUNT(*) FROM channels c WHERE c.sweep_id = s.id), complete FROM sweeps s").fetchall()
    assert len(rows) >= 5 and len({(r[1], r[2], r[3]) for r in rows}) == 1 and rows[0][3] == 1


def test_busy_database_is_retried(tmp_path):
    db = tmp_path / "busy.db"
    store = SurveyStore(db, busy_timeout_s=0.1, busy_retries=6)
    other = sqlite3.connect(db, isolation_level=None, check_same_thread=False)
    other.execute("BEGIN IMMEDIATE")  # another writer holds the database for 0.5 s
    threading.Timer(0.5, lambda: other.execute("COMMIT")).start()
    summary = run_schedule(store, NoiseSource(), parse_band(BAND_TEXT), SETTINGS, configurations=["A"],
                           run_info=INFO, sweeps=1)
    assert summary.sweeps_stored == 1
    store.close()
    time.sleep(0.1)
    other.close()


def test_database_locked_for_good_is_one_clear_error(tmp_path):
    db = tmp_path / "locked.db"
    SurveyStore(db).close()
    other = sqlite3.connect(db, isolation_level=None, check_same_thread=False)
    other.execute("BEGIN IMMEDIATE")
    store = SurveyStore(db, busy_timeout_s=0.05, busy_retries=1)
    with pytest.raises(StoreError, match="locked by another writer"):
        run_schedule(store, NoiseSource(), parse_band(BAND_TEXT), SETTINGS, configurations=["A"], run_info=INFO,
                     sweeps=1)
    other.execute("ROLLBACK")
    other.close()
    store.close()


def test_reader_reads_while_a_scan_writes(tmp_path):
    db = tmp_path / "live.db"
    SurveyStore(db).close()
    proc = mp.get_context("fork").Process(target=_survey_forever, args=(str(db), 7))
    proc.start()
    try:
        counts = []
        hang_guard = time.monotonic() + 300  # only against a hang: the loop ends on what it sees
        while (len(counts) < 30 or counts[-1] < 3 or len(set(counts)) <= 2) and time.monotonic() < hang_guard:
            conn = open_for_reading(db)
            sweeps = list_sweeps(conn)
            if sweeps:
                m = read_channel_matrix(conn, [s.id for s in sweeps])
                assert m.power_dbfs.shape[0] == len(sweeps) and np.isfinite(m.power_dbfs).all()
            counts.append(len(sweeps))
            conn.close()
            time.sleep(0.02)
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.join(5)
    assert counts == sorted(counts) and counts[-1] >= 3  # the reader saw sweeps arrive, never blocked
    assert len(set(counts)) > 2
