"""Speed of the per-hop DSP on one core: raw cu8 bytes -> channel rows, against a welch baseline.

Run from the project root:  PYTHONPATH=. python tests/benchmarks/dsp_speed.py [--reps 7]

Pinned to ONE core: the process is bound to a single CPU (``os.sched_setaffinity``; the
environment variable ``DSP_BENCH_CPU`` chooses which, default the first allowed), the
BLAS/OpenMP thread counts are set to 1 before numpy loads, and ``scipy.fft`` runs with its
default of one worker. The work is 1 s of simulated IQ at 2.4 MS/s (10 hops of 0.1 s, cu8,
noise plus FM stations), measured with :func:`survey.dsp.measure_hop`. The baseline does the
same work with the PSD from ``scipy.signal.welch`` (same Hann window, segment length and
overlap, no detrending). Prints times, x real time and the ratio; asserts nothing.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"
if hasattr(os, "sched_setaffinity"):  # DSP_BENCH_CPU picks the core (default: the first allowed)
    os.sched_setaffinity(0, {int(os.environ.get("DSP_BENCH_CPU", min(os.sched_getaffinity(0))))})

import argparse  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from contextlib import contextmanager  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import scipy.signal  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/ for synth_signals
import synth_signals as ss  # noqa: E402

from survey import dsp  # noqa: E402
from survey.records import SweepSettings  # noqa: E402

FS = 2.4e6
HOP_S = 0.1
N_HOPS = 10


def make_hops(seed: int = 7) -> list[tuple]:
    """Ten cu8 blocks of 0.1 s, each with noise and four simulated FM stations."""
    rng = np.random.default_rng(seed)
    n = int(FS * HOP_S)
    hops = []
    for k in range(N_HOPS):
        center = 88.05e6 + 1.6e6 * k
        z = ss.complex_noise(n, 0.02, rng).astype(np.complex128)
        for off in (-550e3, -150e3, 350e3, 750e3):
            z += ss.fm_broadcast(n, FS, off, float(rng.uniform(0.02, 0.3)), rng)
        channels = [int(center + o) for o in np.arange(-750e3, 751e3, 200e3) if abs(o) > 120e3]
        hops.append((ss.make_block(z.astype(np.complex64), center, FS, "cu8"), channels))
    return hops


def welch_psd(samples, sample_rate_hz, fft_size=2048, overlap=dsp.DEFAULT_OVERLAP, workers=None):
    """Baseline PSD: scipy.signal.welch with the same window and segments, fftshifted."""
    f, p = scipy.signal.welch(samples, sample_rate_hz, window="hann", nperseg=fft_size,
                              noverlap=int(round(overlap * fft_size)), detrend=False,
                              return_onesided=False, scaling="density")
    return np.fft.fftshift(f), np.fft.fftshift(p).astype(np.float32)


@contextmanager
def psd_replaced(func):
    saved = dsp.averaged_psd
    dsp.averaged_psd = func
    try:
        yield
    finally:
        dsp.averaged_psd = saved


def run(hops, settings) -> list:
    rows = []
    for i, (block, channels) in enumerate(hops):
        rows.extend(dsp.measure_hop(block, channels, settings, hop_index=i)[1])
    return rows


def timed(hops, settings, reps: int) -> tuple[float, float, list]:
    rows = run(hops, settings)  # warm caches and FFT plans
    times = []
    for _ in range(reps):
        t0 = time.perf_counter()
        run(hops, settings)
        times.append(time.perf_counter() - t0)
    return min(times), float(np.median(times)), rows


def _best(work, reps: int) -> float:
    work()
    times = []
    for _ in range(reps):
        t0 = time.perf_counter()
        work()
        times.append(time.perf_counter() - t0)
    return min(times)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=7)
    args = parser.parse_args(argv)
    settings = SweepSettings(band="benchmark")
    hops = make_hops()
    seconds = N_HOPS * HOP_S
    cpus = sorted(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else "?"
    print(f"1 s of cu8 IQ at 2.4 MS/s in {N_HOPS} hops; FFT {settings.fft_size}, overlap "
          f"{dsp.DEFAULT_OVERLAP}; CPUs allowed: {cpus}; best / median of {args.reps}")
    ours_best, ours_med, rows = timed(hops, settings, args.reps)
    with psd_replaced(welch_psd):
        base_best, base_med, base_rows = timed(hops, settings, args.reps)
    samples = [dsp.to_complex64(block.raw, block.datatype) for block, _ in hops]
    psd_ours = _best(lambda: [dsp.averaged_psd(z, FS, settings.fft_size) for z in samples], args.reps)
    psd_base = _best(lambda: [welch_psd(z, FS, settings.fft_size) for z in samples], args.reps)
    worst_db = max(abs(a.power_dbfs - b.power_dbfs) for a, b in zip(rows, base_rows))
    for name, best, med in (("survey.dsp", ours_best, ours_med), ("welch path", base_best, base_med)):
        print(f"  {name:<11} {best * 1e3:7.1f} ms best ({seconds / best:5.1f}x real time), "
              f"{med * 1e3:7.1f} ms median ({seconds / med:5.1f}x)")
    print(f"  ratio (welch / ours): {base_best / ours_best:.2f}x best, {base_med / ours_med:.2f}x median")
    print(f"  PSD step alone: {psd_ours * 1e3:.1f} ms vs welch {psd_base * 1e3:.1f} ms "
          f"({psd_base / psd_ours:.2f}x); the rest of the hop (conversion, floor, channels) is shared")
    print(f"  channel rows: {len(rows)}; largest power difference between paths {worst_db:.4f} dB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
