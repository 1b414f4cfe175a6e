"""The ``--calibration FILE`` option and the absolute-level columns it adds to a table.

Without a calibration every level stays in dBFS and the output says so
(:data:`bandcensus.commands._text.UNCALIBRATED_NOTE`). With one, rows gain ``_dbm`` and ``_dbuv``
(50 ohm) beside each ``_dbfs`` value and ``_dbm_hz`` / ``_above_kt0_db`` beside each density.
"""

from __future__ import annotations

from typing import Iterable, Mapping

import click

from analysis.calibration import Calibration, add_absolute_levels, load_calibration

calibration_option = click.option(
    "--calibration", "calibration_path", type=click.Path(dir_okay=False),
    help="Calibration file from 'bandcensus calibrate': also show levels in dBm and dBuV at the receiver input.",
)


def load_optional(path: str | None) -> Calibration | None:
    """The calibration in ``path``, or None when no file was given."""
    return None if not path else load_calibration(path)


def with_levels(rows: Iterable[Mapping], cal: Calibration | None, gain_db: float | None,
                freq_key: str = "freq_hz") -> list[dict]:
    """``rows`` with absolute columns added when a calibration is given (unchanged copies otherwise)."""
    if cal is None:
        return [dict(r) for r in rows]
    return add_absolute_levels(rows, cal, gain_db, freq_key=freq_key)
