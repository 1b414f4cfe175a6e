"""Terminal rendering of per-channel tables (rich), shared by replay and channels."""

from __future__ import annotations

from typing import Iterable

from rich.console import Console
from rich.table import Table


def channel_rows_table(rows: Iterable[dict], title: str) -> Table:
    """A rich table of per-channel rows with keys freq_hz, power_dbfs, noise_dbfs, cn_db, received, sweeps."""
    table = Table(title=title, title_justify="left")
    table.add_column("MHz", justify="right")
    table.add_column("P dBFS", justify="right")
    table.add_column("N dBFS", justify="right")
    table.add_column("SNR (C/N) dB", justify="right")
    table.add_column("received", justify="center")
    table.add_column("sweeps", justify="right")
    for r in rows:
        cn = r.get("cn_db")
        table.add_row(
            f"{r['freq_hz'] / 1e6:.2f}",
            f"{r['power_dbfs']:.1f}" if r.get("power_dbfs") is not None else "-",
            f"{r['noise_dbfs']:.1f}" if r.get("noise_dbfs") is not None else "-",
            f"{cn:.1f}" if cn is not None else "not received",
            "yes" if r.get("received") else "no",
            str(r.get("sweeps", 1)),
        )
    return table


def print_table(table: Table) -> None:
    """Print a table on standard output, wide enough not to wrap."""
    Console(width=max(120, Console().width)).print(table)
