"""Benchmark: the ``compare`` and ``report`` commands over about 10 million channel rows.

Builds a survey database under /tmp (simulated: invented stations, a sweep every 10 s across the
European FM band, 87.5-108.0 MHz on the 100 kHz raster = 206 channels, labels ``bare`` and
``preamp-a`` alternating; 48 544 sweeps = 10.0 million channel readings for ``--rows 10e6``)
with the schema of :mod:`survey.store`. The analyses read the columnar ``channel_vectors``
copy, which holds every reading, and the census's station rows (one per occupied channel a
sweep detected, 0.39 per channel reading), written both to ``stations`` and, packed by
:func:`survey.store.station_blobs` as the store's writer packs them, to the columnar
``station_vectors`` the census reads. The per-row ``channels`` table is written for the first
20 sweeps only, to keep the build short (build time is not the benchmark).

Each stage runs in a fresh child process so that its peak resident memory
(``resource.getrusage(RUSAGE_SELF).ru_maxrss``) is its own. In the same child two plain numpy
baselines run before and after the stage (interleaved, so machine load affects all alike):

* **channels** (kept for continuity with earlier figures): read the ``channel_vectors`` blobs
  with ``sqlite3`` and ``numpy.frombuffer``, pair consecutive sweeps (k-th base with k-th test
  in time order) and take the per-channel mean of the paired C/N differences;
* **channels + stations** (the same data the command reads, since its unit is the station):
  the above, plus the ``station_vectors`` blobs (carrier and C/N), stations grouped by carrier
  rounded to 10 kHz (dense integer keys: ``numpy.bincount`` + ``cumsum``, which was faster here
  than ``numpy.unique``), a (sweeps x stations) C/N matrix and the per-station mean of the
  paired differences.

Both are plain and fast: no interval, no test, no census rules (5/25 kHz linkage, strongest
emission per cell, raster fill), no diagnosis, no printing. Reported: stage time / baseline time
(mean of the two runs of each baseline), against each baseline. ``--repeat N`` runs each stage
N times (children interleaved compare, report, compare, ...) and prints best and median.

* ``compare``: ``bandcensus compare --db ... --base bare --test preamp-a`` with everything it
  prints by default (output to /dev/null); goal within 3x of the baseline, < 1 GB.
* ``report``: ``bandcensus report ... --out report.html``; goal within 6x, < 1 GB.

Run: ``PYTHONPATH=. python tests/benchmarks/compare_scale.py [--rows 1e6 10e6] [--keep] [--repeat 3]``,
or ``--db PATH`` to time a database kept earlier.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import sqlite3
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

SWEEP_S = 10.0
N_CHANNELS = 206


def channel_axis_hz() -> np.ndarray:
    """The European band 87.5-108.0 MHz on its 100 kHz raster (GE84): 206 channels."""
    return 87_500_000 + 100_000 * np.arange(N_CHANNELS, dtype=np.int64)


def build(path: Path, n_sweeps: int, seed: int = 0) -> dict:
    """Write the benchmark database; returns counts and the build time."""
    from survey.store import STATION_VECTOR_FIELDS, SurveyStore, station_blobs
    from survey.store.station_columns import INSERT_STATION_VECTOR

    t0 = time.perf_counter()
    with SurveyStore(path) as store:  # schema and migrations exactly as the tool makes them
        pass
    rng = np.random.default_rng(seed)
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
    station_rows = 0
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
        # the census: one station row per occupied channel a sweep detected (carrier 1.3 kHz off the
        # raster, as a measured carrier is), which the per-station analyses read
        det_i, det_j = np.nonzero(received & occupied[np.newaxis, :])
        conn.executemany(
            "INSERT INTO stations (sweep_id, freq_hz, hop_index, kind, occupied_bw_hz, power_dbfs, noise_dbfs,"
            " cn_db, ci_db, stereo, channel_freq_hz, separable) VALUES (?,?,?,'fm',150000.0,?,?,?,NULL,0,?,1)",
            zip((k[det_i] + 1).tolist(), (freqs[det_j] + 1300.0).tolist(), (det_j // 21).tolist(),
                power32[det_i, det_j].astype(float).tolist(), noise32[det_i, det_j].astype(float).tolist(),
                cn[det_i, det_j].astype(float).tolist(), freqs[det_j].tolist()),
        )
        # and their columnar copy, packed by the store's own function (one station_vectors row per sweep)
        per_sweep = np.cumsum(np.bincount(det_i, minlength=n))[:-1]
        vectors = []
        for i, (s, j) in enumerate(zip(k.tolist(), np.split(det_j, per_sweep))):
            blobs = station_blobs(
                freqs[j] + 1300.0, power32[i, j].astype(float), noise32[i, j].astype(float), cn[i, j].astype(float),
                np.full(j.size, np.nan), np.full(j.size, 150000.0), freqs[j], j // 21, np.zeros(j.size, np.uint8),
                np.zeros(j.size, bool), np.ones(j.size, bool))
            vectors.append((int(s) + 1, int(j.size), 0, "fm", *(blobs[f] for f, _ in STATION_VECTOR_FIELDS)))
        conn.executemany(INSERT_STATION_VECTOR, vectors)
        station_rows += int(det_i.size)
        rows_written += n * m
        if c0 > 0:
            continue
        n_rows = min(n, 20)
        k, power32, noise32, received, cn = k[:n_rows], power32[:n_rows], noise32[:n_rows], received[:n_rows], cn[:n_rows]
        n = n_rows
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
    conn.execute("COMMIT")
    conn.execute("PRAGMA journal_mode = WAL")
    conn.close()
    return {"sweeps": n_sweeps, "channel_rows": rows_written, "station_rows": station_rows, "build_s": time.perf_counter() - t0,
            "db_bytes": path.stat().st_size, "true_delta_db": (gain - rise).tolist(), "cn0_db": cn0.tolist()}


def _cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def _read_channels(conn: sqlite3.Connection) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Test flags, C/N matrix (sweeps x channels, dB) and the order the sweeps came in."""
    rows = conn.execute("SELECT s.configuration, v.power_dbfs, v.noise_dbfs FROM channel_vectors v"
                        " JOIN sweeps s ON s.id = v.sweep_id ORDER BY s.started_utc").fetchall()
    n = len(rows)
    power = np.frombuffer(b"".join(r[1] for r in rows), "<f4").reshape(n, -1)
    noise = np.frombuffer(b"".join(r[2] for r in rows), "<f4").reshape(n, -1)
    test = np.asarray([r[0] == "preamp-a" for r in rows])
    with np.errstate(invalid="ignore", divide="ignore"):
        cn = 10 * np.log10(10 ** ((power - noise) / 10) - 1)
    return test, cn


def _paired_mean(matrix: np.ndarray, test: np.ndarray) -> np.ndarray:
    """Per-column mean of the paired differences, k-th test sweep minus k-th base sweep, NaN ignored."""
    b_rows, t_rows = np.flatnonzero(~test), np.flatnonzero(test)
    k = min(b_rows.size, t_rows.size)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmean(matrix[t_rows[:k]] - matrix[b_rows[:k]], axis=0)


def baseline_numpy(path: str) -> dict:
    """The plain pass over the channels: columnar blobs -> arrays -> per-channel mean of paired C/N
    differences."""
    t0 = time.perf_counter()
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    test, cn = _read_channels(conn)
    conn.close()
    delta = _paired_mean(cn, test)
    return {"seconds": time.perf_counter() - t0, "channels": int(delta.size)}


def baseline_with_stations(path: str) -> dict:
    """The plain pass over the same data the command reads: the channel pass above, plus the
    station blobs (carrier, C/N) grouped by carrier rounded to 10 kHz, and the per-station mean
    of paired C/N differences."""
    t0 = time.perf_counter()
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    test, cn = _read_channels(conn)
    rows = conn.execute("SELECT v.n_stations, v.freq_hz, v.cn_db FROM station_vectors v"
                        " JOIN sweeps s ON s.id = v.sweep_id ORDER BY s.started_utc").fetchall()
    conn.close()
    delta = _paired_mean(cn, test)
    counts = np.fromiter((r[0] for r in rows), np.int64, count=len(rows))
    carrier = np.frombuffer(b"".join(r[1] for r in rows), "<f8")
    station_cn = np.frombuffer(b"".join(r[2] for r in rows), "<f8")
    key = np.rint(carrier / 1e4).astype(np.int64)
    key -= key.min(initial=0)
    present = np.bincount(key) > 0
    column = (np.cumsum(present) - 1)[key]
    matrix = np.full((len(rows), int(present.sum())), np.nan)
    matrix[np.repeat(np.arange(len(rows)), counts), column] = station_cn
    station_delta = _paired_mean(matrix, test)
    return {"seconds": time.perf_counter() - t0, "channels": int(delta.size), "stations": int(station_delta.size)}


def run_stage(stage: str, path: str) -> dict:
    """Baseline, the command, baseline again, in this process; peak memory of the whole child."""
    import contextlib
    import io

    from bandcensus.cli import main as cli

    before, before_s = baseline_numpy(path), baseline_with_stations(path)
    argv = ["compare", "--db", path, "--base", "bare", "--test", "preamp-a"] if stage == "compare" else \
        ["report", "--db", path, "--base", "bare", "--test", "preamp-a", "--out", str(Path(path).with_suffix(".html"))]
    sink = io.StringIO()
    t0, c0 = time.perf_counter(), _cpu_s()
    with contextlib.redirect_stdout(sink):
        code = cli(argv)
    seconds, cpu = time.perf_counter() - t0, _cpu_s() - c0
    after_s, after = baseline_with_stations(path), baseline_numpy(path)
    return {"code": code, "seconds": seconds, "cpu_s": cpu, "baseline_s": 0.5 * (before["seconds"] + after["seconds"]),
            "baseline_stations_s": 0.5 * (before_s["seconds"] + after_s["seconds"]),
            "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
            "printed_lines": sink.getvalue().count("\n"), "first_line": sink.getvalue().splitlines()[0][:160]}


def _child(stage: str, path: Path) -> dict:
    out = subprocess.run([sys.executable, __file__, "--stage", stage, "--db", str(path)],
                         capture_output=True, text=True, check=True, env=dict(os.environ))
    return json.loads(out.stdout)


def _time_database(path: Path, repeat: int = 1) -> dict:
    """Both stages on one database (``repeat`` children each, interleaved); prints best and median
    and returns the best run of each stage."""
    runs: dict[str, list[dict]] = {"compare": [], "report": []}
    for _ in range(repeat):
        for stage in runs:
            r = _child(stage, path)
            r["ratio"] = r["seconds"] / r["baseline_s"]
            r["ratio_stations"] = r["seconds"] / r["baseline_stations_s"]
            runs[stage].append(r)
    out = {}
    for stage, goal in (("compare", 3.0), ("report", 6.0)):
        rs = sorted(runs[stage], key=lambda r: r["seconds"])
        best, med = rs[0], statistics.median
        for label, pick in (("best", lambda key: best[key]), ("median", lambda key: med([r[key] for r in rs]))):
            if label == "median" and len(rs) == 1:
                continue
            print(f"{stage} ({label} of {len(rs)}): exit {best['code']}, {pick('seconds'):.2f} s wall "
                  f"({pick('cpu_s'):.2f} s CPU); plain numpy, channels {pick('baseline_s'):.2f} s: "
                  f"{pick('ratio'):.2f}x; channels + stations {pick('baseline_stations_s'):.2f} s: "
                  f"{pick('ratio_stations'):.2f}x (goal {goal:g}x); peak RSS {pick('peak_rss_mb'):.0f} MB "
                  f"(goal < 1024 MB); printed {best['printed_lines']} lines")
        print(f"  first line: {best['first_line']}")
        out[stage] = best
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=float, nargs="+", default=[10e6],
                    help="channel readings to build (206 per sweep); several sizes (e.g. 1e6 10e6) are timed in "
                         "turn and their growth printed")
    ap.add_argument("--keep", action="store_true")
    ap.add_argument("--repeat", type=int, default=1, help="children per stage (interleaved); best and median printed")
    ap.add_argument("--stage", choices=["compare", "report"])
    ap.add_argument("--db", help="time an existing database (e.g. one kept with --keep) instead of building one")
    args = ap.parse_args()
    if args.stage:
        print(json.dumps(run_stage(args.stage, args.db)))
        return
    if args.db is not None:
        path = Path(args.db)
        print(f"timing the existing database {path} ({path.stat().st_size / 1e9:.2f} GB)")
        _time_database(path, args.repeat)
        return
    results = []
    for rows in args.rows:
        folder = Path(tempfile.mkdtemp(prefix="bandcensus-bench-", dir="/tmp"))
        path = folder / "week.db"
        try:
            info = build(path, int(round(rows / N_CHANNELS)))
            print(f"built {info['sweeps']} sweeps, {info['channel_rows']:,} channel readings, "
                  f"{info['station_rows']:,} station rows, {info['db_bytes'] / 1e9:.2f} GB in {info['build_s']:.0f} s "
                  "(not the benchmark)")
            results.append((info["channel_rows"], _time_database(path, args.repeat)))
        finally:
            if not args.keep:
                for p in folder.glob("*"):
                    p.unlink()
                folder.rmdir()
            else:
                print(f"kept {path}")
    for (n0, r0), (n1, r1) in zip(results, results[1:]):
        for stage in ("compare", "report"):
            print(f"growth {n0:,} -> {n1:,} readings ({n1 / n0:.1f}x): {stage} {r1[stage]['seconds'] / r0[stage]['seconds']:.1f}x "
                  f"wall, {r1[stage]['cpu_s'] / r0[stage]['cpu_s']:.1f}x CPU; baseline "
                  f"{r1[stage]['baseline_s'] / r0[stage]['baseline_s']:.1f}x (channels), "
                  f"{r1[stage]['baseline_stations_s'] / r0[stage]['baseline_stations_s']:.1f}x (channels + stations)")


if __name__ == "__main__":
    main()
