"""Malformed-recording trials for ``bandcensus replay`` (a soak script, not a test).

Run: ``PYTHONPATH=. python tests/benchmarks/trial_bad_recordings.py [n]`` (default 120).
Each trial copies a demo recording and damages it one way chosen at random: a metadata field
deleted, given the wrong type, a huge or non-finite number, an out-of-calendar time, deep
nesting, truncated or extended data, NaN samples in a float copy, a binary meta file. The
replay must end with exit 0 (the damage was harmless) or exit 1 with exactly one line
``Error: ...`` naming the file, and must create no database when it refuses. Prints counts.
"""

from __future__ import annotations

import contextlib
import io
import json
import random
import shutil
import sys
import tempfile
from pathlib import Path

import numpy as np

from bandcensus.cli import main

ROOT = Path(__file__).resolve().parents[2]
DEMO = sorted((ROOT / "recordings_demo" / "sigmf").glob("*.sigmf-meta"))[0]
KEYS = ["core:datatype", "core:sample_rate", "core:version", "core:num_channels", "bandcensus:ppm",
        "bandcensus:seed", "bandcensus:gain_db", "bandcensus:configuration", "bandcensus:input"]
VALUES = [None, "", "x", -1, 0, 1e30, 10**30, "NaN", [], {}, True, -1e308, 2**63, "9999-12-31T23:59:59Z"]


def damage(folder: Path, rng: random.Random) -> Path:
    meta = json.loads(DEMO.read_text())
    data = DEMO.with_suffix(".sigmf-data").read_bytes()
    kind = rng.choice(["drop", "value", "capture", "time", "nest", "truncate", "extend", "nan", "binary"])
    if kind == "drop":
        meta["global"].pop(rng.choice(KEYS), None)
    elif kind == "value":
        meta["global"][rng.choice(KEYS)] = rng.choice(VALUES)
    elif kind == "capture":
        cap = rng.choice(meta["captures"])
        cap[rng.choice(["core:frequency", "core:sample_start", "core:datetime"])] = rng.choice(VALUES)
    elif kind == "time":
        rng.choice(meta["captures"])["core:datetime"] = rng.choice(["9999-12-31T23:59:59.999Z", "0001-01-01T00:00:00Z",
                                                                     "yesterday", "2025-13-45T99:99:99Z"])
    elif kind == "truncate":
        data = data[: rng.randrange(0, len(data))]
    elif kind == "extend":
        data = data + bytes(rng.randrange(1, 5000))
    elif kind == "nan":
        raw = np.frombuffer(data, np.uint8).astype(np.float32)
        raw = (raw - 127.5) / 127.5
        raw[rng.randrange(raw.size)] = rng.choice([np.nan, np.inf, -np.inf])
        data = raw.astype("<f4").tobytes()
        meta["global"]["core:datatype"] = "cf32_le"
    meta["global"].pop("core:sha512", None)
    out = folder / "bad.sigmf-meta"
    if kind == "nest":
        out.write_text('{"global":' + "[" * rng.randrange(1000, 300_000) + "]" * 0 + "}")
    elif kind == "binary":
        out.write_bytes(bytes(rng.randrange(256) for _ in range(2000)))
    else:
        out.write_text(json.dumps(meta))
    (folder / "bad.sigmf-data").write_bytes(data)
    return out


def main_trials(n: int) -> None:
    rng = random.Random(17)
    clean = refused = bad = 0
    for _ in range(n):
        with tempfile.TemporaryDirectory(prefix="badrec-") as tmp:
            folder = Path(tmp)
            meta = damage(folder, rng)
            db = folder / "t.db"
            err = io.StringIO()
            with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
                code = main(["replay", str(meta), "--db", str(db), "--quiet", "--config", "x"])
            lines = [line for line in err.getvalue().splitlines() if line.strip()]
            if code == 0:
                clean += 1
            elif (code == 1 and len(lines) == 1 and lines[0].startswith("Error: ") and str(meta) in lines[0]
                  and not db.exists() and "unexpected" not in lines[0]):
                refused += 1
            else:
                bad += 1
                print(f"  not clean: exit {code}: {err.getvalue().strip()[:300]}")
    print(f"{n} damaged recordings: {clean} replayed (harmless damage), {refused} refused with one line "
          f"naming the file before any write, {bad} otherwise")


if __name__ == "__main__":
    main_trials(int(sys.argv[1]) if len(sys.argv) > 1 else 120)
