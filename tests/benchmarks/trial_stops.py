"""Stop and crash trials of the capture commands (a soak script, not a test; asserts nothing).

Run: ``PYTHONPATH=. python tests/benchmarks/trial_stops.py [trials_per_kind [command ...]]``
(default 10 trials each of simulate, replay and scan).
For each of simulate, replay and scan, and each of SIGTERM, SIGINT and SIGKILL, a command is
started, signalled at a random moment after its first committed sweep, and the outcome checked:

* SIGTERM/SIGINT: exit 0, run ``stopped``, a ``stop`` event, at most one hop stamped after the
  signal, every complete sweep whole, no ``*.partial`` left, ``PRAGMA integrity_check`` ok.
* SIGKILL: integrity ok, every complete sweep whole; the next writer marks the run
  ``interrupted`` and removes the dead writer's ``*.partial`` files.

Prints one line per kind with the count of trials that met every check.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
SCENE = ROOT / "recordings_demo" / "quorrelby_hill.toml"
DEMO = sorted((ROOT / "recordings_demo" / "sigmf").glob("*.sigmf-meta"))
ENV = dict(os.environ, PYTHONPATH=str(ROOT))
BAND = "custom:88-96:100"


def _args(kind: str, db: Path, iq: Path) -> list[str]:
    if kind == "simulate":
        return ["simulate", str(SCENE), "--db", str(db), "--config", "bare", "--sweeps", "500", "--band", BAND,
                "--dwell-ms", "20", "--keep-iq", str(iq)]
    if kind == "replay":
        return ["replay", *map(str, DEMO * 10), "--db", str(db), "--quiet", "--fft-size", "512"]
    return ["scan", "--db", str(db), "--simulate-scene", str(SCENE), "--alternate", "bare,preamp-peaked",
            "--band", BAND, "--dwell-ms", "20", "--for", "10m", "--quiet", "--keep-iq", str(iq)]


def _sweeps(db: Path) -> int:
    try:
        conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=5)
        try:
            return conn.execute("SELECT COUNT(*) FROM sweeps").fetchone()[0]
        finally:
            conn.close()
    except sqlite3.Error:
        return 0


def _whole(conn) -> bool:
    rows = conn.execute("SELECT s.id, (SELECT COUNT(*) FROM hops h WHERE h.sweep_id = s.id),"
                        " (SELECT COUNT(*) FROM channels c WHERE c.sweep_id = s.id),"
                        " (SELECT n_channels FROM channel_vectors v WHERE v.sweep_id = s.id)"
                        " FROM sweeps s WHERE s.complete = 1").fetchall()
    return all(hops > 0 and ch == vec for _, hops, ch, vec in rows)


def trial(kind: str, signum: int, folder: Path, rng: random.Random) -> bool:
    db, iq = folder / "t.db", folder / "iq"
    proc = subprocess.Popen([sys.executable, "-m", "bandcensus", *_args(kind, db, iq)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=ENV)
    deadline = time.monotonic() + 120
    while _sweeps(db) < 1 and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    time.sleep(rng.uniform(0.0, 0.4))
    signal_utc = datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    proc.send_signal(signum)
    out, err = proc.communicate(timeout=300)
    conn = sqlite3.connect(db)
    try:
        ok = conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok" and _whole(conn)
        status = conn.execute("SELECT status FROM runs ORDER BY id DESC").fetchone()[0]
        if signum == signal.SIGKILL:
            conn.close()
            nxt = subprocess.run([sys.executable, "-m", "bandcensus", "simulate", str(SCENE), "--db", str(db),
                                  "--config", "bare", "--band", BAND, "--dwell-ms", "5", "--keep-iq", str(iq),
                                  "--json"], capture_output=True, text=True, env=ENV)
            conn = sqlite3.connect(db)
            first = conn.execute("SELECT status FROM runs ORDER BY id").fetchone()[0]
            return ok and nxt.returncode == 0 and first == "interrupted" and not list(iq.glob(".*.partial"))
        after = conn.execute("SELECT COUNT(*) FROM hops WHERE started_utc > ?", (signal_utc,)).fetchone()[0]
        stop_events = conn.execute("SELECT COUNT(*) FROM events WHERE kind = 'stop'").fetchone()[0]
        return (ok and proc.returncode == 0 and status == "stopped" and stop_events == 1 and after <= 1
                and "Traceback" not in err and not list(iq.glob(".*.partial")))
    finally:
        conn.close()


def main(argv: list[str]) -> None:
    n = int(argv[0]) if argv else 10
    kinds = tuple(argv[1:]) or ("simulate", "replay", "scan")
    rng = random.Random(20261202)
    for kind in kinds:
        for signum in (signal.SIGTERM, signal.SIGINT, signal.SIGKILL):
            good = 0
            for _ in range(n):
                with tempfile.TemporaryDirectory(prefix="trial-") as tmp:
                    good += trial(kind, signum, Path(tmp), rng)
            print(f"{kind:8s} {signal.Signals(signum).name:7s}: {good} of {n} trials met every check", flush=True)


if __name__ == "__main__":
    main(sys.argv[1:])
