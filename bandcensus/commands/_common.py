"""Options and output helpers shared by the subcommands (thin: parsing and printing only)."""

from __future__ import annotations

import json
import math
from typing import Any

import click
import numpy as np

db_option = click.option(
    "--db", "db_path", required=True, type=click.Path(dir_okay=False),
    help="Survey database file (SQLite).",
)
json_option = click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON.")


def _clean(value: Any) -> Any:
    """Make numpy values and non-finite floats JSON-safe (NaN and inf become null)."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return [_clean(v) for v in value.tolist()]
    if isinstance(value, (np.bool_,)):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, (float, np.floating)):
        f = float(value)
        return f if math.isfinite(f) else None
    return value


def to_json(payload: Any) -> str:
    """Serialise ``payload`` as indented JSON with NaN/inf as null and numpy types converted."""
    return json.dumps(_clean(payload), indent=2, allow_nan=False)


def echo_json(payload: Any) -> None:
    """Print ``payload`` as JSON on standard output."""
    click.echo(to_json(payload))


def parse_mhz_range(text: str, option: str = "--target") -> tuple[float, float]:
    """Parse ``"88-100"`` (MHz) into ``(88e6, 100e6)`` Hz; raises click.BadParameter."""
    try:
        lo, hi = (float(p) for p in text.replace("–", "-").split("-", 1))
    except ValueError:
        raise click.BadParameter(f"expected START-STOP in MHz such as 88-100, got {text!r}", param_hint=option)
    if not (0 < lo < hi):
        raise click.BadParameter(f"start must be below stop and positive, got {text!r}", param_hint=option)
    return lo * 1e6, hi * 1e6
