"""Options and output helpers shared by the subcommands (thin: parsing and printing only)."""

from __future__ import annotations

import json
import math
from typing import Any

import click

db_option = click.option(
    "--db", "db_path", required=True, type=click.Path(dir_okay=False),
    help="Survey database file (SQLite).",
)
json_option = click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON.")


def _clean(value: Any) -> Any:
    """Make numpy values and non-finite floats JSON-safe (NaN and inf become null)."""
    import numpy as np  # on the JSON path only: listing the commands does not load numpy

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


class FiniteFloat(click.ParamType):
    """A float option that must be finite (NaN and infinities are refused), optionally in a range.

    click's ``FloatRange`` lets NaN through (every comparison with NaN is false), so a NaN
    would silently change verdicts or disable a limit downstream.
    """

    name = "float"

    def __init__(self, min: float | None = None, max: float | None = None, *, min_open: bool = False,
                 max_open: bool = False) -> None:
        self.min, self.max, self.min_open, self.max_open = min, max, min_open, max_open

    def convert(self, value, param, ctx):
        if isinstance(value, float) and math.isfinite(value):
            number = value
        else:
            try:
                number = float(value)
            except (TypeError, ValueError, OverflowError):
                self.fail(f"{value!r} is not a number", param, ctx)
        if not math.isfinite(number):
            self.fail(f"{value!r} is not a finite number; give an ordinary number", param, ctx)
        low_bad = self.min is not None and (number <= self.min if self.min_open else number < self.min)
        high_bad = self.max is not None and (number >= self.max if self.max_open else number > self.max)
        if low_bad or high_bad:
            lo = "" if self.min is None else f"{self.min:g} {'<' if self.min_open else '<='} "
            hi = "" if self.max is None else f" {'<' if self.max_open else '<='} {self.max:g}"
            self.fail(f"{number:g} is not in the range {lo}x{hi}", param, ctx)
        return number

    def __repr__(self) -> str:
        return f"FiniteFloat({self.min}, {self.max})"


def finite_float_options(command: click.Command) -> click.Command:
    """Make every float option of ``command`` (plain ``float`` or ``FloatRange``) a :class:`FiniteFloat`.

    Applied by the command group to every subcommand, so that no float option anywhere lets
    NaN or an infinity in; an option already typed :class:`FiniteFloat` is left as it is.
    """
    for param in command.params:
        t = param.type
        if isinstance(t, FiniteFloat):
            continue
        if isinstance(t, click.FloatRange):
            param.type = FiniteFloat(t.min, t.max, min_open=t.min_open, max_open=t.max_open)
        elif t is click.FLOAT or isinstance(t, click.types.FloatParamType):
            param.type = FiniteFloat()
    return command


#: Random seeds: numpy accepts any non-negative integer; SQLite stores up to 2**63 - 1.
seed_type = click.IntRange(0, 2**63 - 1)
