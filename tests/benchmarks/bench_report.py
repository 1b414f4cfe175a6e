"""Time and size of the one-file HTML report against a plain baseline in the same run.

Run: ``PYTHONPATH=.:tests python tests/benchmarks/bench_report.py``. Replays the bundled
SIMULATED demo recordings (when present; else the small simulated survey of the report tests)
and prints, for ``preamp-staggered`` against ``bare`` with ENR 15 dB and without: seconds for
the analyses, the figures and the HTML, the page size in KB, and the ratio of the whole report
to the baseline ``compare --plot`` work (one comparison and its figure).
"""

from __future__ import annotations

import contextlib
import io
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


def main() -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        db, base, test, what = _database(folder)
        print(f"data: {what}")
        t0 = time.perf_counter()
        result = compare_configurations(db, base, test)
        plot_comparison(result, folder / "baseline.png")
        baseline_s = time.perf_counter() - t0
        print(f"baseline (compare + its figure): {baseline_s:.2f} s")
        for enr in (None, 15.0):
            t0 = time.perf_counter()
            report = build_report(db, base, test, target_hz=(88e6, 100e6), enr_db=enr)
            t1 = time.perf_counter()
            figures = render_figures(report)
            t2 = time.perf_counter()
            page = render_html(report, figures)
            t3 = time.perf_counter()
            total = t3 - t0
            print(f"report, ENR {enr}: analyses {t1 - t0:.2f} s, figures {t2 - t1:.2f} s, HTML {t3 - t2:.3f} s, "
                  f"total {total:.2f} s ({total / baseline_s:.1f} x baseline); page "
                  f"{len(page.encode('utf-8')) / 1024:.0f} KB, {len(figures)} figures, "
                  f"sections not available: {sorted(report.unavailable) or 'none'}")


if __name__ == "__main__":
    main()
