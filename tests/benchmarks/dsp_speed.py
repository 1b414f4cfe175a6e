"""Speed of the per-hop DSP on one core, each variant in a fresh process, against plain baselines.

Run from the project root:  PYTHONPATH=. python tests/benchmarks/dsp_speed.py [--reps 7]

Work: 1 s of simulated cu8 IQ at 2.4 MS/s in ten hops of 0.1 s (noise plus four FM stations
each), FFT 2048, no overlap, the default sweep settings. Variants:

* ``minimal``: the plain numpy float32 path, no reuse of memory: ``astype(float32)``,
  ``- 127.5``, ``/ 127.5``, view as complex64, times the Hann window, ``scipy.fft.fft`` of all
  segments, ``|X|^2``, mean over segments. The reference for how fast the PSD can be with numpy.
* ``tool PSD``: :func:`survey.dsp.raw_averaged_psd` (the same result as ``minimal``, within
  float32 rounding).
* ``tool PSD+channels``: clip fraction, ``raw_averaged_psd`` and the channel powers
  (:func:`survey.dsp.channel_power`): what a hop costs before the noise floor.
* ``tool full hop``: :func:`survey.dsp.measure_hop` (adds the local noise floor and C/N); the
  difference to the previous line is the cost of the floor fit.
* ``welch``: ``to_complex64`` plus ``scipy.signal.welch`` (same window, segments, no detrend).
* ``floors one by one`` / ``floors batched``: each hop's spectrum (:func:`survey.dsp.hop_spectrum`)
  and its noise floor, fitted hop by hop (:func:`survey.noise_floor.local_noise_floor`) or for
  the ten hops together (:func:`survey.noise_floor.local_noise_floors`, as a replayed sweep's
  first pass does); the difference between the two is what batching the fit saves. The largest
  difference between the two floors is printed (they should agree to rounding).

Every measurement runs in a FRESH interpreter (``subprocess`` with ``sys.executable``), so no
variant inherits another's allocator state, caches or FFT plans. The child binds itself to one
CPU (``os.sched_setaffinity``; ``DSP_BENCH_CPU`` picks it, default the first allowed), sets the
BLAS/OpenMP thread counts to 1 before numpy loads, runs the ten hops once (``first pass``: FFT
plans, work buffers and caches are built here) and then once more (``steady pass``, the state a
survey runs in), timing each pass on the wall clock and in CPU time of the process
(``time.process_time``, which does not count time spent waiting for the CPU on a loaded
machine). The variants are interleaved: every repetition runs each of them once, in a
rotated order. Prints best and median of the repetitions in x real time and the ratio of each
tool line to ``minimal`` (1.0 = as fast as the minimal path); asserts nothing. The machine is
shared: the load average is printed at the start and the end.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

FS = 2.4e6
HOP_S = 0.1
N_HOPS = 10
FFT = 2048
VARIANTS = ("minimal", "tool PSD", "tool PSD+channels", "tool full hop", "welch", "floors one by one",
            "floors batched")
HERE = Path(__file__).resolve()


def _pin() -> None:
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
        os.environ[var] = "1"
    if hasattr(os, "sched_setaffinity"):
        os.sched_setaffinity(0, {int(os.environ.get("DSP_BENCH_CPU", min(os.sched_getaffinity(0))))})


def make_hops(folder: Path, seed: int = 7) -> Path:
    """Ten cu8 blocks of 0.1 s (noise and four FM stations each), saved for the children."""
    import numpy as np

    sys.path.insert(0, str(HERE.parents[1]))  # tests/ for synth_signals
    import synth_signals as ss

    rng = np.random.default_rng(seed)
    n = int(FS * HOP_S)
    raws, centers, channels = [], [], []
    for k in range(N_HOPS):
        center = 88.05e6 + 1.6e6 * k
        z = ss.complex_noise(n, 0.02, rng).astype(np.complex128)
        for off in (-550e3, -150e3, 350e3, 750e3):
            z += ss.fm_broadcast(n, FS, off, float(rng.uniform(0.02, 0.3)), rng)
        raws.append(ss.make_block(z.astype(np.complex64), center, FS, "cu8").raw)
        centers.append(center)
        channels.append([int(center + o) for o in np.arange(-750e3, 751e3, 200e3) if abs(o) > 120e3])
    path = folder / "hops.npz"
    np.savez(path, raw=np.stack(raws), centers=np.asarray(centers), channels=np.asarray(channels))
    return path


def child(variant: str, data: Path) -> dict:
    """Run one variant twice over the hops in this (fresh) process; seconds per pass."""
    _pin()
    import numpy as np
    import scipy.fft
    import scipy.signal

    from survey import dsp, psd
    from survey.noise_floor import local_noise_floor, local_noise_floors
    from survey.records import IQBlock, SweepSettings

    loaded = np.load(data)
    raws, centers, channels = loaded["raw"], loaded["centers"], loaded["channels"]
    settings = SweepSettings(band="benchmark")
    blocks = [IQBlock(float(c), FS, "cu8", np.ascontiguousarray(r), "2026-03-01T00:00:00.000000Z")
              for r, c in zip(raws, centers)]
    window = psd._hann(FFT)

    def minimal():
        for raw in raws:
            f = raw.astype(np.float32)
            f -= np.float32(127.5)
            f *= np.float32(1.0 / 127.5)
            z = f.view(np.complex64)
            n = z.size // FFT
            x = scipy.fft.fft(z[: n * FFT].reshape(n, FFT) * window, axis=-1)
            (x.real**2 + x.imag**2).mean(axis=0)

    def tool_psd():
        for b in blocks:
            dsp.raw_averaged_psd(b.raw, b.datatype, FS, FFT)

    def tool_psd_channels():
        for b, ch in zip(blocks, channels):
            dsp.clip_fraction(b.raw, b.datatype)
            offsets, psd = dsp.raw_averaged_psd(b.raw, b.datatype, FS, FFT)
            dsp.channel_power(offsets, psd, ch - b.center_hz, settings.channel_bw_hz)

    def tool_full():
        for i, (b, ch) in enumerate(zip(blocks, channels)):
            dsp.measure_hop(b, ch.tolist(), settings, hop_index=i)

    def welch():
        for b in blocks:
            z = dsp.to_complex64(b.raw, b.datatype)
            scipy.signal.welch(z, FS, window="hann", nperseg=FFT, noverlap=0, detrend=False,
                               return_onesided=False, scaling="density")

    def floors_each():
        for b in blocks:
            s = dsp.hop_spectrum(b, settings)
            local_noise_floor(s.offsets_hz, s.psd, s.usable, effective_averages=s.effective_averages)

    def floors_batched():
        spectra = [dsp.hop_spectrum(b, settings) for b in blocks]
        local_noise_floors([s.offsets_hz for s in spectra], [s.psd for s in spectra], [s.usable for s in spectra],
                           effective_averages=[s.effective_averages for s in spectra])

    work = {"minimal": minimal, "tool PSD": tool_psd, "tool PSD+channels": tool_psd_channels,
            "tool full hop": tool_full, "welch": welch, "floors one by one": floors_each,
            "floors batched": floors_batched}[variant]
    passes, cpu = [], []
    for _ in range(2):
        c0, t0 = time.process_time(), time.perf_counter()
        work()
        passes.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return {"first": passes[0], "steady": passes[1], "first cpu": cpu[0], "steady cpu": cpu[1]}


def accuracy(data: Path) -> tuple[float, float]:
    """Largest |tool PSD - scipy.signal.welch| over all bins of the ten hops, dB; largest
    |batched floor - hop-by-hop floor| over the same bins, dB."""
    import numpy as np
    import scipy.signal

    from survey import dsp
    from survey.noise_floor import local_noise_floor, local_noise_floors
    from survey.records import IQBlock, SweepSettings

    worst = 0.0
    loaded = np.load(data)
    for raw in loaded["raw"]:
        _, ours = dsp.raw_averaged_psd(raw, "cu8", FS, FFT)
        _, ref = scipy.signal.welch(dsp.to_complex64(raw, "cu8"), FS, window="hann", nperseg=FFT, noverlap=0,
                                    detrend=False, return_onesided=False, scaling="density")
        worst = max(worst, float(np.max(np.abs(10 * np.log10(ours / np.fft.fftshift(ref))))))
    settings = SweepSettings(band="benchmark")
    spectra = [dsp.hop_spectrum(IQBlock(float(c), FS, "cu8", np.ascontiguousarray(r), "2026-03-01T00:00:00.000000Z"),
                                settings) for r, c in zip(loaded["raw"], loaded["centers"])]
    batched = local_noise_floors([s.offsets_hz for s in spectra], [s.psd for s in spectra],
                                 [s.usable for s in spectra], effective_averages=[s.effective_averages for s in spectra])
    floors = 0.0
    for s, b in zip(spectra, batched):
        alone = local_noise_floor(s.offsets_hz, s.psd, s.usable, effective_averages=s.effective_averages)
        ok = np.isfinite(alone)
        floors = max(floors, float(np.max(np.abs(10 * np.log10(b[ok] / alone[ok])))))
    return worst, floors


def _stats(values: list[float]) -> tuple[float, float]:
    ordered = sorted(values)
    mid = len(ordered) // 2
    median = ordered[mid] if len(ordered) % 2 else 0.5 * (ordered[mid - 1] + ordered[mid])
    return ordered[0], median


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=7)
    parser.add_argument("--child", choices=VARIANTS, help=argparse.SUPPRESS)
    parser.add_argument("--data", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(child(args.child, args.data)))
        return 0
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(HERE.parents[2]), os.environ.get("PYTHONPATH", "")]))
    seconds = N_HOPS * HOP_S
    with tempfile.TemporaryDirectory() as tmp:
        data = make_hops(Path(tmp))
        print(f"1 s of cu8 IQ at 2.4 MS/s in {N_HOPS} hops of {HOP_S} s; FFT {FFT}, no overlap; one CPU per child; "
              f"{args.reps} repetitions, each variant in a fresh process, interleaved")
        print(f"load average at start: {' '.join(f'{x:.2f}' for x in os.getloadavg())} "
              f"({os.cpu_count()} CPUs, shared with other work)")
        keys = ("first", "steady", "first cpu", "steady cpu")
        times: dict[str, dict[str, list[float]]] = {v: {k: [] for k in keys} for v in VARIANTS}
        for rep in range(args.reps):
            order = VARIANTS[rep % len(VARIANTS):] + VARIANTS[: rep % len(VARIANTS)]
            for variant in order:
                out = subprocess.run([sys.executable, str(HERE), "--child", variant, "--data", str(data)],
                                     capture_output=True, text=True, env=env, check=True)
                result = json.loads(out.stdout.strip().splitlines()[-1])
                for key in keys:
                    times[variant][key].append(result[key])
        worst_db, floors_db = accuracy(data)
    print(f"load average at end:   {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    for clock, suffix in (("wall clock", ""), ("CPU time of the child (less sensitive to other work)", " cpu")):
        print(f"{clock}:")
        print(f"{'variant':<18} | {'steady pass x real time':^27} | {'first pass x real time':^27}")
        print(f"{'':<18} | {'best':>8} {'median':>8} {'vs minimal':>9} | {'best':>8} {'median':>8} {'vs minimal':>9}")
        ref = {key: _stats(times["minimal"][key + suffix]) for key in ("first", "steady")}
        for variant in VARIANTS:
            cells = []
            for key in ("steady", "first"):
                best, median = _stats(times[variant][key + suffix])
                ratio = ref[key][0] / best
                cells.append(f"{seconds / best:7.1f}x {seconds / median:7.1f}x {ratio:9.2f}")
            print(f"{variant:<18} | {cells[0]} | {cells[1]}")
    full = _stats(times["tool full hop"]["steady"])[0]
    psd = _stats(times["tool PSD+channels"]["steady"])[0]
    print(f"noise floor fit (full hop minus PSD+channels, best): {(full - psd) / N_HOPS * 1e3:.2f} ms per hop, "
          f"{(full - psd) / full * 100:.0f} % of the full hop")
    each = _stats(times["floors one by one"]["steady cpu"])[0]
    batched = _stats(times["floors batched"]["steady cpu"])[0]
    spectra_only = _stats(times["tool PSD"]["steady cpu"])[0]
    print(f"spectrum + floor per hop (CPU, best): one by one {each / N_HOPS * 1e3:.2f} ms, batched "
          f"{batched / N_HOPS * 1e3:.2f} ms ({each / batched:.2f}x); the floor alone (minus the PSD): "
          f"{(each - spectra_only) / N_HOPS * 1e3:.2f} ms vs {(batched - spectra_only) / N_HOPS * 1e3:.2f} ms")
    print(f"largest difference tool PSD vs scipy.signal.welch over all bins: {worst_db:.5f} dB")
    print(f"largest difference batched vs hop-by-hop floor over all bins: {floors_db:.2e} dB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
