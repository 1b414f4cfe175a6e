"""User-supplied station names: a CSV file of ``freq_mhz,name`` rows.

Format (UTF-8; a header row ``freq_mhz,name`` is optional; blank lines and lines starting with
``#`` are skipped)::

    freq_mhz,name
    89.6,Ridge Radio One
    102.4,"Valley Classic, relay"

Frequencies are in MHz (the edge unit) and are returned in Hz rounded to 1 kHz, so a name
matches a station found within :data:`MATCH_TOLERANCE_HZ` of it. Names fill in stations whose
RDS gives no PS; a name from RDS always wins.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

from survey.errors import NamesFileError

MATCH_TOLERANCE_HZ = 50_000.0


def read_station_names(path: str | Path) -> dict[int, str]:
    """``{freq_hz: name}`` from a ``freq_mhz,name`` CSV file; NamesFileError naming the bad line."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise NamesFileError(f"cannot read names file {p}: {exc}; give a UTF-8 CSV of freq_mhz,name rows") from exc
    names: dict[int, str] = {}
    for line_no, row in enumerate(csv.reader(text.splitlines()), start=1):
        if not row or not "".join(row).strip() or row[0].lstrip().startswith("#"):
            continue
        if line_no == 1 and row[0].strip().lower() == "freq_mhz":
            continue
        if len(row) != 2 or not row[1].strip():
            raise NamesFileError(f"{p} line {line_no}: expected freq_mhz,name (two fields), got {row!r}")
        try:
            mhz = float(row[0])
        except ValueError:
            mhz = math.nan
        if not (math.isfinite(mhz) and mhz > 0):
            raise NamesFileError(f"{p} line {line_no}: {row[0]!r} is not a frequency in MHz such as 98.7")
        hz = int(round(mhz * 1e3)) * 1000
        if hz in names:
            raise NamesFileError(f"{p} line {line_no}: {mhz} MHz is named twice; keep one row per frequency")
        names[hz] = row[1].strip()
    return names


def name_for(names: dict[int, str], freq_hz: float) -> str | None:
    """The name within :data:`MATCH_TOLERANCE_HZ` of ``freq_hz`` (the nearest), or None."""
    best = None
    for f, name in names.items():
        d = abs(f - float(freq_hz))
        if d <= MATCH_TOLERANCE_HZ and (best is None or d < best[0]):
            best = (d, name)
    return None if best is None else best[1]
