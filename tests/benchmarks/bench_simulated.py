"""Speed of the simulated receiver: one europe sweep rendered, against plain baselines.

Baselines in the same run: (a) drawing the same number of complex64 white-noise samples with
numpy (the least any noise renderer must do), and (b) real time (the dwell it represents).
Prints seconds per sweep of 18 hops x 0.1 s at 2.4 MS/s, for the bare and the peaked-preamp
chains of the demo scene, and the ratios.

Run from the project root:  PYTHONPATH=. python tests/benchmarks/bench_simulated.py
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from survey.bandplan import band_plan
from survey.records import SweepSettings
from survey.scene import load_scene
from survey.sources.simulated import SimulatedSource
from survey.sweep import plan_for_source

SCENE = Path(__file__).resolve().parents[2] / "recordings_demo" / "quorrelby_hill.toml"


def render_sweep(src: SimulatedSource, centers, n: int) -> None:
    for c in centers:
        src.tune(c)
        src.read(n)


def main() -> None:
    scene = load_scene(SCENE)
    n = 240_000
    rng = np.random.default_rng(0)
    for cfg in ("bare", "preamp-peaked"):
        src = SimulatedSource(scene, cfg, seed=1)
        plan = plan_for_source(band_plan("europe"), src, SweepSettings(band="europe"))
        centers = [h.center_hz for h in plan.hops]
        render_sweep(src, centers[:1], n)  # warm the caches (occupancy templates, noise shapes)
        t0 = time.perf_counter()
        render_sweep(src, centers, n)
        t_sim = time.perf_counter() - t0
        t0 = time.perf_counter()
        for _ in centers:
            g = rng.standard_normal((2, n), dtype=np.float32)
            (g[0] + 1j * g[1]).astype(np.complex64)
        t_noise = time.perf_counter() - t0
        real_time = len(centers) * n / src.sample_rate_hz
        print(f"{cfg:14s} {len(centers)} hops x {n} samples: {t_sim:.3f} s per sweep; "
              f"white-noise baseline {t_noise:.3f} s (x{t_sim / t_noise:.1f}); "
              f"{real_time / t_sim:.1f} x faster than real time ({real_time:.1f} s of dwell)")


if __name__ == "__main__":
    main()
