"""Benchmark: A/B comparison of a week of sweeps (about 10 million channel rows).

Builds a survey database under /tmp (simulated: invented stations, a sweep every 10 s for
``--days`` days across the European FM band, 87.5-108.0 MHz on the 100 kHz raster = 206
channels, labels ``bare`` and ``preamp-a`` alternating) with the
schema of :mod:`survey.store` (``channels`` rows and the columnar ``channel_vectors`` blobs),
by bulk ``executemany`` inside one transaction. Build time is not the benchmark.

Then, each in a fresh child process so that the peak resident memory
(``resource.getrusage(RUSAGE_SELF).ru_maxrss``) belongs to that stage alone:

* ``compare``: :func:`analysis.compare.core.compare_configurations` (goal: <= 10 s, < 1.5 GB);
* ``baseline``: the plain way, reading the ``channels`` rows table in Python and computing
  the per-channel median of paired C/N differences with :func:`statistics.median`
  (no interval, no test): the floor any implementation must beat.

Run: ``PYTHONPATH=. python tests/benchmarks/compare_scale.py [--days 7] [--keep]``.
The database (about 1.5 GB for 7 days) is deleted afterwards unless ``--keep``.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

SWEEP_S = 10.0
N_CHANNELS = 206


def channel_axis_hz() -> np.ndarray:
    """The European band 87.5-108.0 MHz on its 100 kHz raster (GE84): 206 channels."""
    return 87_500_000 + 100_000 * np.arange(N_CHANNELS, dtype=np.int64)


def build(path: Path, days: float, seed: int = 0) -> dict:
    """Write the benchmark database; returns counts and the build time."""
    from survey.store import SurveyStore

    t0 = time.perf_counter()
    with SurveyStore(path) as store:  # schema and migrations exactly as the tool makes them
        pass
    rng = np.random.default_rng(seed)
    n_sweeps = int(days * 86400 / SWEEP_S)
    freqs = channel_axis_hz()
    m = freqs.size
    occupied = rng.random(m) < 0.45
    cn0 = np.where(occupied, rng.uniform(-3, 40, m), -np.inf)  # true base C/N, dB
    gain = 16.0 - 6.0 * ((freqs - 98e6) / 10e6) ** 2             # preamp passband, dB
    rise = np.full(m, 9.0)
    conn = sqlite3.connect(str(path), isolation_level=None)
    conn.execute("PRAGMA journal_mode = DELETE")
    conn.execute("PRAGMA synchronous = OFF")
    conn.execute("BEGIN")
    conn.execute(
        "INSERT INTO runs (id, started_utc, tool_version, source_kind, device, settings, seed, notes)"
        " VALUES (1, '2026-05-01T00:00:00.000000Z', 'bench', 'simulated', 'benchmark (simulated)', '{}', ?, '')",
        (seed,),
    )
    start = np.datetime64("2026-05-01T00:00:00", "us")
    chunk = 2000
    fade = rng.normal(0, 3.0, m)
    rows_written = 0
    freqs_blob = freqs.astype("<i8").tobytes()
    for c0 in range(0, n_sweeps, chunk):
        k = np.arange(c0, min(n_sweeps, c0 + chunk))
        n = k.size
        # slow fading: AR(1) with 10 min correlation time, shared by consecutive sweeps
        rho = np.exp(-SWEEP_S / 600.0)
        f = np.empty((n, m))
        for i in range(n):
            fade = rho * fade + np.sqrt(1 - rho * rho) * rng.normal(0, 3.0, m)
            f[i] = fade
        is_test = (k % 2 == 1)[:, None]
        noise = -70.0 + np.where(is_test, rise, 0.0) + 10 * np.log10(1 + 0.03 * rng.normal(size=(n, m)))
        sig = -70.0 + cn0 + f + np.where(is_test, gain, 0.0)
        power = 10 * np.log10((10 ** (sig / 10) + 10 ** (noise / 10)) * (1 + 0.03 * rng.normal(size=(n, m))))
        power32, noise32 = power.astype(np.float32), noise.astype(np.float32)
        received = (power32 - noise32) >= 3.0
        with np.errstate(invalid="ignore", divide="ignore"):
            cn = 10 * np.log10(10 ** ((power32.astype(float) - noise32) / 10) - 1)
        stamps = np.datetime_as_string(start + (k * SWEEP_S * 1e6).astype("timedelta64[us]"), unit="us")
        ends = np.datetime_as_string(start + ((k * SWEEP_S + 2.0) * 1e6).astype("timedelta64[us]"), unit="us")
        conn.executemany(
            "INSERT INTO sweeps (id, run_id, sequence, configuration, input, started_utc, ended_utc, complete,"
            " band, channel_bw_hz, sample_rate_hz, gain_db, dwell_s, settle_s, fft_size, usable_fraction,"
            " dc_guard_hz, ppm, received_margin_db, recording, notes)"
            " VALUES (?, 1, ?, ?, 'antenna', ?, ?, 1, 'simulated-europe', 200000.0, 2400000.0, 30.0, 0.1,"
            " 0.02, 2048, 0.75, 20000.0, 0, 3.0, NULL, '')",
            [(int(s) + 1, int(s), "preamp-a" if s % 2 else "bare", a + "Z", b + "Z")
             for s, a, b in zip(k.tolist(), stamps.tolist(), ends.tolist())],
        )
        conn.executemany(
            "INSERT INTO channel_vectors (sweep_id, n_channels, freqs_hz, power_dbfs, noise_dbfs, received)"
            " VALUES (?,?,?,?,?,?)",
            [(int(s) + 1, m, freqs_blob, power32[i].astype("<f4").tobytes(), noise32[i].astype("<f4").tobytes(),
              received[i].astype(np.uint8).tobytes()) for i, s in enumerate(k.tolist())],
        )
        sid = np.repeat(k + 1, m).tolist()
        fr = np.tile(freqs, n).tolist()
        hop = np.tile(np.arange(m) // 21, n).tolist()
        pw = power32.astype(float).ravel().tolist()
        nz = noise32.astype(float).ravel().tolist()
        dens = (noise32.astype(float) - 53.0103).ravel().tolist()
        rc = received.ravel().tolist()
        cnl = [c if r else None for c, r in zip(cn.ravel().tolist(), rc)]
        conn.executemany(
            "INSERT INTO channels (sweep_id, freq_hz, hop_index, power_dbfs, noise_dbfs, noise_density_dbfs_hz,"
            " cn_db, received) VALUES (?,?,?,?,?,?,?,?)",
            zip(sid, fr, hop, pw, nz, dens, cnl, map(int, rc)),
        )
        rows_written += n * m
    conn.execute("COMMIT")
    conn.execute("PRAGMA journal_mode = WAL")
    conn.close()
    return {"sweeps": n_sweeps, "channel_rows": rows_written, "build_s": time.perf_counter() - t0,
            "db_bytes": path.stat().st_size, "true_delta_db": (gain - rise).tolist(), "cn0_db": cn0.tolist()}


def _cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def stage_compare(path: str) -> dict:
    from analysis.compare.core import compare_configurations

    t0, c0 = time.perf_counter(), _cpu_s()
    res = compare_configurations(path, "bare", "preamp-a")
    elapsed = time.perf_counter() - t0
    return {"seconds": elapsed, "cpu_s": _cpu_s() - c0,
            "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
            "method": res.method, "n_pairs": res.n_pairs,
            "median_delta_cn_db": res.summary["median_delta_cn_db"],
            "verdicts": res.summary["verdict_counts"],
            "deltas": [c.delta_cn_db for c in res.channels]}


def stage_baseline(path: str) -> dict:
    """Plain Python over the rows table: group C/N by sweep and channel, pair, take medians."""
    t0, c0 = time.perf_counter(), _cpu_s()
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    label = dict(conn.execute("SELECT id, configuration FROM sweeps WHERE input = 'antenna' AND complete = 1"))
    cn: dict[tuple[int, int], float] = {}
    for sweep_id, freq, c in conn.execute(
        "SELECT sweep_id, freq_hz, cn_db FROM channels WHERE received = 1 ORDER BY sweep_id"
    ):
        cn[(sweep_id, freq)] = c
    freqs = [r[0] for r in conn.execute("SELECT DISTINCT freq_hz FROM channels WHERE sweep_id = 1")]
    ids = sorted(label)
    pairs = [(a, b) for a, b in zip(ids[0::2], ids[1::2]) if label[a] == "bare" and label[b] == "preamp-a"]
    deltas = []
    for f in freqs:
        d = [cn[(b, f)] - cn[(a, f)] for a, b in pairs if (a, f) in cn and (b, f) in cn]
        deltas.append(statistics.median(d) if len(d) >= max(1, len(pairs) // 2) else None)
    conn.close()
    return {"seconds": time.perf_counter() - t0, "cpu_s": _cpu_s() - c0,
            "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, "deltas": deltas}


def _child(stage: str, path: Path) -> dict:
    out = subprocess.run([sys.executable, __file__, "--stage", stage, "--db", str(path)],
                         capture_output=True, text=True, check=True, env=dict(os.environ))
    return json.loads(out.stdout)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--days", type=float, default=7.0)
    ap.add_argument("--keep", action="store_true")
    ap.add_argument("--stage", choices=["compare", "baseline"])
    ap.add_argument("--db", help="time an existing database (e.g. one kept with --keep) instead of building one")
    args = ap.parse_args()
    if args.stage:
        fn = stage_compare if args.stage == "compare" else stage_baseline
        print(json.dumps(fn(args.db)))
        return
    reuse = args.db is not None
    folder = Path(args.db).parent if reuse else Path(tempfile.mkdtemp(prefix="bandcensus-bench-", dir="/tmp"))
    path = Path(args.db) if reuse else folder / "week.db"
    try:
        info = {"sweeps": 0, "channel_rows": 0, "db_bytes": path.stat().st_size, "build_s": 0.0} if reuse \
            else build(path, args.days)
        if reuse:
            print(f"timing the existing database {path} ({info['db_bytes'] / 1e9:.2f} GB)")
        else:
            print(f"built {info['sweeps']} sweeps, {info['channel_rows']:,} channel rows, "
                  f"{info['db_bytes'] / 1e9:.2f} GB in {info['build_s']:.0f} s (not the benchmark)")
        cmp_ = _child("compare", path)
        print(f"compare_configurations: {cmp_['seconds']:.2f} s wall, {cmp_['cpu_s']:.2f} s CPU, peak RSS {cmp_['peak_rss_mb']:.0f} MB "
              f"(goal <= 10 s, < 1500 MB); {cmp_['n_pairs']} pairs; median delta "
              f"{cmp_['median_delta_cn_db']:+.2f} dB; verdicts {cmp_['verdicts']}")
        print(f"  method: {cmp_['method']}")
        base = _child("baseline", path)
        print(f"baseline (rows table in plain Python, medians only, no intervals): {base['seconds']:.2f} s wall, "
              f"{base['cpu_s']:.2f} s CPU, "
              f"peak RSS {base['peak_rss_mb']:.0f} MB")
        print(f"ratio baseline / compare: {base['seconds'] / cmp_['seconds']:.1f}x wall, "
              f"{base['cpu_s'] / cmp_['cpu_s']:.1f}x CPU "
              "(compare also computes intervals and tests)")
        a = np.asarray([np.nan if v is None else v for v in cmp_["deltas"]], float)
        b = np.asarray([np.nan if v is None else v for v in base["deltas"]], float)
        both = np.isfinite(a) & np.isfinite(b)
        print(f"agreement on {both.sum()} channels: max |delta difference| {np.max(np.abs(a[both] - b[both])):.4f} dB")
        if not reuse:
            true = np.asarray(info["true_delta_db"])
            cn0 = np.asarray(info["cn0_db"])
            strong = np.isfinite(a) & (cn0 > 6) & (cn0 + true > 6)
            print(f"accuracy against truth on {strong.sum()} channels with C/N > 6 dB in both: "
                  f"max |error| {np.max(np.abs(a[strong] - true[strong])):.3f} dB, "
                  f"median {np.median(np.abs(a[strong] - true[strong])):.3f} dB")
    finally:
        if not args.keep and not reuse:
            for p in folder.glob("*"):
                p.unlink()
            folder.rmdir()
        elif not reuse:
            print(f"kept {path}")


if __name__ == "__main__":
    main()
