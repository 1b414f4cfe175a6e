"""Typed read helpers of the survey database (used by analysis/): records, never dicts of rows.

They open the database read-only and never create it; :func:`read_spectra` and
:func:`read_hop_spectra` decode kept spectra through :mod:`survey.spectra_codec`.
"""

from __future__ import annotations

import json
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np

from survey import spectra_codec
from survey.errors import StoreError

from survey.store.schema import _RDS_COLUMN_TYPES, SCHEMA_VERSION, open_error


# ---------------------------------------------------------------------------------------
# Read helpers (used by analysis/). They open the database read-only and never create it.
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SweepRow:
    """One row of the ``sweeps`` table."""

    id: int
    run_id: int
    sequence: int
    configuration: str
    input: str
    started_utc: str
    ended_utc: str
    complete: bool
    band: str
    channel_bw_hz: float
    sample_rate_hz: float
    gain_db: float | None
    dwell_s: float
    settle_s: float
    fft_size: int
    usable_fraction: float
    dc_guard_hz: float
    ppm: int
    received_margin_db: float
    recording: str | None
    notes: str


@dataclass(frozen=True)
class ChannelMatrix:
    """Channel readings of several sweeps on a common frequency axis.

    Arrays are ``(n_sweeps, n_freqs)``; a channel a sweep did not measure is NaN (``received``
    False). ``sweep_ids`` and ``started_utc`` follow the order of the sweeps asked for.
    """

    sweep_ids: np.ndarray
    started_utc: tuple[str, ...]
    freqs_hz: np.ndarray
    power_dbfs: np.ndarray
    noise_dbfs: np.ndarray
    received: np.ndarray

    @property
    def detected(self) -> np.ndarray:
        """Same as ``received`` (C/N at or above the detection margin); the name analyses use."""
        return self.received

    @property
    def cn_db(self) -> np.ndarray:
        """Carrier-to-noise ``10 log10((P-N)/N)`` in dB (float32); NaN where P <= N or not measured.

        Computed from the level difference, ``10 log10(10^((P - N)/10) - 1)``, in one pass.
        """
        ten = np.float32(10.0)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            excess = np.power(ten, (self.power_dbfs - self.noise_dbfs) / ten) - np.float32(1.0)
            cn = ten * np.log10(excess)
        return np.where(np.isfinite(cn), cn, np.float32(np.nan))


def open_for_reading(path: str | Path) -> sqlite3.Connection:
    """Open an existing survey database read-only (works while a scan is writing, WAL)."""
    p = Path(path)
    if not p.exists():
        raise StoreError(f"database {p} does not exist; run 'bandcensus replay', 'simulate' or 'scan' first")
    if p.is_dir():
        raise StoreError(f"{p} is a folder; give the database file")
    try:
        conn = sqlite3.connect(f"file:{p.resolve()}?mode=ro", uri=True, timeout=10.0)
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'")}
    except sqlite3.DatabaseError as exc:
        raise open_error(exc, p) from exc
    if "sweeps" not in tables or version == 0:
        conn.close()
        raise StoreError(f"{p} is not a bandcensus database (no sweeps table); check the path")
    if version > SCHEMA_VERSION:
        conn.close()
        raise StoreError(f"{p} has schema version {version}, newer than this bandcensus; upgrade bandcensus")
    return conn


def list_runs(conn: sqlite3.Connection) -> list[dict]:
    """All runs with their sweep counts, oldest first, as dicts (settings and device decoded)."""
    cur = conn.execute(
        "SELECT r.id, r.started_utc, r.ended_utc, r.status, r.tool_version, r.source_kind, r.device,"
        " r.settings, r.seed, r.notes,"
        " (SELECT COUNT(*) FROM sweeps s WHERE s.run_id = r.id AND s.complete = 1),"
        " (SELECT COUNT(*) FROM sweeps s WHERE s.run_id = r.id AND s.complete = 0),"
        " (SELECT COUNT(*) FROM events e WHERE e.run_id = r.id AND e.kind = 'gap'),"
        " (SELECT group_concat(DISTINCT s.configuration) FROM sweeps s WHERE s.run_id = r.id),"
        " (SELECT group_concat(DISTINCT s.input) FROM sweeps s WHERE s.run_id = r.id)"
        " FROM runs r ORDER BY r.id"
    )
    out = []
    for row in cur:
        def _decode(text):
            try:
                return json.loads(text)
            except (TypeError, ValueError):
                return text
        out.append(
            {
                "id": row[0], "started_utc": row[1], "ended_utc": row[2], "status": row[3],
                "tool_version": row[4], "source_kind": row[5], "device": _decode(row[6]),
                "settings": _decode(row[7]), "seed": row[8], "notes": row[9],
                "complete_sweeps": row[10], "incomplete_sweeps": row[11], "gaps": row[12],
                "configurations": sorted((row[13] or "").split(",")) if row[13] else [],
                "inputs": sorted((row[14] or "").split(",")) if row[14] else [],
            }
        )
    return out


_SWEEP_COLUMNS = [f for f in SweepRow.__dataclass_fields__]


def list_sweeps(
    conn: sqlite3.Connection,
    configuration: str | None = None,
    input: str | None = None,
    since_utc: str | None = None,
    until_utc: str | None = None,
    complete_only: bool = True,
) -> list[SweepRow]:
    """Sweeps matching the selection, in time order. Times are ISO 8601 UTC strings."""
    where, args = [], []
    if configuration is not None:
        where.append("configuration = ?"); args.append(configuration)
    if input is not None:
        where.append("input = ?"); args.append(input)
    if since_utc is not None:
        where.append("started_utc >= ?"); args.append(since_utc)
    if until_utc is not None:
        where.append("started_utc < ?"); args.append(until_utc)
    if complete_only:
        where.append("complete = 1")
    sql = f"SELECT {', '.join(_SWEEP_COLUMNS)} FROM sweeps"
    if where:
        sql += " WHERE " + " AND ".join(where)
    sql += " ORDER BY started_utc, id"
    return _sweep_rows(conn.execute(sql, args))


def _sweep_rows(rows: Iterable[tuple]) -> list[SweepRow]:
    """:class:`SweepRow` records of ``sweeps`` rows selected in :data:`_SWEEP_COLUMNS` order.

    Each record gets its fields set directly (``complete`` as bool), which is what the frozen
    dataclass's ``__init__`` does field by field at several times the cost: a week of sweeps is
    tens of thousands of records. Equality, hashing and repr are the dataclass's own.
    """
    names = tuple(_SWEEP_COLUMNS)
    complete = names.index("complete")
    new = object.__new__
    out = []
    for r in rows:
        row = new(SweepRow)
        fields = dict(zip(names, r))
        fields["complete"] = bool(r[complete])
        row.__dict__.update(fields)
        out.append(row)
    return out


def read_channel_matrix(conn: sqlite3.Connection, sweep_ids: Sequence[int]) -> ChannelMatrix:
    """Channel readings of the given sweeps as arrays on the union of their frequencies.

    Reads the columnar ``channel_vectors`` copy (fast: one row per sweep).
    """
    ids = [int(i) for i in sweep_ids]
    if not ids:
        empty = np.zeros((0, 0), np.float32)
        return ChannelMatrix(np.zeros(0, np.int64), (), np.zeros(0, np.int64), empty, empty, empty.astype(bool))
    blobs: dict[int, tuple] = {}
    started: dict[int, str] = {}
    for chunk_start in range(0, len(ids), 900):
        chunk = ids[chunk_start:chunk_start + 900]
        marks = ",".join("?" * len(chunk))
        for sid, fr, pw, nz, rc, st in conn.execute(
            "SELECT v.sweep_id, v.freqs_hz, v.power_dbfs, v.noise_dbfs, v.received, s.started_utc"
            f" FROM channel_vectors v JOIN sweeps s ON s.id = v.sweep_id WHERE v.sweep_id IN ({marks})",
            chunk,
        ):
            blobs[sid] = (fr, pw, nz, rc)
            started[sid] = st
    freq_sets = {blobs[i][0] for i in ids if i in blobs}
    if len(freq_sets) == 1:
        freqs = np.frombuffer(next(iter(freq_sets)), dtype="<i8").astype(np.int64)
    else:
        freqs = np.unique(np.concatenate([np.frombuffer(f, dtype="<i8") for f in freq_sets])) if freq_sets else np.zeros(0, np.int64)
    n, m = len(ids), freqs.size
    power = np.full((n, m), np.nan, np.float32)
    noise = np.full((n, m), np.nan, np.float32)
    received = np.zeros((n, m), bool)
    same_axis = len(freq_sets) == 1
    for row, sid in enumerate(ids):
        if sid not in blobs:
            continue
        fr, pw, nz, rc = blobs[sid]
        if same_axis:
            cols = slice(None)
        else:
            cols = np.searchsorted(freqs, np.frombuffer(fr, dtype="<i8"))
        power[row, cols] = np.frombuffer(pw, dtype="<f4")
        noise[row, cols] = np.frombuffer(nz, dtype="<f4")
        received[row, cols] = np.frombuffer(rc, dtype=np.uint8).astype(bool)
    return ChannelMatrix(np.asarray(ids, np.int64), tuple(started.get(i, "") for i in ids), freqs, power, noise, received)


@dataclass(frozen=True)
class HopRow:
    """One row of the ``hops`` table: where and how a hop was measured."""

    sweep_id: int
    hop_index: int
    center_hz: float
    sample_rate_hz: float
    n_samples: int
    clip_fraction: float | None
    floor_dbfs_hz: float | None
    started_utc: str


def read_hops(conn: sqlite3.Connection, sweep_ids: Iterable[int]) -> list[HopRow]:
    """Hop rows of the given sweeps, in sweep then hop order."""
    ids = [int(i) for i in sweep_ids]
    out: list[HopRow] = []
    cols = [f for f in HopRow.__dataclass_fields__]
    for chunk_start in range(0, len(ids), 900):
        chunk = ids[chunk_start:chunk_start + 900]
        marks = ",".join("?" * len(chunk))
        for r in conn.execute(
            f"SELECT {', '.join(cols)} FROM hops WHERE sweep_id IN ({marks}) ORDER BY sweep_id, hop_index", chunk
        ):
            out.append(HopRow(*r))
    return out


def read_spectra(conn: sqlite3.Connection, sweep_id: int) -> list[tuple[np.ndarray, np.ndarray]]:
    """Kept spectra of one sweep: a list of ``(freqs_hz absolute, psd_dbfs_hz)`` per hop.

    Rows of ``antenna`` sweeps are thinned copies (the usable span, groups of FFT bins at
    their mean, see :mod:`survey.spectra_codec`), returned on the FFT bin grid.
    """
    out = []
    for f0, df, n, blob in conn.execute(
        "SELECT f_start_hz, bin_hz, n_bins, psd_centi_dbfs_hz FROM spectra WHERE sweep_id=? ORDER BY hop_index",
        (int(sweep_id),),
    ):
        out.append(spectra_codec.decode_row(f0, df, n, blob, np.float32))
    return out


def read_events(conn: sqlite3.Connection, run_id: int | None = None) -> list[dict]:
    """Events (gaps, errors, clock jumps, stops), optionally of one run."""
    sql = "SELECT id, run_id, sweep_id, utc, kind, message FROM events"
    args: list = []
    if run_id is not None:
        sql += " WHERE run_id = ?"; args.append(int(run_id))
    cols = ["id", "run_id", "sweep_id", "utc", "kind", "message"]
    return [dict(zip(cols, r)) for r in conn.execute(sql + " ORDER BY id", args)]


# ---------------------------------------------------------------------------------------
# Typed read helpers for the analysis side (records, never dicts or storage blobs).
# ---------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RunRow:
    """One run with its sweep counts (settings and device decoded from JSON where possible)."""

    id: int
    started_utc: str
    ended_utc: str | None
    status: str
    tool_version: str
    source_kind: str
    device: object
    settings: object
    seed: int | None
    notes: str | None
    complete_sweeps: int
    incomplete_sweeps: int
    gaps: int
    configurations: tuple[str, ...]
    inputs: tuple[str, ...]


def read_runs(conn: sqlite3.Connection) -> list[RunRow]:
    """All runs as :class:`RunRow`, oldest first (the typed form of :func:`list_runs`)."""
    return [RunRow(**{**r, "configurations": tuple(r["configurations"]), "inputs": tuple(r["inputs"])})
            for r in list_runs(conn)]


@dataclass(frozen=True)
class EventRow:
    """One logged event (gap, error, clock jump, stop)."""

    id: int
    run_id: int | None
    sweep_id: int | None
    utc: str
    kind: str
    message: str


def read_event_rows(conn: sqlite3.Connection, run_id: int | None = None) -> list[EventRow]:
    """Events as :class:`EventRow` (the typed form of :func:`read_events`)."""
    return [EventRow(**e) for e in read_events(conn, run_id)]


@dataclass(frozen=True)
class LabelCount:
    """How many complete sweeps one (configuration, input) has."""

    configuration: str
    input: str
    sweeps: int


def count_complete_sweeps(conn: sqlite3.Connection) -> list[LabelCount]:
    """Complete sweeps per (configuration, input), sorted by label then input."""
    return [LabelCount(c, i, int(n)) for c, i, n in conn.execute(
        "SELECT configuration, input, COUNT(*) FROM sweeps WHERE complete = 1"
        " GROUP BY configuration, input ORDER BY configuration, input")]


@dataclass(frozen=True)
class HopSpectrum:
    """A kept spectrum of one hop with the hop's centre, sample rate and sample count.

    ``freqs_hz`` absolute (Hz), ``psd_dbfs_hz`` in dBFS/Hz (float64).
    """

    hop_index: int
    center_hz: float
    sample_rate_hz: float
    n_samples: int
    freqs_hz: np.ndarray
    psd_dbfs_hz: np.ndarray


def read_hop_spectra(conn: sqlite3.Connection, sweep_id: int) -> list[HopSpectrum]:
    """Kept spectra of one sweep with their hop's settings, in hop order (empty if none kept)."""
    out = []
    for hop, f0, df, n, blob, fc, fs, ns in conn.execute(
        "SELECT s.hop_index, s.f_start_hz, s.bin_hz, s.n_bins, s.psd_centi_dbfs_hz, h.center_hz,"
        " h.sample_rate_hz, h.n_samples FROM spectra s JOIN hops h"
        " ON h.sweep_id = s.sweep_id AND h.hop_index = s.hop_index WHERE s.sweep_id = ? ORDER BY s.hop_index",
        (int(sweep_id),),
    ):
        freqs, psd = spectra_codec.decode_row(f0, df, n, blob)  # thinned rows back on the FFT grid
        out.append(HopSpectrum(int(hop), float(fc), float(fs), int(ns), freqs, psd))
    return out


def sweeps_with_spectra(conn: sqlite3.Connection) -> list[int]:
    """Ids of the sweeps that kept spectra."""
    return [int(r[0]) for r in conn.execute("SELECT DISTINCT sweep_id FROM spectra")]


def spectra_span_hz(conn: sqlite3.Connection, sweep_id: int) -> tuple[float, float] | None:
    """Lowest and highest bin frequency (Hz) of the kept spectra of one sweep; None if none kept."""
    row = conn.execute(
        "SELECT MIN(f_start_hz), MAX(f_start_hz + bin_hz * (n_bins - 1)) FROM spectra WHERE sweep_id = ?",
        (int(sweep_id),),
    ).fetchone()
    if row is None or row[0] is None:
        return None
    return float(row[0]), float(row[1])


def read_channel_hop_centers(conn: sqlite3.Connection, sweep_id: int) -> tuple[np.ndarray, np.ndarray]:
    """Each channel of a sweep with the centre of the hop it was measured in: ``(freqs_hz, centers_hz)``."""
    rows = conn.execute(
        "SELECT c.freq_hz, h.center_hz FROM channels c JOIN hops h"
        " ON h.sweep_id = c.sweep_id AND h.hop_index = c.hop_index WHERE c.sweep_id = ? ORDER BY c.freq_hz",
        (int(sweep_id),),
    ).fetchall()
    if not rows:
        return np.zeros(0, np.int64), np.zeros(0)
    arr = np.asarray(rows, dtype=np.float64)
    return arr[:, 0].astype(np.int64), arr[:, 1]


def read_sweep_matrix(conn: sqlite3.Connection, sweeps: Sequence[SweepRow]) -> ChannelMatrix:
    """Channel readings of ``sweeps`` (order kept), as :func:`read_channel_matrix`.

    Fast path for the usual case, every sweep on one frequency axis: the columnar blobs are
    joined and decoded once instead of sweep by sweep; anything else (mixed axes, a sweep
    without its columnar copy, a sweep asked twice) goes through :func:`read_channel_matrix`.
    """
    ids = [int(r.id) for r in sweeps]
    if not ids or len(set(ids)) != len(ids):
        return read_channel_matrix(conn, ids)
    # chunk by chunk in the order asked, each column appended to one writable buffer that the
    # arrays then use in place: the blobs fetched are held one chunk at a time, copied once
    # the first sweep's frequency axis; SQLite compares every other sweep's axis with it (a flag
    # per sweep instead of a copy of each axis)
    first = conn.execute("SELECT freqs_hz FROM channel_vectors WHERE sweep_id = ?", (ids[0],)).fetchone()
    if first is None:
        return read_channel_matrix(conn, ids)  # a sweep without its columnar copy
    axis: bytes = first[0]
    joined = [bytearray(), bytearray(), bytearray()]
    for start in range(0, len(ids), 900):
        chunk = ids[start:start + 900]
        marks = ",".join("?" * len(chunk))
        blobs = {int(sid): (same, pw, nz, rc) for sid, same, pw, nz, rc in conn.execute(
            f"SELECT sweep_id, freqs_hz = ?, power_dbfs, noise_dbfs, received FROM channel_vectors"
            f" WHERE sweep_id IN ({marks})", [axis, *chunk],
        )}
        if len(blobs) != len(chunk):
            return read_channel_matrix(conn, ids)  # a sweep without its columnar copy
        if not all(b[0] for b in blobs.values()):
            return read_channel_matrix(conn, ids)  # mixed frequency axes
        ordered = [blobs[i] for i in chunk]
        for k, acc in enumerate(joined, start=1):
            acc += b"".join(b[k] for b in ordered)
        del blobs, ordered
    freqs = np.frombuffer(axis, dtype="<i8").astype(np.int64)
    n, m = len(ids), freqs.size
    power = np.frombuffer(joined[0], dtype="<f4").reshape(n, m)
    noise = np.frombuffer(joined[1], dtype="<f4").reshape(n, m)
    received = np.frombuffer(joined[2], dtype=np.uint8).reshape(n, m)
    received = received.view(bool) if received.max(initial=0) <= 1 else received.astype(bool)
    return ChannelMatrix(np.asarray(ids, np.int64), tuple(r.started_utc for r in sweeps), freqs, power, noise,
                         received)


@dataclass(frozen=True)
class StationRow:
    """One row of the ``stations`` table: one emission found in one sweep.

    Units and meaning as :class:`survey.records.EmissionReading`; ``power_dbfs``, ``noise_dbfs``,
    ``cn_db`` are NaN where not measurable and ``ci_db`` is None without neighbour power.
    """

    sweep_id: int
    freq_hz: float
    hop_index: int
    kind: str
    occupied_bw_hz: float
    power_dbfs: float
    noise_dbfs: float
    cn_db: float
    ci_db: float | None
    stereo: bool
    channel_freq_hz: int
    separable: bool
    rds_pi: int | None = None
    rds_ps: str | None = None
    rds_pty: int | None = None
    rds_blocks: int = 0
    rds_block_errors: int = 0


#: RDS columns of ``stations``; a schema-2 table written before they existed reads them as empty.
_RDS_COLUMNS = tuple(name for name, _ in _RDS_COLUMN_TYPES)


def read_station_rows(conn: sqlite3.Connection, sweep_ids: Sequence[int]) -> list[StationRow]:
    """Station rows of the given sweeps, ordered by sweep (as given) then frequency.

    Raises :class:`StoreError` when the database predates the ``stations`` table (schema 1):
    opening it once for writing (:class:`SurveyStore`) migrates it.
    """
    ids = [int(i) for i in sweep_ids]
    has = conn.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name='stations'").fetchone()
    if not has:
        raise StoreError("the database has no stations table (schema 1); open it once with this version"
                         " of bandcensus for writing to migrate it")
    order = {sid: k for k, sid in enumerate(ids)}
    present = {row[1] for row in conn.execute("PRAGMA table_info(stations)")}
    rds = ", ".join(c if c in present else ("0" if c in ("rds_blocks", "rds_block_errors") else "NULL")
                    for c in _RDS_COLUMNS)
    nan = float("nan")
    out: list[StationRow] = []
    for chunk_start in range(0, len(ids), 900):
        chunk = ids[chunk_start:chunk_start + 900]
        marks = ",".join("?" * len(chunk))
        for r in conn.execute(
            "SELECT sweep_id, freq_hz, hop_index, kind, occupied_bw_hz, power_dbfs, noise_dbfs, cn_db, ci_db,"
            f" stereo, channel_freq_hz, separable, {rds} FROM stations WHERE sweep_id IN ({marks})", chunk,
        ):
            out.append(StationRow(
                sweep_id=int(r[0]), freq_hz=float(r[1]), hop_index=int(r[2]), kind=str(r[3]),
                occupied_bw_hz=float(r[4]), power_dbfs=nan if r[5] is None else float(r[5]),
                noise_dbfs=nan if r[6] is None else float(r[6]), cn_db=nan if r[7] is None else float(r[7]),
                ci_db=None if r[8] is None else float(r[8]), stereo=bool(r[9]),
                channel_freq_hz=int(r[10]), separable=bool(r[11]),
                rds_pi=None if r[12] is None else int(r[12]), rds_ps=None if r[13] is None else str(r[13]),
                rds_pty=None if r[14] is None else int(r[14]), rds_blocks=int(r[15] or 0),
                rds_block_errors=int(r[16] or 0),
            ))
    out.sort(key=lambda row: (order[row.sweep_id], row.freq_hz))
    return out


def identified_sweep_ids(conn: sqlite3.Connection) -> list[int]:
    """Complete sweeps holding at least one station row with an RDS programme code (PI).

    Empty for a database without the ``stations`` table or without its RDS columns.
    """
    present = {row[1] for row in conn.execute("PRAGMA table_info(stations)")}
    if "rds_pi" not in present:
        return []
    return [int(r[0]) for r in conn.execute(
        "SELECT DISTINCT t.sweep_id FROM stations t JOIN sweeps s ON s.id = t.sweep_id"
        " WHERE t.rds_pi IS NOT NULL AND s.complete = 1 ORDER BY t.sweep_id")]

