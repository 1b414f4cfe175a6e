"""CSV output shared by every analysis command: honest precision, a header, spreadsheet-safe text.

Numbers are rounded to the precision they carry, chosen by the column name's unit suffix
(the project names every quantity with its unit, ``cn_db``, ``freq_hz``, ``temp_k``):

================================================  ===========================
suffix                                            written as
================================================  ===========================
``_db``, ``_dbfs``, ``_dbm``, ``_dbuv`` and the    2 decimals (0.01 dB)
densities ``_dbfs_hz``, ``_dbm_hz``
``_hz``                                           integer (1 Hz)
``_khz``                                          3 decimals (1 Hz)
``_mhz``                                          up to 6 decimals (1 Hz), trailing zeros dropped
``_k``                                            1 decimal (0.1 K)
``_fraction``, ``_ratio``                         4 decimals
``_percent``                                      2 decimals
``_s``                                            3 decimals (1 ms)
any other float                                   6 significant digits
================================================  ===========================

Integers are written as they are; booleans as ``true``/``false``; ``None``, NaN and infinities
as an empty cell (no value). Text cells starting with ``=``, ``+``, ``-``, ``@``, a tab or a
carriage return are prefixed with a single quote so a spreadsheet shows them as text instead of
evaluating them (the mitigation recommended by the OWASP "CSV Injection" page); numbers are
never prefixed or otherwise altered, so ``-44.54`` stays a number.
"""

from __future__ import annotations

import csv
import io
import math
import sys
from typing import IO, Any, Iterable, Mapping, Sequence

import numpy as np

#: (suffix, decimals); longest suffixes first so ``_dbfs_hz`` is not taken for ``_hz``.
_DECIMALS: tuple[tuple[str, int], ...] = (
    ("_dbfs_hz", 2), ("_dbm_hz", 2), ("_db_hz", 2),
    ("_dbfs", 2), ("_dbuv", 2), ("_dbm", 2), ("_db", 2),
    ("_fraction", 4), ("_ratio", 4), ("_percent", 2),
    ("_mhz", 6), ("_khz", 3), ("_hz", 0), ("_k", 1), ("_s", 3),
)
#: Significant digits of floats whose column name carries no known unit.
DEFAULT_SIGNIFICANT = 6
#: First characters a spreadsheet would read as a formula or control character.
_UNSAFE_START = ("=", "+", "-", "@", "\t", "\r")


def decimals_for(column: str) -> int | None:
    """Decimals used for floats in ``column`` (0 means integer); None: no unit suffix known."""
    name = column.lower()
    for suffix, places in _DECIMALS:
        if name.endswith(suffix):
            return places
    return None


def safe_text(text: str) -> str:
    """Prefix a single quote to text a spreadsheet would evaluate (``=``, ``+``, ``-``, ``@``, tab, CR)."""
    return "'" + text if text.startswith(_UNSAFE_START) else text


def format_cell(column: str, value: Any) -> str:
    """One CSV cell: numbers rounded by the unit of ``column``, text made spreadsheet-safe."""
    if value is None:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        x = float(value)
        if not math.isfinite(x):
            return ""
        places = decimals_for(column)
        if places is None:
            return f"{x:.{DEFAULT_SIGNIFICANT}g}"
        if places == 0:
            return str(int(round(x)))
        if column.lower().endswith("_mhz"):
            text = f"{x:.{places}f}".rstrip("0")
            return text + "0" if text.endswith(".") else text
        text = f"{x:.{places}f}"
        return "0." + "0" * places if text == "-0." + "0" * places else text
    return safe_text(str(value))


def csv_text(rows: Iterable[Mapping[str, Any]], fields: Sequence[str]) -> str:
    """The rows as CSV text: a header line of ``fields``, then one line per row (``\\n`` endings).

    Keys of a row not in ``fields`` are ignored; a field missing from a row is an empty cell.
    """
    buffer = io.StringIO()
    write_csv(rows, fields, buffer)
    return buffer.getvalue()


def write_csv(rows: Iterable[Mapping[str, Any]], fields: Sequence[str], file: IO[str] | None = None) -> None:
    """Write the rows as CSV to ``file`` (default standard output); see :func:`csv_text`."""
    out = sys.stdout if file is None else file
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow([safe_text(str(f)) for f in fields])
    for row in rows:
        writer.writerow([format_cell(f, row.get(f)) for f in fields])
