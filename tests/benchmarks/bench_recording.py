"""Speed of SigMF recording and replay against plain baselines in the same run.

Run: ``PYTHONPATH=. python tests/benchmarks/bench_recording.py [--size-mib 64] [--reps 7]``
(cu8 in captures of 0.1 s at 2.4 MS/s). Each pair below is run interleaved (baseline, then the
tool, in every repetition) after one untimed warm-up of each; best and median are printed with
the ratio tool / baseline (1.0 = as fast as the baseline). Asserts nothing.

* write: ``SweepRecorder`` (stream, hash, metadata, validate, fsync) against ``file.write`` of the
  same bytes (no fsync: the baseline is the least a writer does).
* open: ``open_recording`` with the SHA-512 check against a plain ``hashlib.sha512`` over 4 MiB
  chunks of the data file (the checksum is the cost); without the check, the seconds alone.
* read: every capture through ``RecordingSource.read`` (memory map, no copy) plus
  ``survey.dsp.to_complex64``, against ``numpy.fromfile`` of each capture's byte range plus the
  same conversion.
"""

from __future__ import annotations

import argparse
import hashlib
import shutil
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

from survey.dsp import to_complex64
from survey.recorder import SweepRecorder
from survey.records import IQBlock
from survey.sources.recording import open_recording

FS_HZ = 2_400_000.0


def _pair(baseline, tool, reps: int) -> tuple[list[float], list[float]]:
    """Seconds of ``baseline`` and ``tool``, interleaved, after one untimed run of each."""
    baseline()
    tool()
    base_t, tool_t = [], []
    for _ in range(reps):
        for fn, out in ((baseline, base_t), (tool, tool_t)):
            t0 = time.perf_counter()
            fn()
            out.append(time.perf_counter() - t0)
    return base_t, tool_t


def _line(what: str, name: str, times: list[float], base: list[float] | None = None) -> str:
    best, med = min(times), statistics.median(times)
    ratio = f"   tool/baseline {best / min(base):5.2f} best, {med / statistics.median(base):5.2f} median" if base else ""
    return f"{what:<6} {name:<34} {best:7.3f} s best {med:7.3f} s median{ratio}"


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size-mib", type=int, default=64)
    parser.add_argument("--reps", type=int, default=7)
    args = parser.parse_args(argv)
    n = int(0.1 * FS_HZ)
    n_caps = max(1, args.size_mib * 2**20 // (2 * n))
    rng = np.random.default_rng(0)
    chunk = rng.integers(0, 256, 2 * n, dtype=np.uint8)
    blocks = [IQBlock(88e6 + 1e6 * (k % 20), FS_HZ, "cu8", chunk, "2026-03-01T12:00:00.000000Z")
              for k in range(n_caps)]
    tmp = Path(tempfile.mkdtemp(prefix="bench_rec_"))
    try:
        written = []

        def write_ours():
            folder = tmp / f"w{len(written)}"
            folder.mkdir()
            rec = SweepRecorder(folder, "bench", configuration="bare", input="antenna", gain_db=20.0, ppm=0,
                                device="benchmark", seed=None, band="europe", channel_bw_hz=200e3)
            for b in blocks:
                rec.add_block(b)
            written.append(rec.finish())
            if len(written) > 1:
                shutil.rmtree(written[-2].parent, ignore_errors=True)

        def write_plain():
            with open(tmp / "plain.bin", "wb") as fh:
                for b in blocks:
                    fh.write(b.raw.data)

        mib = n_caps * 2 * n / 2**20
        print(f"data: {mib:.0f} MiB cu8 in {n_caps} captures of {n} samples; best and median of {args.reps}")
        base, ours = _pair(write_plain, write_ours, args.reps)
        print(_line("write", "plain file.write (baseline)", base))
        print(_line("write", "SweepRecorder", ours, base))
        meta = written[-1]
        data_path = meta.with_name(meta.name[: -len(".sigmf-meta")] + ".sigmf-data")

        def sha_plain():
            h = hashlib.sha512()
            with open(data_path, "rb") as fh:
                while block := fh.read(4 << 20):
                    h.update(block)
            return h.hexdigest()

        base, ours = _pair(sha_plain, lambda: open_recording(meta), args.reps)
        print(_line("open", "hashlib.sha512, 4 MiB (baseline)", base))
        print(_line("open", "open_recording with checksum", ours, base))
        _, skip = _pair(lambda: None, lambda: open_recording(meta, skip_checksum=True), args.reps)
        print(_line("open", "open_recording, skip_checksum", skip))

        src = open_recording(meta, skip_checksum=True)
        starts = np.cumsum([0, *src.capture_lengths()])

        def read_ours():
            total = 0.0
            for fc in src.fixed_centers_hz:
                src.tune(fc)
                total += float(to_complex64(src.read(None).raw, "cu8")[0].real)
            return total

        def read_plain():
            total = 0.0
            for a, b in zip(starts[:-1], starts[1:]):
                raw = np.fromfile(data_path, dtype=np.uint8, count=2 * int(b - a), offset=2 * int(a))
                total += float(to_complex64(raw, "cu8")[0].real)
            return total

        base, ours = _pair(read_plain, read_ours, args.reps)
        print(_line("read", "numpy.fromfile + to_complex64", base))
        print(_line("read", "memmap read + to_complex64", ours, base))
        print(f"       = {n_caps * n / FS_HZ / min(ours):.0f} x real time at 2.4 MS/s (best)")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
