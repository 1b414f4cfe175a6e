"""Speed of SigMF recording and replay against plain baselines in the same run.

Run: ``PYTHONPATH=. python tests/benchmarks/bench_recording.py [size_mib]`` (default 256 MiB of
cu8 in captures of 0.1 s at 2.4 MS/s). Prints seconds and ratios; asserts nothing.

* open: ``open_recording`` with the SHA-512 check (sigmf's 4 KiB-chunk hash), without it, and a
  plain ``hashlib.sha512`` over 4 MiB chunks as the baseline for the hashing cost.
* read: every capture through ``RecordingSource.read`` (memory map, no copy) plus
  ``survey.dsp.to_complex64``, against sigmf's ``read_samples_in_capture`` (a read and an
  autoscale to complex64).
* write: ``SweepRecorder`` (stream, hash, metadata, validate, fsync) against ``file.write`` of the
  same bytes.
"""

from __future__ import annotations

import hashlib
import shutil
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import sigmf

from survey.dsp import to_complex64
from survey.recorder import SweepRecorder
from survey.records import IQBlock
from survey.sources.recording import open_recording

FS_HZ = 2_400_000.0


def _t(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def main(size_mib: int = 256) -> None:
    n = int(0.1 * FS_HZ)
    n_caps = max(1, size_mib * 2**20 // (2 * n))
    rng = np.random.default_rng(0)
    chunk = rng.integers(0, 256, 2 * n, dtype=np.uint8)
    blocks = [IQBlock(88e6 + 1e6 * (k % 20), FS_HZ, "cu8", chunk, "2026-03-01T12:00:00.000000Z")
              for k in range(n_caps)]
    tmp = Path(tempfile.mkdtemp(prefix="bench_rec_"))
    try:
        def write_ours():
            rec = SweepRecorder(tmp, "bench", configuration="bare", input="antenna", gain_db=20.0, ppm=0,
                                device="benchmark", seed=None, band="europe", channel_bw_hz=200e3)
            for b in blocks:
                rec.add_block(b)
            return rec.finish()

        def write_plain():
            with open(tmp / "plain.bin", "wb") as fh:
                for b in blocks:
                    fh.write(b.raw.data)

        t_plain_w, _ = _t(write_plain)
        t_ours_w, meta = _t(write_ours)
        mib = n_caps * 2 * n / 2**20
        print(f"data: {mib:.0f} MiB cu8 in {n_caps} captures of {n} samples")
        print(f"write  plain file.write       {t_plain_w:7.3f} s")
        print(f"write  SweepRecorder          {t_ours_w:7.3f} s   ratio {t_ours_w / t_plain_w:5.2f}")

        def sha_plain():
            h = hashlib.sha512()
            with open(tmp / "bench.sigmf-data", "rb") as fh:
                while block := fh.read(4 << 20):
                    h.update(block)
            return h.hexdigest()

        t_sha, _ = _t(sha_plain)
        t_open_check, src = _t(lambda: open_recording(meta))
        t_open_skip, _ = _t(lambda: open_recording(meta, skip_checksum=True))
        print(f"hash   hashlib 4 MiB chunks   {t_sha:7.3f} s")
        print(f"open   with checksum          {t_open_check:7.3f} s   ratio to hashlib {t_open_check / t_sha:5.2f}")
        print(f"open   skip_checksum=True     {t_open_skip:7.4f} s   ratio to checked {t_open_skip / t_open_check:7.4f}")

        def read_ours():
            total = 0.0
            for fc in src.fixed_centers_hz:
                src.tune(fc)
                total += float(to_complex64(src.read(None).raw, "cu8")[0].real)
            return total

        def read_sigmf():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                sf = sigmf.fromfile(str(meta), skip_checksum=True)
                return sum(float(sf.read_samples_in_capture(k)[0].real) for k in range(n_caps))

        t_read_ours, _ = _t(read_ours)
        t_read_sigmf, _ = _t(read_sigmf)
        print(f"read   sigmf read_samples_in_capture {t_read_sigmf:7.3f} s")
        print(f"read   memmap + to_complex64         {t_read_ours:7.3f} s   ratio {t_read_ours / t_read_sigmf:5.2f}")
        print(f"       = {n_caps * n / FS_HZ / t_read_ours:.0f} x real time at 2.4 MS/s")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 256)
