"""Speed of the passband fit: analytic Jacobian against scipy's finite differences (baseline).

Run: ``PYTHONPATH=. python tests/benchmarks/bench_passband.py``. Prints seconds per fit of a
dense simulated curve (205 points, 87.5-108 MHz, 0.3 dB noise) and the ratio, both in this run.
"""

from __future__ import annotations

import time

import numpy as np
import scipy.optimize

import analysis.passband.fit as pb
from analysis.passband.fit import TunedStage, cascade_response_db, fit_passband


def _curve(seed: int = 7):
    f = np.arange(87.5e6, 108.01e6, 100e3)
    truth = [TunedStage(92.0e6, 25.0), TunedStage(98.0e6, 27.0)]
    rng = np.random.default_rng(seed)
    return f, cascade_response_db(f, truth, 18.0) + rng.normal(0.0, 0.3, f.size)


def _time(repeats: int = 3) -> tuple[float, object]:
    f, g = _curve()
    best = np.inf
    fit = None
    for _ in range(repeats):
        t0 = time.perf_counter()
        fit = fit_passband(f, g)
        best = min(best, time.perf_counter() - t0)
    return best, fit


def main() -> None:
    analytic_s, fit_a = _time()
    original = pb.least_squares

    def finite_difference(fun, x0, jac=None, **kw):  # the plain baseline: scipy's '2-point'
        return scipy.optimize.least_squares(fun, x0, jac="2-point", **kw)

    pb.least_squares = finite_difference
    try:
        baseline_s, fit_b = _time()
    finally:
        pb.least_squares = original
    print(f"fit with analytic Jacobian : {analytic_s * 1e3:8.1f} ms  (n={fit_a.n_circuits}, "
          f"-3 dB {fit_a.bw_3db_hz / 1e6:.3f} MHz)")
    print(f"fit with finite differences: {baseline_s * 1e3:8.1f} ms  (n={fit_b.n_circuits}, "
          f"-3 dB {fit_b.bw_3db_hz / 1e6:.3f} MHz)")
    print(f"speed-up: {baseline_s / analytic_s:.1f}x")


if __name__ == "__main__":
    main()
