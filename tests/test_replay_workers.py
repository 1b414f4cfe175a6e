"""Replay in worker processes (survey.replay_workers, ``replay --jobs N``) changes nothing stored.

Checked: the database of ``--jobs 2`` equals that of ``--jobs 1`` row for row in every table
(times and the writer's pid aside), the JSON output is the same, the progress line still counts
hops, a recording failing mid-way gives the same one-line error with the earlier sweeps kept,
SIGTERM stops the run keeping what was stored and leaves no worker process behind, and the
serial path is taken where forking is unsafe. No timing is asserted (speed:
tests/benchmarks/bench_replay.py).
"""

from __future__ import annotations

import functools
import io
import json
import os
import re
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from rich.console import Console

from bandcensus.cli import main
from bandcensus.commands import _progress, replay
from survey.replay_workers import MAX_DEFAULT_WORKERS, ReplayMeasurer, default_workers, fork_is_safe
from test_recording import write_foreign

ROOT = Path(__file__).resolve().parents[1]
DEMO = sorted((ROOT / "recordings_demo" / "sigmf").glob("*.sigmf-meta"))
ENV = dict(os.environ, PYTHONPATH=str(ROOT))
_ESCAPES = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")
LINUX = sys.platform.startswith("linux")


def _rows_without_times(db: Path) -> dict[str, list]:
    """Every table's rows in id order, time columns left out and the writer's pid/host dropped."""
    conn = sqlite3.connect(db)
    try:
        tables = [t for (t,) in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
        out = {}
        for table in tables:
            columns = [c[1] for c in conn.execute(f"PRAGMA table_info({table})")]
            kept = [c for c in columns if not c.endswith("_utc") and c != "utc"]
            rows = [list(r) for r in conn.execute(f"SELECT {', '.join(kept)} FROM {table} ORDER BY rowid")]
            if table == "runs":
                where = kept.index("settings")
                for row in rows:
                    settings = json.loads(row[where])
                    settings.pop("writer")
                    row[where] = settings
            out[table] = rows
        return out
    finally:
        conn.close()


@pytest.fixture
def measurers(monkeypatch):
    """Records whether each replay measured in worker processes."""
    seen: list[bool] = []

    class Watched(ReplayMeasurer):
        def __enter__(self):
            entered = super().__enter__()
            seen.append(self.parallel)
            return entered

    monkeypatch.setattr(replay, "ReplayMeasurer", Watched)
    return seen


@pytest.mark.skipif(not LINUX, reason="worker processes are forked on Linux only in this check")
def test_workers_store_the_same_database_as_one_process(tmp_path, capsys, measurers):
    recordings = [str(p) for p in DEMO[:7]]
    outputs = {}
    for jobs in ("1", "2"):
        assert main(["replay", *recordings, "--db", str(tmp_path / f"j{jobs}.db"), "--jobs", jobs, "--json"]) == 0
        outputs[jobs] = json.loads(capsys.readouterr().out)
    assert measurers == [False, True]
    serial, parallel = _rows_without_times(tmp_path / "j1.db"), _rows_without_times(tmp_path / "j2.db")
    assert serial.keys() == parallel.keys() and len(serial["sweeps"]) == 7 and len(serial["channels"]) > 100
    for table in serial:
        assert serial[table] == parallel[table], table
    assert outputs["1"] == outputs["2"]
    # the sweeps are in the order given
    with sqlite3.connect(tmp_path / "j2.db") as conn:
        assert [r for (r,) in conn.execute("SELECT recording FROM sweeps ORDER BY id")] == recordings


@pytest.mark.skipif(not LINUX, reason="worker processes are forked on Linux only in this check")
def test_progress_line_counts_the_hops_measured_by_workers(tmp_path, capsys, monkeypatch, measurers):
    monkeypatch.chdir(tmp_path)
    buffer = io.StringIO()
    terminal = Console(file=buffer, force_terminal=True, width=120, color_system=None)
    monkeypatch.setattr(replay, "sweep_progress",
                        functools.partial(_progress.sweep_progress, console=terminal, auto_refresh=False))
    assert main(["replay", *map(str, DEMO[:3]), "--db", "p.db", "--jobs", "2"]) == 0
    assert measurers == [True]
    shown = _ESCAPES.sub("", buffer.getvalue())
    assert "sweep 1 of 3 [bare]" in shown and "sweep 3 of 3 [" in shown
    hops = [(int(a), int(b)) for a, b in re.findall(r"hop (\d+) of (\d+)", shown)]
    assert hops and max(a for a, _ in hops) == hops[0][1]  # every hop of a sweep is counted


def _noise_cf32(n: int, seed: int) -> np.ndarray:
    return (0.05 * np.random.default_rng(seed).standard_normal(2 * n)).astype("<f4")


def _disk_error(parent_pid: int) -> None:
    raise OSError(5, "Input/output error")  # the disk fails while the third file is read


def _killed_from_outside(parent_pid: int) -> None:
    if os.getpid() != parent_pid:  # the out-of-memory killer or a stray kill -9 ends the worker
        os.kill(os.getpid(), signal.SIGKILL)


@pytest.mark.skipif(not LINUX, reason="worker processes are forked on Linux only in this check")
@pytest.mark.parametrize("fault, said", [(_disk_error, "Input/output error"),
                                         (_killed_from_outside, "ended unexpectedly")])
def test_failure_mid_way_in_a_worker_is_one_line_and_keeps_earlier_sweeps(tmp_path, capsys, monkeypatch, measurers,
                                                                          fault, said):
    """A recording failing in a worker, or a worker ended from outside (the pool alone would wait
    for its answer for ever), stops the replay with one line naming the recording."""
    names = ["a-good", "b-good", "c-bad", "d-good"]
    metas = [write_foreign(tmp_path, name, "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}],
                           _noise_cf32(50_000, seed)) for seed, name in enumerate(names)]
    from survey.sources import recording as rec

    real_read = rec.RecordingSource.read
    parent = os.getpid()

    def failing_read(self, n):
        if "bad" in self.path.name:
            fault(parent)
        return real_read(self, n)

    monkeypatch.setattr(rec.RecordingSource, "read", failing_read)  # inherited by the forked workers
    db = tmp_path / "m.db"
    code = main(["replay", *map(str, metas), "--db", str(db), "--config", "x", "--band", "custom:97.8-98.2:100",
                 "--jobs", "2"])
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == 1 and "Traceback" not in err and len(lines) == 1 and lines[0].startswith("Error: "), err
    assert said in lines[0] and str(metas[2]) in lines[0]
    assert "the sweeps of the 2 earlier recording(s) are stored" in lines[0]
    assert measurers == [True]
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT recording, complete FROM sweeps ORDER BY id").fetchall() == [
        (str(metas[0]), 1), (str(metas[1]), 1)]
    assert conn.execute("SELECT status FROM runs").fetchone()[0] == "failed"
    conn.close()


def _children(pid: int) -> set[int]:
    found = set()
    for task in Path(f"/proc/{pid}/task").iterdir():
        found.update(int(c) for c in (task / "children").read_text().split())
    return found


def _running(pid: int) -> bool:
    try:
        return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


@pytest.mark.skipif(not LINUX, reason="reads /proc")
@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])
def test_stop_with_workers_keeps_stored_sweeps_and_leaves_no_process(tmp_path, signum):
    db = tmp_path / "rep.db"
    proc = subprocess.Popen([sys.executable, "-m", "bandcensus", "replay", *map(str, DEMO * 5), "--db", str(db),
                             "--quiet", "--fft-size", "512", "--jobs", "2"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV, cwd=tmp_path)
    workers: set[int] = set()
    try:
        deadline = time.monotonic() + 900.0  # only guards against a hang
        while time.monotonic() < deadline:
            assert proc.poll() is None, proc.communicate()
            workers |= _children(proc.pid)
            if db.exists() and workers:
                try:
                    with sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=5) as conn:
                        if conn.execute("SELECT COUNT(*) FROM sweeps").fetchone()[0] >= 2:
                            break
                except sqlite3.OperationalError:
                    pass
            time.sleep(0.05)
        proc.send_signal(signum)
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert f"stopped by {signal.Signals(signum).name}" in out and "Traceback" not in err
    assert len(workers) == 2
    assert not [pid for pid in workers if _running(pid)]  # the workers ended with the run
    conn = sqlite3.connect(db)
    completes = [c for (c,) in conn.execute("SELECT complete FROM sweeps ORDER BY id")]
    recordings = [r for (r,) in conn.execute("SELECT recording FROM sweeps ORDER BY id")]
    status = conn.execute("SELECT status FROM runs").fetchone()[0]
    conn.close()
    assert status == "stopped" and 2 <= len(completes) < len(DEMO) * 5
    assert all(completes[:-1])  # only the sweep in progress may be incomplete
    assert recordings == [str(p) for p in (DEMO * 5)[: len(recordings)]]  # in the order given


def test_serial_where_forking_is_unsafe(monkeypatch):
    jobs = [object(), object(), object()]
    assert ReplayMeasurer(jobs, 1).workers == 1
    assert ReplayMeasurer(jobs[:1], 4).workers == 1  # one recording: no pool
    monkeypatch.setattr(sys, "platform", "darwin")
    assert not fork_is_safe()
    with ReplayMeasurer(jobs, 2) as measurer:
        assert measurer.workers == 1 and not measurer.parallel


def test_default_workers_follow_the_cores_available():
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    assert default_workers() == max(1, min(cores, MAX_DEFAULT_WORKERS))
