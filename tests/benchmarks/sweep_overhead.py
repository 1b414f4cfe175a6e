"""Sweep overhead beyond dwell + settle, with a source paced like a live receiver.

The source delivers samples at 2.4 MS/s in real time and takes ``RETUNE_S`` per retune plus
the settle time (5 ms retune is common practice for the common tuner, no source). Reported,
in one run, against the ideal time ``n_hops * (dwell + settle + retune)``:

* baseline: a plain tune/read loop over the hop plan (no DSP, no child process);
* run_sweep on the source directly (DSP in the same process);
* run_sweep through the watchdog (receiver in a child process);
* record_sweep through the watchdog with the database write (what ``scan`` does).

Goal: overhead of the last line <= 10 % of dwell + settle.

Run: ``PYTHONPATH=. python tests/benchmarks/sweep_overhead.py``
"""

from __future__ import annotations

import sys
import tempfile
import time
from functools import partial
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from fault_sources import NoiseSource  # noqa: E402
from survey.bandplan import parse_band  # noqa: E402
from survey.records import RunInfo, SweepSettings  # noqa: E402
from survey.runner import record_sweep  # noqa: E402
from survey.store import SurveyStore  # noqa: E402
from survey.sweep import plan_for_source, run_sweep  # noqa: E402
from survey.watchdog import WatchdogSettings, WatchedSource  # noqa: E402

RATE_HZ = 2_400_000.0
RETUNE_S = 0.005
SETTLE_S = 0.02
DWELL_S = 0.1
REPEATS = 3


def main() -> None:
    settings = SweepSettings(band="europe", sample_rate_hz=RATE_HZ, dwell_s=DWELL_S, settle_s=SETTLE_S)
    band = parse_band("europe")
    make = partial(NoiseSource, sample_rate_hz=RATE_HZ, pace=True, retune_s=RETUNE_S, settle_s=SETTLE_S)
    direct = make()
    plan = plan_for_source(band, direct, settings)
    n_hops = len(plan.hops)
    n = int(round(DWELL_S * RATE_HZ))
    ideal = n_hops * (DWELL_S + SETTLE_S + RETUNE_S)
    print(f"europe band: {n_hops} hops, dwell {DWELL_S * 1e3:.0f} ms, settle {SETTLE_S * 1e3:.0f} ms, "
          f"retune {RETUNE_S * 1e3:.0f} ms; ideal sweep {ideal:.3f} s")

    def best(fn) -> float:
        times = []
        for _ in range(REPEATS):
            t0 = time.perf_counter()
            fn()
            times.append(time.perf_counter() - t0)
        return min(times)

    def plain() -> None:
        for hop in plan.hops:
            direct.tune(hop.center_hz)
            direct.read(n)

    rows = [("baseline tune/read loop", best(plain))]
    rows.append(("run_sweep, same process", best(lambda: run_sweep(direct, plan, settings, "bench", "antenna"))))
    watched = WatchedSource(make, WatchdogSettings())
    rows.append(("run_sweep, watchdog child", best(lambda: run_sweep(watched, plan, settings, "bench", "antenna"))))
    with tempfile.TemporaryDirectory() as tmp:
        store = SurveyStore(Path(tmp) / "bench.db")
        run_id = store.begin_run(RunInfo("simulated", "paced noise", "bench", {}))
        rows.append(("record_sweep, watchdog + store", best(
            lambda: record_sweep(store, run_id, watched, plan, settings, "bench", "antenna"))))

        def ahead():
            watched.plan_ahead([h.center_hz for h in plan.hops], n)
            record_sweep(store, run_id, watched, plan, settings, "bench", "antenna")

        rows.append(("same, with read-ahead (as scan)", best(ahead)))
        store.close()
    watched.close()
    base = rows[0][1]
    print(f"{'variant':34s} {'sweep s':>8s} {'over ideal':>11s} {'vs baseline':>12s}")
    for name, t in rows:
        print(f"{name:34s} {t:8.3f} {100 * (t - ideal) / ideal:10.1f}% {t / base:11.3f}x")
    final = rows[-1][1]
    verdict = "meets" if (final - ideal) / ideal <= 0.10 else "misses"
    print(f"overhead beyond dwell + settle + retune: {100 * (final - ideal) / ideal:.1f}% ({verdict} the 10 % goal)")


if __name__ == "__main__":
    main()
