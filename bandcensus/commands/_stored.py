"""What a capture command stored, in a few lines: stations detected, the closing line, warnings.

Shared by ``replay``, ``simulate`` and ``scan`` so that they end the same way::

    bare: 11 stations detected in 21 antenna sweeps; also 3 sweeps of noise-cold, noise-hot, terminated
    preamp-peaked: 12 stations detected in 24 antenna sweeps
    stored 48 sweeps (2 configurations) in survey.db: 12 stations heard

A station is *detected* in a sweep when its C/N reaches the sweep's detection margin
(:func:`analysis.census.census_matrix`); *heard* counts the stations detected in at least one
antenna sweep of the run. Command-line only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bandcensus.commands._text import display_path, plural
from survey.store import list_sweeps, open_for_reading
from survey.text import plain_text


#: Stations are counted in sweeps of this input only (noise-source, terminated and generator
#: sweeps show the receiver, not the band).
STATION_INPUT = "antenna"


@dataclass(frozen=True)
class StoredRun:
    """Complete sweeps of one run and the stations they detected.

    ``by_configuration`` maps each configuration label (in first-seen order) to
    ``(antenna sweeps, stations detected in at least one of them, other inputs)`` where
    ``other inputs`` maps each other input to its number of sweeps; ``heard`` counts the
    stations detected in at least one antenna sweep of the run, whatever the configuration.
    """

    sweeps: int
    by_configuration: dict
    heard: int
    antenna_sweeps: int


def stored_run(db_path: str, run_id: int) -> StoredRun:
    """Read back the complete sweeps of ``run_id`` and count the stations detected."""
    from analysis.census import census_matrix

    conn = open_for_reading(db_path)
    try:
        sweeps = [s for s in list_sweeps(conn) if s.run_id == run_id]
        antenna = [s for s in sweeps if s.input == STATION_INPUT]
        matrix = census_matrix(conn, antenna) if antenna else None
    finally:
        conn.close()
    detected = (np.asarray(matrix.detected, dtype=bool).reshape(len(antenna), -1) if matrix is not None
                else np.zeros((0, 0), dtype=bool))
    by_configuration: dict[str, tuple[int, int, dict]] = {}
    for label in dict.fromkeys(s.configuration for s in sweeps):
        rows = [i for i, s in enumerate(antenna) if s.configuration == label]
        others: dict[str, int] = {}
        for s in sweeps:
            if s.configuration == label and s.input != STATION_INPUT:
                others[s.input] = others.get(s.input, 0) + 1
        heard = int(detected[rows].any(axis=0).sum()) if rows else 0
        by_configuration[label] = (len(rows), heard, others)
    heard_all = int(detected.any(axis=0).sum()) if detected.size else 0
    return StoredRun(len(sweeps), by_configuration, heard_all, len(antenna))


def configuration_lines(run: StoredRun) -> list[str]:
    """One line per configuration: ``bare: 12 stations detected in 21 antenna sweeps; also ...``."""
    lines = []
    for label, (n, heard, others) in run.by_configuration.items():
        parts = [f"{plural(heard, 'station')} detected in {plural(n, 'antenna sweep')}"] if n else []
        if others:
            listed = ", ".join(plain_text(k) for k in sorted(others))
            parts.append(f"{'also ' if n else ''}{plural(sum(others.values()), 'sweep')} of {listed}")
        lines.append(f"{plain_text(label)}: {'; '.join(parts)}")
    return lines


def stored_line(run: StoredRun, db_path: str, incomplete: int = 0, stopped_by: str | None = None) -> str:
    """The closing line: ``stored 48 sweeps (2 configurations) in survey.db: 12 stations heard``.

    A run stopped by a signal says so: ``stored 3 sweeps (bare), 1 incomplete, stopped by SIGTERM, in ...``.
    Without antenna sweeps the line says that no stations were counted.
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
    heard = (f"{plural(run.heard, 'station')} heard" if run.antenna_sweeps
             else "no antenna sweeps, so no stations counted")
    return f"stored {what}{extra} in {plain_text(display_path(db_path))}: {heard}"


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


__all__ = ["STATION_INPUT", "StoredRun", "aggregate_warnings", "configuration_lines", "stored_line", "stored_run"]
