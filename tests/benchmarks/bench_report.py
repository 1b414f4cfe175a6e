"""Time and size of the one-file HTML report against a plain baseline in the same run.

Run: ``PYTHONPATH=.:tests python tests/benchmarks/bench_report.py``. Replays the bundled
SIMULATED demo recordings (when present; else the small simulated survey of the report tests)
and prints, for ``preamp-staggered`` against ``bare`` with ENR 15 dB and without: seconds for
the analyses, the figures and the HTML, the page size in KB, and the ratio of the whole report
to the baseline ``compare --plot`` work (one comparison and its figure).

Both are timed warm, the same way: each is run once untimed first (imports, matplotlib's font
cache, numpy's first allocations), then ``--reps`` times (default 7) interleaved, baseline then
report in every repetition; best and median are printed. Asserts nothing.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import statistics
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE.parent.parent))

from analysis.compare.core import compare_configurations  # noqa: E402
from analysis.compare.plots import plot_comparison  # noqa: E402
from analysis.report.build import build_report  # noqa: E402
from analysis.report.html import render_html  # noqa: E402
from analysis.report.plots import render_figures  # noqa: E402
from bandcensus.cli import main as cli  # noqa: E402

DEMO = HERE.parent.parent / "recordings_demo" / "sigmf"


def _database(folder: Path) -> tuple[Path, str, str, str]:
    metas = sorted(DEMO.glob("*.sigmf-meta"))
    db = folder / "bench.db"
    if metas:
        with contextlib.redirect_stdout(io.StringIO()):
            code = cli(["replay", *map(str, metas), "--db", str(db), "--quiet"])
        if code != 0:
            raise SystemExit("replay of the demo recordings failed")
        return db, "bare", "preamp-staggered", f"demo recordings ({len(metas)} replayed)"
    from report_fixtures import simulated_db

    return simulated_db(db), "bare", "preamp-peaked", "small simulated survey (no demo recordings)"


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=7)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        db, base, test, what = _database(folder)
        print(f"data: {what}; best and median of {args.reps}, warm, interleaved")

        def baseline() -> None:
            plot_comparison(compare_configurations(db, base, test), folder / "baseline.png")

        def report(enr):
            t0 = time.perf_counter()
            rep = build_report(db, base, test, target_hz=(88e6, 100e6), enr_db=enr)
            t1 = time.perf_counter()
            figures = render_figures(rep)
            t2 = time.perf_counter()
            page = render_html(rep, figures)
            t3 = time.perf_counter()
            return (t1 - t0, t2 - t1, t3 - t2), rep, figures, page

        baseline()  # warm-up of both, untimed
        for enr in (None, 15.0):
            report(enr)
        base_times: list[float] = []
        parts: dict = {None: [], 15.0: []}
        last = {}
        for _ in range(args.reps):
            t0 = time.perf_counter()
            baseline()
            base_times.append(time.perf_counter() - t0)
            for enr in (None, 15.0):
                split, rep, figures, page = report(enr)
                parts[enr].append(split)
                last[enr] = (rep, figures, page)
        b_best, b_med = min(base_times), statistics.median(base_times)
        print(f"baseline (compare + its figure): {b_best:.2f} s best, {b_med:.2f} s median")
        for enr in (None, 15.0):
            totals = [sum(p) for p in parts[enr]]
            best_i = totals.index(min(totals))
            a, f, h = parts[enr][best_i]
            rep, figures, page = last[enr]
            med = statistics.median(totals)
            print(f"report, ENR {enr}: best {min(totals):.2f} s (analyses {a:.2f} s, figures {f:.2f} s, HTML {h:.3f} s), "
                  f"median {med:.2f} s; {min(totals) / b_best:.1f}x the baseline best, {med / b_med:.1f}x median; page "
                  f"{len(page.encode('utf-8')) / 1024:.0f} KB, {len(figures)} figures, "
                  f"sections not available: {sorted(rep.unavailable) or 'none'}")


if __name__ == "__main__":
    main()
