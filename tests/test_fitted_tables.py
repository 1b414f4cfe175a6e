"""Tables as the user sees them at 60, 80 and 120 characters: nothing cut, nothing wrapped mid-word."""

import io
import re

import pytest
from rich.console import Console

from bandcensus.commands._tables import (
    CHANNEL_COLUMNS,
    Column,
    channel_cells,
    fit_columns,
    print_fitted,
    render_fitted,
    wrap_title,
)

TITLE = "Channels of preamp-a (antenna), medians over 48 sweeps in /tmp/a-rather-long-folder-name/survey.db"
ROWS = [
    {"freq_hz": 87_600_000, "power_dbfs": -61.234, "noise_dbfs": -80.5, "cn_db": 19.1, "received": True, "sweeps": 48},
    {"freq_hz": 107_900_000, "power_dbfs": -80.2, "noise_dbfs": -80.4, "cn_db": None, "received": False, "sweeps": 48},
]
CELLS = [channel_cells(r) for r in ROWS]


@pytest.mark.parametrize("width", [60, 80, 120])
def test_lines_fit_and_every_number_is_whole(width):
    text = render_fitted(TITLE, CHANNEL_COLUMNS, CELLS, width)
    lines = text.splitlines()
    assert max(len(line) for line in lines) <= width
    for value in ("87.60", "107.90", "-61.2", "19.1", "not received"):
        assert value in text
    assert "…" not in text
    # every word of the title appears whole on one line
    title_words = set(TITLE.split())
    printed_words = set(" ".join(lines[:4]).split())
    assert title_words <= printed_words


def test_columns_are_shortened_then_dropped_as_the_width_shrinks():
    wide = fit_columns(CHANNEL_COLUMNS, CELLS, 120)
    assert wide.dropped == () and "P dBFS" in wide.headers
    mid = fit_columns(CHANNEL_COLUMNS, CELLS, 60)
    assert mid.width <= 60
    narrow = fit_columns(CHANNEL_COLUMNS, CELLS, 40)
    assert narrow.width <= 40
    assert narrow.dropped[0] == "sweeps"  # drop_order 1 goes first
    assert "C/N" in narrow.headers and "MHz" in narrow.headers
    text = render_fitted(TITLE, CHANNEL_COLUMNS, CELLS, 40)
    assert "left out at this width: sweeps" in text


def test_when_nothing_fits_the_table_is_printed_whole():
    cols = [Column("frequency in megahertz"), Column("level", drop_order=1)]
    rows = [["97.200000000", "-44.54"]]
    layout = fit_columns(cols, rows, 10)
    assert layout.dropped == ("level",) and layout.width > 10
    text = render_fitted("A title", cols, rows, 10)
    assert "97.200000000" in text


def test_title_wraps_between_words_only():
    lines = wrap_title("alpha beta gamma /a/very/long/path/that/does/not/fit", 12)
    assert lines[0] == "alpha beta" and "/a/very/long/path/that/does/not/fit" in lines
    assert all(" " not in w for w in lines[-1:])


def test_print_fitted_uses_the_terminal_width():
    buffer = io.StringIO()
    console = Console(file=buffer, width=60, force_terminal=True, color_system=None)
    layout = print_fitted(TITLE, CHANNEL_COLUMNS, CELLS, console=console)
    out = re.sub(r"\x1b\[[0-9;]*m", "", buffer.getvalue())
    assert layout.width <= 60 and max(len(x) for x in out.splitlines()) <= 60


def test_numbers_are_right_aligned():
    text = render_fitted("t", [Column("MHz")], [["87.6"], ["107.90"]], 80)
    assert "│   87.6 │" in text and "│ 107.90 │" in text
