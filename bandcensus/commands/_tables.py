"""Terminal tables (rich) that fit the terminal: columns abbreviated or dropped, never cut.

Two ways to print a table:

* :func:`print_fitted` (new output): the title is wrapped at word boundaries above the table;
  when the table is wider than the terminal, headers first switch to their short forms, then the
  columns marked droppable go (lowest ``drop_order`` first) and a note names them. A number is
  never ellipsised or wrapped inside a cell; if even the narrowest form does not fit, the table
  is printed whole and the terminal wraps the line.
* :func:`print_table` (older tables built directly with rich): printed at least 120 characters
  wide so that nothing is cut.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass
from typing import Iterable, Sequence

from rich.cells import cell_len
from rich.console import Console
from rich.table import Table

from bandcensus.commands._text import CN_LABEL

#: Characters a rich table adds per column (one space of padding each side plus one rule).
_PER_COLUMN = 3
#: Characters a rich table adds in total beyond its columns (the outer rule of the last column).
_PER_TABLE = 1


@dataclass(frozen=True)
class Column:
    """One column of a fitted table.

    ``short`` is the header used when the full one does not fit; ``drop_order`` marks a column
    that may be left out at narrow widths (1 goes first, then 2, ...; None: always shown).
    """

    header: str
    short: str | None = None
    justify: str = "right"
    drop_order: int | None = None


@dataclass(frozen=True)
class FittedLayout:
    """Which columns a fitted table shows and with which headers, and its width in characters."""

    kept: tuple[int, ...]
    headers: tuple[str, ...]
    dropped: tuple[str, ...]
    width: int


def _header_width(header: str) -> int:
    return max((cell_len(part) for part in header.split("\n")), default=0)


def _table_width(widths: Sequence[int]) -> int:
    return sum(w + _PER_COLUMN for w in widths) + _PER_TABLE


def fit_columns(columns: Sequence[Column], rows: Sequence[Sequence[str]], width: int) -> FittedLayout:
    """Choose headers and columns so the table is at most ``width`` characters wide.

    Steps, stopping at the first that fits: full headers; short headers; then dropping the
    droppable columns one at a time in ``drop_order``. When nothing fits, the narrowest form
    (short headers, every droppable column dropped) is returned with its true width.
    """
    cells = [max((cell_len(str(r[i])) for r in rows), default=0) for i in range(len(columns))]

    def layout(short: bool, dropped: set[int]) -> FittedLayout:
        kept = tuple(i for i in range(len(columns)) if i not in dropped)
        headers = tuple((columns[i].short or columns[i].header) if short else columns[i].header for i in kept)
        widths = [max(cells[i], _header_width(h)) for i, h in zip(kept, headers)]
        names = tuple(columns[i].header for i in sorted(dropped, key=lambda j: columns[j].drop_order or 0))
        return FittedLayout(kept, headers, names, _table_width(widths))

    for short in (False, True):
        candidate = layout(short, set())
        if candidate.width <= width:
            return candidate
    droppable = sorted((c.drop_order, i) for i, c in enumerate(columns) if c.drop_order is not None)
    dropped: set[int] = set()
    for _, i in droppable:
        dropped.add(i)
        candidate = layout(True, dropped)
        if candidate.width <= width:
            return candidate
    return candidate


def fitted_table(columns: Sequence[Column], rows: Sequence[Sequence[str]], width: int) -> tuple[Table, FittedLayout]:
    """A rich table of ``rows`` (already formatted text, one item per column) fitted to ``width``.

    Cells never wrap or get ellipsised: each column is given the width of its widest cell.
    """
    layout = fit_columns(columns, rows, width)
    table = Table(title=None, show_edge=True)
    for i, header in zip(layout.kept, layout.headers):
        natural = max([_header_width(header), *(cell_len(str(r[i])) for r in rows)])
        table.add_column(header, justify=columns[i].justify, no_wrap=True, min_width=natural)
    for r in rows:
        table.add_row(*(str(r[i]) for i in layout.kept))
    return table, layout


def wrap_title(title: str, width: int) -> list[str]:
    """Title lines of at most ``width`` characters, broken only between words.

    A single word longer than ``width`` (a long path) is kept whole on its own line.
    """
    return textwrap.wrap(title, width=max(width, 1), break_long_words=False, break_on_hyphens=False) or [""]


def render_fitted(title: str, columns: Sequence[Column], rows: Sequence[Sequence[str]], width: int) -> str:
    """The text :func:`print_fitted` prints at ``width`` characters (no colour codes)."""
    console = Console(width=width, record=True, force_terminal=False, color_system=None, file=_Discard())
    _print_fitted_on(console, title, columns, rows, width)
    return console.export_text()


def print_fitted(title: str, columns: Sequence[Column], rows: Sequence[Sequence[str]],
                 console: Console | None = None) -> FittedLayout:
    """Print a titled table fitted to the terminal width (120 characters when not a terminal)."""
    out = console or Console()
    width = out.width if out.is_terminal else max(120, out.width)
    return _print_fitted_on(out, title, columns, rows, width)


def _print_fitted_on(console: Console, title: str, columns: Sequence[Column], rows: Sequence[Sequence[str]],
                     width: int) -> FittedLayout:
    table, layout = fitted_table(columns, rows, width)
    kw = dict(no_wrap=True, overflow="ignore", crop=False, markup=False, highlight=False, soft_wrap=True)
    for line in wrap_title(title, width):
        console.print(line, **kw)
    console.print(table, width=max(width, layout.width), crop=False)
    if layout.dropped:
        for line in wrap_title(f"(left out at this width: {', '.join(layout.dropped)}; widen the terminal "
                               "or use --csv)", width):
            console.print(line, **kw)
    return layout


class _Discard:
    """A write-only sink for a recording console."""

    def write(self, text: str) -> int:
        return len(text)

    def flush(self) -> None:
        pass


# ---------------------------------------------------------------------------------------
# Per-channel tables (replay, channels)
# ---------------------------------------------------------------------------------------

#: Columns of the per-channel table, in the order of :func:`channel_cells`.
CHANNEL_COLUMNS = (
    Column("MHz"),
    Column("P dBFS", short="P"),
    Column("N dBFS", short="N", drop_order=2),
    Column(f"{CN_LABEL} dB", short=CN_LABEL),
    Column("received", short="rcvd", justify="center", drop_order=3),
    Column("sweeps", short="n", drop_order=1),
)


def channel_cells(r: dict) -> list[str]:
    """Formatted cells of one per-channel row (keys freq_hz, power_dbfs, noise_dbfs, cn_db, received, sweeps)."""
    cn = r.get("cn_db")
    return [
        f"{r['freq_hz'] / 1e6:.2f}",
        f"{r['power_dbfs']:.1f}" if r.get("power_dbfs") is not None else "-",
        f"{r['noise_dbfs']:.1f}" if r.get("noise_dbfs") is not None else "-",
        f"{cn:.1f}" if cn is not None else "not received",
        "yes" if r.get("received") else "no",
        str(r.get("sweeps", 1)),
    ]


def channel_rows_table(rows: Iterable[dict], title: str) -> Table:
    """A rich table of per-channel rows with keys freq_hz, power_dbfs, noise_dbfs, cn_db, received, sweeps."""
    table = Table(title=title, title_justify="left")
    for c in CHANNEL_COLUMNS:
        table.add_column(c.header, justify=c.justify)
    for r in rows:
        table.add_row(*channel_cells(r))
    return table


def print_table(table: Table) -> None:
    """Print a table on standard output, wide enough not to wrap."""
    Console(width=max(120, Console().width)).print(table)
