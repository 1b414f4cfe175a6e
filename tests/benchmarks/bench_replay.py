"""Replay of the bundled demo recordings, process start included, against a plain numpy + welch pass.

Run from the project root:  PYTHONPATH=. python tests/benchmarks/bench_replay.py [--reps 7]
                            [--before DIR]

Each repetition runs, in fresh interpreters and in a rotated order:

* ``replay --jobs 1``: ``python -m bandcensus replay <48 demo recordings> --db NEW --quiet --jobs 1``
  (imports, SigMF parsing, SHA-512 and schema checks, planning, PSD, noise floor, database), all
  in one process;
* ``replay, default jobs``: the same without ``--jobs``: the recordings are measured in as many
  worker processes as there are cores (at most 4), the parent checks and stores;
* ``plain baseline``: a short script that reads each ``.sigmf-meta`` with ``json``, each capture
  of the ``.sigmf-data`` with ``numpy.fromfile`` (its byte range), converts cu8 to complex64 and
  runs ``scipy.signal.welch`` (Hann, FFT 2048, no overlap) on it: the least any replay must do,
  without checks, floor or database, in one process;
* with ``--before DIR``: the same replay command run from another source tree (e.g. an older
  checkout), to quote the change.

Prints wall seconds and CPU seconds of the command and every process it started (user + system,
from ``getrusage(RUSAGE_CHILDREN)``, which counts the worker processes the replay waited for;
less sensitive to other work on a shared machine than wall time), best and median, and x real
time (recorded seconds over those seconds); the core count and load average are printed.
Asserts nothing.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "recordings_demo" / "sigmf"

BASELINE = r"""
import json, os, sys
import numpy as np
import scipy.signal
for meta_path in sys.argv[1:]:
    meta = json.load(open(meta_path))
    fs = meta["global"]["core:sample_rate"]
    data = meta_path[: -len(".sigmf-meta")] + ".sigmf-data"
    caps = meta["captures"]
    n_total = os.path.getsize(data) // 2
    starts = [c["core:sample_start"] for c in caps] + [n_total]
    for a, b in zip(starts[:-1], starts[1:]):
        raw = np.fromfile(data, dtype=np.uint8, count=2 * (b - a), offset=2 * a)
        z = ((raw.astype(np.float32) - 127.5) / 127.5).view(np.complex64)
        scipy.signal.welch(z, fs, window="hann", nperseg=2048, noverlap=0, detrend=False,
                           return_onesided=False, scaling="density")
"""


def recorded_seconds(metas: list[Path]) -> float:
    total = 0.0
    for m in metas:
        meta = json.loads(m.read_text())
        data = m.with_name(m.name[: -len(".sigmf-meta")] + ".sigmf-data")
        total += data.stat().st_size / 2 / meta["global"]["core:sample_rate"]
    return total


def _stats(values: list[float]) -> tuple[float, float]:
    ordered = sorted(values)
    mid = len(ordered) // 2
    return ordered[0], (ordered[mid] if len(ordered) % 2 else 0.5 * (ordered[mid - 1] + ordered[mid]))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=7)
    parser.add_argument("--before", type=Path, help="another source tree whose replay is timed beside this one")
    args = parser.parse_args(argv)
    metas = sorted(DEMO.glob("*.sigmf-meta"))
    if not metas:
        raise SystemExit("no demo recordings in recordings_demo/sigmf")
    seconds = recorded_seconds(metas)
    variants: dict[str, tuple[Path | None, list[str]]] = {
        "replay --jobs 1": (ROOT, ["--jobs", "1"]),
        "replay, default jobs": (ROOT, []),
        "plain baseline": (None, []),
    }
    if args.before:
        variants["replay, --before tree"] = (args.before.resolve(), [])
    times: dict[str, list[float]] = {name: [] for name in variants}
    cpu: dict[str, list[float]] = {name: [] for name in variants}
    print(f"{len(metas)} demo recordings, {seconds:.2f} s recorded at 2.4 MS/s; {args.reps} repetitions, "
          "fresh processes, interleaved")
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    print(f"load average at start: {' '.join(f'{x:.2f}' for x in os.getloadavg())} ({cores} cores available, shared)")
    names = list(variants)
    with tempfile.TemporaryDirectory() as tmp:
        for rep in range(args.reps):
            for name in names[rep % len(names):] + names[: rep % len(names)]:
                tree, extra = variants[name]
                if tree is None:
                    cmd = [sys.executable, "-c", BASELINE, *map(str, metas)]
                    env, cwd = dict(os.environ), ROOT
                else:
                    db = Path(tmp) / f"{rep}-{names.index(name)}.db"
                    cmd = [sys.executable, "-m", "bandcensus", "replay", *map(str, metas), "--db", str(db), "--quiet",
                           *extra]
                    env, cwd = dict(os.environ, PYTHONPATH=str(tree)), tree
                before = resource.getrusage(resource.RUSAGE_CHILDREN)
                t0 = time.perf_counter()
                subprocess.run(cmd, cwd=cwd, env=env, check=True, stdout=subprocess.DEVNULL)
                times[name].append(time.perf_counter() - t0)
                after = resource.getrusage(resource.RUSAGE_CHILDREN)
                cpu[name].append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    print(f"load average at end:   {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    for label, table in (("wall", times), ("CPU", cpu)):
        base_best = _stats(table["plain baseline"])[0]
        print(f"{label} time:")
        for name in names:
            best, median = _stats(table[name])
            print(f"  {name:<22} {best:6.2f} s best ({seconds / best:5.2f}x real time), {median:6.2f} s median "
                  f"({seconds / median:5.2f}x); {best / base_best:4.2f}x the plain baseline's time")
        serial, parallel = _stats(table["replay --jobs 1"]), _stats(table["replay, default jobs"])
        print(f"  default jobs over --jobs 1: {serial[0] / parallel[0]:.2f}x best, {serial[1] / parallel[1]:.2f}x median")
        if args.before:
            old = _stats(table["replay, --before tree"])
            for name, new in (("--jobs 1", serial), ("default jobs", parallel)):
                print(f"  {name} over the --before tree: {old[0] / new[0]:.2f}x best, {old[1] / new[1]:.2f}x median")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
