"""Start-up of ``bandcensus --help`` and ``bandcensus runs`` against a bare interpreter start.

Run from the project root:  PYTHONPATH=. python tests/benchmarks/bench_startup.py [--reps 7]

Each command runs in a fresh interpreter, interleaved with ``python -c pass`` (the floor no
command can go below); wall seconds best and median are printed, and the sum of the import
times that ``python -X importtime`` reports for one more run of each, with the slowest
top-level imports. Also lists which heavy libraries (pandas, scipy.stats, matplotlib,
sqlite_utils) each command loads. Asserts nothing.
"""

from __future__ import annotations

import argparse
import os
import re
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
HEAVY = ("pandas", "scipy.stats", "matplotlib", "sqlite_utils")
_LINE = re.compile(r"import time:\s+(\d+) \|\s+(\d+) \|( *)(\S+)")


def _importtime(argv: list[str]) -> tuple[float, list[tuple[float, str]], list[str]]:
    out = subprocess.run([sys.executable, "-X", "importtime", *argv], cwd=ROOT, capture_output=True, text=True,
                         env=dict(os.environ, PYTHONPATH=str(ROOT)))
    total, top, names = 0.0, [], set()
    for line in out.stderr.splitlines():
        m = _LINE.match(line)
        if not m:
            continue
        total += int(m.group(1)) / 1e6
        names.add(m.group(4))
        if len(m.group(3)) <= 1:
            top.append((int(m.group(2)) / 1e6, m.group(4)))
    heavy = [h for h in HEAVY if h in names]
    return total, sorted(top, reverse=True)[:3], heavy


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=7)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "s.db"
        subprocess.run([sys.executable, "-c", "from survey.store import SurveyStore; SurveyStore(__import__('sys').argv[1]).close()",
                        str(db)], cwd=ROOT, check=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
        cases = {"python -c pass": ["-c", "pass"],
                 "bandcensus --help": ["-m", "bandcensus", "--help"],
                 "bandcensus runs": ["-m", "bandcensus", "runs", "--db", str(db)]}
        times: dict[str, list[float]] = {k: [] for k in cases}
        print(f"fresh interpreters, {args.reps} repetitions interleaved; load average "
              f"{' '.join(f'{x:.2f}' for x in os.getloadavg())} ({os.cpu_count()} CPUs, shared)")
        for _ in range(args.reps):
            for name, cmd in cases.items():
                t0 = time.perf_counter()
                subprocess.run([sys.executable, *cmd], cwd=ROOT, check=True, stdout=subprocess.DEVNULL,
                               env=dict(os.environ, PYTHONPATH=str(ROOT)))
                times[name].append(time.perf_counter() - t0)
        for name, cmd in cases.items():
            best, med = min(times[name]), statistics.median(times[name])
            total, top, heavy = _importtime(cmd)
            slowest = ", ".join(f"{n} {s:.3f} s" for s, n in top)
            print(f"{name:<18} {best:6.3f} s best {med:6.3f} s median wall; imports {total:.3f} s "
                  f"(-X importtime; slowest top-level: {slowest}); heavy libraries loaded: {heavy or 'none'}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
