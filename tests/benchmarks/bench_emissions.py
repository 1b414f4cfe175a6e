"""Cost of the station census per hop, against plain channel measurement in the same run.

Interleaves, on the same hops: ``measure_hop`` alone (PSD, floor, channel rows: the baseline)
and ``measure_hop`` with emission detection (``emissions_out``), and the sweep-wide floor fit
(:func:`survey.noise_floor.sweep_floors`) over 18 hops. Hops: 0.1 s at 2.4 MS/s (240 000
samples, FFT 2048) holding 0, 4 and 8 FM stations from the numpy-only generator. Prints median
milliseconds and the ratio to the baseline (timing depends on the machine; nothing is asserted).

Run from the project root:  PYTHONPATH=.:tests python tests/benchmarks/bench_emissions.py
"""

from __future__ import annotations

import time

import numpy as np

from survey import dsp
from survey.noise_floor import sweep_floors
from survey.records import SweepSettings
from synth_signals import complex_noise, fm_broadcast, make_block

FS = 2.4e6
N = 240_000
SETTINGS = SweepSettings(band="europe")
CHANNELS = [int(98e6 + k * 100e3) for k in range(-8, 9) if abs(k) > 1]


def _hop(n_stations: int, seed: int):
    rng = np.random.default_rng(seed)
    z = complex_noise(N, 1e-9 * FS, rng)
    for k in rng.choice([-8, -6, -4, -2, 2, 4, 6, 8], size=n_stations, replace=False):
        z += fm_broadcast(N, FS, k * 100e3, float(np.sqrt(2e-4 * 10 ** rng.uniform(0, 3))), rng)
    return make_block(z, 98e6, FS)


def _median_ms(fn, repeats: int = 15) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return 1e3 * float(np.median(times))


def main() -> None:
    for n_stations in (0, 4, 8):
        block = _hop(n_stations, seed=n_stations)
        base, census = [], []
        for _ in range(3):  # interleaved, so load changes hit both alike
            base.append(_median_ms(lambda: dsp.measure_hop(block, CHANNELS, SETTINGS, 0)))
            census.append(_median_ms(lambda: dsp.measure_hop(block, CHANNELS, SETTINGS, 0, emissions_out=[])))
        b, c = float(np.median(base)), float(np.median(census))
        print(f"{n_stations} stations: measure_hop {b:6.1f} ms, with emissions {c:6.1f} ms "
              f"(detection {c - b:5.1f} ms, ratio {c / b:4.2f})")
    floors: list = []
    blocks = [_hop(8, seed=s) for s in range(18)]
    for blk in blocks:
        dsp.measure_hop(blk, CHANNELS, SETTINGS, 0, floor_out=floors)
    groups = [f[3] for f in floors]
    centers = [98e6 + 1.7e6 * k for k in range(18)]  # as if the hops were spread over the band
    offsets = [f[0] - 98e6 for f in floors]
    fit_ms = _median_ms(lambda: sweep_floors(groups, centers, offsets), repeats=5)
    hop_ms = _median_ms(lambda: dsp.measure_hop(blocks[0], CHANNELS, SETTINGS, 0), repeats=5)
    print(f"sweep-wide floor over 18 hops: {fit_ms:.1f} ms ({fit_ms / 18:.2f} ms per hop; "
          f"a plain measure_hop takes {hop_ms:.1f} ms)")


if __name__ == "__main__":
    main()
