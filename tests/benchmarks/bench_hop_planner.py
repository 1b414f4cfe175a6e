"""Hop planner speed and hop counts against a plain greedy plan in the same run.

Baseline: a plain left-to-right greedy (the lowest unmeasured channel at the bottom of an upper
half or the outer edge of a lower half, whichever measures more; fast, not always minimal).
Both are timed one after the other per band, best and median of 7 after one untimed run.
With ``--milp`` the exact 0/1 set cover solved by scipy.optimize.milp (HiGHS) over the same
endpoint candidates is also printed, once, as the proof of the minimum hop count (it is slow:
minutes for the wider bands), not as a speed baseline.

Run from the project root:  PYTHONPATH=. python tests/benchmarks/bench_hop_planner.py [--milp]
"""

from __future__ import annotations

import statistics
import sys
import time

import numpy as np
from scipy.optimize import Bounds, LinearConstraint, milp

from survey.bandplan import BAND_NAMES, band_plan, plan_hops

FS_HZ, FRACTION, GUARD_HZ, BW_HZ = 2_400_000, 0.75, 20_000.0, 200_000.0
D_MIN = int(np.ceil(GUARD_HZ + BW_HZ / 2))
D_MAX = int(np.floor(FRACTION * FS_HZ / 2 - BW_HZ / 2))


def greedy(channels: np.ndarray) -> int:
    left = sorted(int(f) for f in channels)
    hops = 0
    while left:
        # the lowest unmeasured channel at the bottom of an upper half, or at the outer edge of a
        # lower half: keep whichever centre measures more of the remaining channels
        options = (left[0] - D_MIN, left[0] + D_MAX)
        rest = [[f for f in left if not D_MIN <= abs(f - c) <= D_MAX] for c in options]
        left = min(rest, key=len)
        hops += 1
    return hops


def milp_count(channels: np.ndarray) -> int:
    cands = np.unique(np.concatenate([channels - D_MAX, channels - D_MIN, channels + D_MIN, channels + D_MAX]))
    d = np.abs(channels[:, None] - cands[None, :])
    a = ((d >= D_MIN) & (d <= D_MAX)).astype(float)
    res = milp(np.ones(cands.size), constraints=[LinearConstraint(a, 1, np.inf)],
               integrality=np.ones(cands.size), bounds=Bounds(0, 1))
    return int(round(res.fun))


def timed(fn, *args):
    t = time.perf_counter()
    out = fn(*args)
    return out, time.perf_counter() - t


def best_median(fn, *args, reps: int = 7):
    out = fn(*args)
    times = [timed(fn, *args)[1] for _ in range(reps)]
    return out, min(times), statistics.median(times)


def main() -> None:
    use_milp = "--milp" in sys.argv
    reps = 7
    print(f"best / median of {reps} per band (planner, then greedy); milp {'on' if use_milp else 'off (--milp)'}")
    print(f"{'band':9} {'ch':>4} | {'planner':>7} {'best s':>8} {'median':>8} | {'greedy':>6} {'best s':>8} "
          f"{'median':>8} | {'milp':>4} {'s':>7}")
    for name in BAND_NAMES:
        channels = np.asarray(band_plan(name).channels_hz, dtype=np.int64)
        plan, p_best, p_med = best_median(plan_hops, channels.tolist(), FS_HZ, FRACTION, GUARD_HZ, BW_HZ, reps=reps)
        n_greedy, g_best, g_med = best_median(greedy, channels, reps=reps)
        if use_milp:
            n_milp, t_milp = timed(milp_count, channels)
            tail = f"{n_milp:>4} {t_milp:7.2f}"
        else:
            tail = "   -       -"
        print(f"{name:9} {channels.size:>4} | {len(plan.hops):>7} {p_best:8.4f} {p_med:8.4f} | {n_greedy:>6} "
              f"{g_best:8.4f} {g_med:8.4f} | {tail}")


if __name__ == "__main__":
    main()
