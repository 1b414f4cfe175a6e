"""Refresh rate of ``bandcensus tune`` on the simulated bench, against the receiver time it stands for.

One refresh over 88-100 MHz (plus 1.2 MHz margins) is 12 hops of 13.65 ms settle + 20 ms dwell:
0.404 s of receiver time, 2.48 refreshes a second. With a live receiver that time is spent
waiting for samples; here the simulator must *render* them. Reported, interleaved in one run:

* baseline: render the same 12 blocks only (the simulator's own cost, no DSP);
* one refresh: render + sweep DSP (channel rows) + tracker update (gain curve, measures, hint);
* the same with the stations on air (``--input antenna``: FM rendering of 5 stations);
* the tracker update alone.

A ratio "receiver time / wall time" above 1 means the simulated view keeps its rate in real time.

Run: ``PYTHONPATH=. python tests/benchmarks/tune_rate.py``
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np  # noqa: E402

from analysis.tuning.reference import reference_from_channels  # noqa: E402
from analysis.tuning.tracker import TuneTracker  # noqa: E402
from survey.scene import load_scene  # noqa: E402
from survey.sources.simulated import SimulatedSource  # noqa: E402
from survey.sweep import run_sweep  # noqa: E402
from survey.tuning_session import tuning_plan, tuning_settings  # noqa: E402

SCENE = Path(__file__).resolve().parents[2] / "recordings_demo" / "trimmer.toml"
TARGET = (88e6, 100e6)
REPEATS = 15


def _arrays(result):
    rows = sorted(result.channels, key=lambda c: c.freq_hz)
    return (np.array([c.freq_hz for c in rows], float), np.array([c.power_dbfs for c in rows]),
            np.array([c.noise_dbfs for c in rows]), np.array([c.received for c in rows]))


def main() -> None:
    scene = load_scene(SCENE)
    settings = tuning_settings()
    plan = tuning_plan(TARGET, settings)
    receiver_s = len(plan.hops) * (settings.settle_s + settings.dwell_s)
    n = int(round(settings.dwell_s * settings.sample_rate_hz))
    trackers, sources = {}, {}
    for kind, label in (("noise", "noise-hot"), ("antenna", "antenna")):
        ref_src = SimulatedSource(scene, "bare", label, seed=1, settle_s=settings.settle_s)
        refs = [_arrays(run_sweep(ref_src, plan, settings, "bare", label)) for _ in range(4)]
        ref = reference_from_channels(refs[0][0], np.stack([r[1] for r in refs]), np.stack([r[2] for r in refs]),
                                      np.stack([r[3] for r in refs]), 200e3, "bare", label, "bench")
        trackers[kind] = TuneTracker(TARGET, ref, kind, 200e3)
        sources[kind] = SimulatedSource(scene, "preamp-single", label, seed=2, settle_s=settings.settle_s)
    times: dict[str, list[float]] = {"baseline render": [], "refresh (noise)": [], "refresh (antenna)": [],
                                     "tracker update": []}
    last = None
    for k in range(REPEATS):
        src = sources["noise"]
        t0 = time.perf_counter()
        for hop in plan.hops:
            src.tune(hop.center_hz)
            src.read(n)
        times["baseline render"].append(time.perf_counter() - t0)
        for kind in ("noise", "antenna"):
            src = sources[kind]
            t0 = time.perf_counter()
            result = run_sweep(src, plan, settings, "preamp-single", src.input)
            t1 = time.perf_counter()
            last = trackers[kind].update(src.time_s, k + 1, *_arrays(result))
            t2 = time.perf_counter()
            times[f"refresh ({kind})"].append(t2 - t0)
            if kind == "noise":
                times["tracker update"].append(t2 - t1)
    print(f"receiver time per refresh: {receiver_s:.4f} s ({len(plan.hops)} hops), "
          f"{1 / receiver_s:.2f} refreshes/s on the source's clock")
    base = statistics.median(times["baseline render"])
    for name, values in times.items():
        med, best = statistics.median(values), min(values)
        print(f"{name:20s} median {med * 1e3:7.1f} ms  best {best * 1e3:7.1f} ms  "
              f"receiver time / wall time {receiver_s / med:5.1f}x  ratio to baseline {med / base:4.2f}")
    print(f"last antenna frame: {last.measures.peak_hz / 1e6:.3f} MHz peak" if last and last.measures else "")


if __name__ == "__main__":
    main()
