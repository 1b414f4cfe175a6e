"""RDS figures on the simulator: identification rate and block error rate against C/N, false
codes on noise, and the cost of decoding one station.

Run from the source checkout::

    python tests/benchmarks/rds_figures.py [--seeds 20] [--noise-seeds 400] [--random-bit-hours 10]

C/N is carrier over noise in 200 kHz; each trial is 0.5 s of IQ at 1.024 MS/s holding one
station (75 kHz deviation, programme-like audio, RDS at 3 kHz of deviation, stereo and mono
alternating) at 300 kHz from the centre, with a fresh seed. "PI" counts trials giving the right
PI, "PS" trials giving the whole right name; "wrong" counts any wrong PI or PS character (must
be 0). Block error rate is errored over received block slots, pooled over the trials that
synchronised. Cost: median wall time of decode_station on 0.5 s at 2.048 MS/s, printed beside a
plain baseline (one complex FFT of the same block) run interleaved in the same process.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import scipy.fft

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from rds_fixtures import FS, OFFSET_HZ, PROGRAMME, noise_iq, station_iq  # noqa: E402
from survey.rds import decode_station, decode_stations  # noqa: E402
from survey.rds.identity import identity_from_bits  # noqa: E402


def identification(cn_values, seeds: int) -> None:
    true_ps = PROGRAMME.ps.ljust(8)
    print("C/N dB | PI found | full PS | wrong | synced | block error rate")
    for cn in cn_values:
        pi_ok = ps_ok = wrong = synced = received = errored = 0
        for k in range(seeds):
            r = decode_station(station_iq(1_000_000 + 1000 * int(cn * 10) + k, cn, 0.5, stereo=bool(k % 2)),
                               FS, OFFSET_HZ)
            pi_ok += r.pi == PROGRAMME.pi
            ps_ok += r.ps == true_ps
            wrong += (r.pi not in (None, PROGRAMME.pi)) or any(t != true_ps[2 * s:2 * s + 2] for s, t in r.ps_segments)
            if r.blocks_received:
                synced += 1
                received += r.blocks_received
                errored += r.blocks_errored
        bler = f"{errored / received:.3f}" if received else "n/a"
        print(f"{cn:6.1f} | {pi_ok:3d}/{seeds} | {ps_ok:3d}/{seeds} | {wrong} | {synced:3d}/{seeds} | {bler}")


def false_codes(noise_seeds: int) -> None:
    durations = np.linspace(0.1, 0.5, 5)
    seconds = codes = syncs = 0.0
    for k in range(noise_seeds):
        d = float(durations[k % 5])
        r = decode_station(noise_iq(2_000_000 + k, d), FS, OFFSET_HZ)
        seconds += d
        codes += r.pi is not None
        syncs += r.blocks_received > 0
    hours = seconds / 3600.0
    # zero events in T: one-sided 95 % upper bound on the rate is -ln(0.05)/T = 3.0/T
    bound = 3.0 / hours if codes == 0 else float("nan")
    print(f"noise alone: {noise_seeds} blocks, {seconds:.0f} s: {int(codes)} codes, {int(syncs)} block syncs; "
          f"false-code rate < {bound:.0f} per hour (95 %, zero seen)")


def random_bit_codes(hours: float) -> None:
    """The decision stage on random bits (what noise becomes after the demodulator), in 0.5 s
    blocks of 594 bits: far more noise-hours than the IQ runs can afford."""
    rng = np.random.default_rng(4)
    n_blocks = int(hours * 3600 / 0.5)
    codes = syncs = 0
    for _ in range(n_blocks):
        r = identity_from_bits(rng.integers(0, 2, 594, dtype=np.uint8))
        codes += r.pi is not None or bool(r.ps_segments)
        syncs += r.blocks_received > 0
    bound = 3.0 / hours if codes == 0 else float("nan")
    print(f"random bits: {hours:g} h ({n_blocks} blocks of 0.5 s): {codes} codes, {syncs} block syncs "
          f"({syncs / n_blocks:.1e} per block); false-code rate < {bound:.2f} per hour (95 %, zero seen)")


def cost(repeats: int = 7) -> None:
    fs = 2.048e6
    rng = np.random.default_rng(3)
    n = int(0.5 * fs)
    iq = ((rng.standard_normal(n) + 1j * rng.standard_normal(n)) * 0.1).astype(np.complex64)
    offsets = [-600e3, -300e3, 200e3, 500e3]
    t_one, t_four, t_fft = [], [], []
    for _ in range(repeats):
        t0 = time.perf_counter()
        scipy.fft.fft(iq)
        t_fft.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        decode_station(iq, fs, 300e3)
        t_one.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        decode_stations(iq, fs, offsets)
        t_four.append(time.perf_counter() - t0)
    one, four, base = (statistics.median(v) * 1e3 for v in (t_one, t_four, t_fft))
    print(f"cost, 0.5 s at 2.048 MS/s: one station {one:.0f} ms ({one / base:.1f}x one FFT of the block, {base:.0f} ms); "
          f"four stations of one hop {four:.0f} ms ({(four - base) / 4:.0f} ms per extra station)")


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--seeds", type=int, default=20)
    p.add_argument("--noise-seeds", type=int, default=400)
    p.add_argument("--random-bit-hours", type=float, default=10.0)
    p.add_argument("--only", choices=("cost", "identification", "noise", "bits"))
    a = p.parse_args()
    if a.only in (None, "cost"):
        cost()
    if a.only in (None, "identification"):
        identification([5, 8, 10, 12, 14, 16, 18, 20, 25, 30], a.seeds)
    if a.only in (None, "noise"):
        false_codes(a.noise_seeds)
    if a.only in (None, "bits"):
        random_bit_codes(a.random_bit_hours)


if __name__ == "__main__":
    main()
