"""Peak memory of ``bandcensus replay`` against recording size (benchmark, not a test).

Run: ``PYTHONPATH=. python tests/benchmarks/bench_replay_memory.py [size_mib ...]`` (default
512 and 4096 MiB). For each size a *sparse* cu8 recording (the file system stores no blocks for
the holes, so a 4 GiB file costs no disk) with four captures at different centres is replayed in
a child process; its peak resident memory (``ru_maxrss`` of the child) is printed beside a
baseline: the same command on a 16 MiB recording, run interleaved in the same session. The
holes read as zeros, i.e. constant samples, so the replay reports "no signal"; the DSP work per
hop is the same as for real samples. Asserts nothing. With ``--checksum`` the recordings also
carry ``core:sha512``, so the streamed checksum pass over the whole file is measured too.
"""

from __future__ import annotations

import hashlib
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
CENTERS_HZ = (88.9e6, 91.3e6, 96.1e6, 103.3e6)


def make_sparse(folder: Path, name: str, size_mib: int, checksum: bool) -> Path:
    data = folder / f"{name}.sigmf-data"
    size = size_mib << 20
    with open(data, "wb") as fh:
        fh.truncate(size)
    n = size // 2
    g = {"core:datatype": "cu8", "core:sample_rate": 2_400_000.0, "core:version": "1.2.0",
         "core:num_channels": 1}
    if checksum:
        h = hashlib.sha512()
        with open(data, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 24), b""):
                h.update(block)
        g["core:sha512"] = h.hexdigest()
    caps = [{"core:sample_start": k * (n // len(CENTERS_HZ)), "core:frequency": f}
            for k, f in enumerate(CENTERS_HZ)]
    meta = folder / f"{name}.sigmf-meta"
    meta.write_text(json.dumps({"global": g, "captures": caps, "annotations": []}))
    return meta


def replay_peak_mib(meta: Path, db: Path) -> tuple[float, float, int]:
    """(peak RSS MiB of the child, seconds, exit code)."""
    code = ("import resource, sys; from bandcensus.cli import main; c = main(sys.argv[1:]); "
            "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr); sys.exit(c)")
    t0 = time.monotonic()
    done = subprocess.run([sys.executable, "-c", code, "replay", str(meta), "--db", str(db), "--config", "x",
                           "--quiet"], capture_output=True, text=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))
    took = time.monotonic() - t0
    peak_kib = int(done.stderr.strip().splitlines()[-1]) if done.stderr.strip() else -1
    return peak_kib / 1024.0, took, done.returncode


def main(argv: list[str]) -> None:
    checksum = "--checksum" in argv
    sizes = [int(a) for a in argv if not a.startswith("--")] or [512, 4096]
    with tempfile.TemporaryDirectory(prefix="bench-replay-mem-") as tmp:
        folder = Path(tmp)
        base = make_sparse(folder, "base", 16, checksum)
        print(f"replay peak memory (sparse cu8, 4 captures{', with core:sha512' if checksum else ''})")
        for size in sizes:
            meta = make_sparse(folder, f"r{size}", size, checksum)
            b_peak, b_s, b_code = replay_peak_mib(base, folder / f"b{size}.db")
            peak, took, code = replay_peak_mib(meta, folder / f"r{size}.db")
            print(f"  {size:6d} MiB: peak {peak:7.1f} MiB in {took:6.1f} s (exit {code}); baseline 16 MiB: "
                  f"{b_peak:7.1f} MiB in {b_s:5.1f} s (exit {b_code}); ratio {peak / b_peak:5.2f}")
            meta.with_suffix(".sigmf-data").unlink()


if __name__ == "__main__":
    main(sys.argv[1:])
