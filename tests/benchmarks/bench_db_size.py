"""Database bytes per replayed sweep of the bundled demo, spectra thinned or at full resolution.

Run from the project root:  PYTHONPATH=. python tests/benchmarks/bench_db_size.py

Replays the demo's antenna recordings (europe band, default settings: 18 hops of 2048 bins)
and its noise-input recordings into new databases, once as stored now (antenna spectra
thinned, :mod:`survey.spectra_codec`) and once with every spectrum at full resolution (the
previous storage), and prints the file bytes per sweep (after the run's WAL checkpoint, minus
the bytes of a database holding one sweep, so the schema's fixed pages do not count) and, where
SQLite's ``dbstat`` table is compiled in, the bytes of each table. Asserts nothing.
"""

from __future__ import annotations

import contextlib
import io
import sqlite3
import tempfile
from pathlib import Path

from bandcensus.cli import main as cli
from bandcensus.demo import demo_recordings
from survey import spectra_codec


def _replay(metas: list[Path], db: Path) -> None:
    with contextlib.redirect_stdout(io.StringIO()):
        if cli(["replay", *map(str, metas), "--db", str(db), "--quiet"]) != 0:
            raise SystemExit("replay failed")


def _per_table(db: Path) -> dict[str, int]:
    conn = sqlite3.connect(db)
    try:
        rows = conn.execute("SELECT name, SUM(pgsize) FROM dbstat GROUP BY name ORDER BY 2 DESC").fetchall()
    except sqlite3.OperationalError:
        rows = []
    finally:
        conn.close()
    return {name: int(size) for name, size in rows}


def measure(metas: list[Path], folder: Path, tag: str) -> tuple[float, dict[str, int]]:
    one, many = folder / f"{tag}-one.db", folder / f"{tag}-many.db"
    _replay(metas[:1], one)
    _replay(metas, many)
    per_sweep = (many.stat().st_size - one.stat().st_size) / (len(metas) - 1)
    return per_sweep, {k: v // len(metas) for k, v in _per_table(many).items()}


def main() -> None:
    metas = demo_recordings()
    groups = {"antenna": [m for m in metas if m.name.endswith("_antenna.sigmf-meta")],
              "noise inputs": [m for m in metas if not m.name.endswith("_antenna.sigmf-meta")]}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for what, subset in groups.items():
            now, now_tables = measure(subset, folder, f"now-{what[:3]}")
            with contextlib.ExitStack() as stack:
                saved = spectra_codec.THINNED_INPUTS
                spectra_codec.THINNED_INPUTS = ()
                stack.callback(setattr, spectra_codec, "THINNED_INPUTS", saved)
                full, full_tables = measure(subset, folder, f"full-{what[:3]}")
            print(f"{what} sweeps ({len(subset)} replayed): {now / 1024:.1f} KB per sweep as stored now, "
                  f"{full / 1024:.1f} KB with every spectrum at full resolution")
            for name in sorted(set(now_tables) | set(full_tables), key=lambda n: -full_tables.get(n, 0)):
                print(f"    {name:<28} {now_tables.get(name, 0) / 1024:6.1f} KB now   "
                      f"{full_tables.get(name, 0) / 1024:6.1f} KB full")


if __name__ == "__main__":
    main()
