"""What a capture command stored, in a few lines: stations detected, the closing line, warnings.

Shared by ``replay``, ``simulate`` and ``scan`` so that they end the same way::

    bare: 24 sweeps, 11 stations detected
    preamp-peaked: 24 sweeps, 12 stations detected
    stored 48 sweeps (2 configurations) in survey.db: 12 stations heard

A station is *detected* in a sweep when its C/N reaches the sweep's detection margin
(:func:`analysis.census.census_matrix`); *heard* counts the stations detected in at least one
sweep of the run. Command-line only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bandcensus.commands._text import display_path, plural
from survey.store import list_sweeps, open_for_reading
from survey.text import plain_text


@dataclass(frozen=True)
class StoredRun:
    """Complete sweeps of one run and the stations they detected.

    ``by_configuration`` maps each configuration label (in first-seen order) to
    ``(sweeps, stations detected in at least one of them)``; ``heard`` counts the stations
    detected in at least one sweep of the run, whatever the configuration.
    """

    sweeps: int
    by_configuration: dict
    heard: int


def stored_run(db_path: str, run_id: int) -> StoredRun:
    """Read back the complete sweeps of ``run_id`` and count the stations detected."""
    from analysis.census import census_matrix

    conn = open_for_reading(db_path)
    try:
        sweeps = [s for s in list_sweeps(conn) if s.run_id == run_id]
        if not sweeps:
            return StoredRun(0, {}, 0)
        matrix = census_matrix(conn, sweeps)
    finally:
        conn.close()
    detected = np.asarray(matrix.detected, dtype=bool).reshape(len(sweeps), -1)
    by_configuration: dict[str, tuple[int, int]] = {}
    for label in dict.fromkeys(s.configuration for s in sweeps):
        rows = [i for i, s in enumerate(sweeps) if s.configuration == label]
        by_configuration[label] = (len(rows), int(detected[rows].any(axis=0).sum()))
    return StoredRun(len(sweeps), by_configuration, int(detected.any(axis=0).sum()))


def configuration_lines(run: StoredRun) -> list[str]:
    """One line per configuration: ``bare: 24 sweeps, 11 stations detected``."""
    return [f"{plain_text(label)}: {plural(n, 'sweep')}, {plural(heard, 'station')} detected"
            for label, (n, heard) in run.by_configuration.items()]


def stored_line(run: StoredRun, db_path: str, incomplete: int = 0, stopped_by: str | None = None) -> str:
    """The closing line: ``stored 48 sweeps (2 configurations) in survey.db: 12 stations heard``.

    A run stopped by a signal says so: ``stored 3 sweeps (bare), 1 incomplete, stopped by SIGTERM, in ...``.
    """
    configs = len(run.by_configuration)
    what = plural(run.sweeps, "sweep")
    if configs > 1:
        what += f" ({plural(configs, 'configuration')})"
    elif configs == 1:
        what += f" ({plain_text(next(iter(run.by_configuration)))})"
    extra = f", {incomplete} incomplete" if incomplete else ""
    if stopped_by:
        extra += f", stopped by {plain_text(stopped_by)},"
    return (f"stored {what}{extra} in {plain_text(display_path(db_path))}: "
            f"{plural(run.heard, 'station')} heard")


def aggregate_warnings(warnings: list[str], paths: list[str]) -> list[str]:
    """One line per kind of warning instead of one per recording.

    Warnings that start with one of ``paths`` (``"<path>: <text>"``) and share the same text
    are merged into ``"<n> recordings: <text>"``; a warning given once keeps its path, shown
    relative to the current folder where shorter. Other warnings are kept as they are.
    """
    groups: dict[str, list[str]] = {}
    others: list[str] = []
    for warning in warnings:
        owner = next((p for p in sorted(paths, key=len, reverse=True) if warning.startswith(f"{p}: ")), None)
        if owner is None:
            others.append(warning)
            continue
        groups.setdefault(warning[len(owner) + 2:], []).append(owner)
    out = []
    for text, owners in groups.items():
        if len(owners) == 1:
            out.append(f"{display_path(owners[0])}: {text}")
        else:
            out.append(f"{plural(len(owners), 'recording')}: {text}")
    return out + others


__all__ = ["StoredRun", "aggregate_warnings", "configuration_lines", "stored_line", "stored_run"]
