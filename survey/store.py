"""SQLite store: schema, migrations, atomic sweep writes and read helpers.

The schema is the contract between the capture side and the analysis side; it is documented
in the README ("Database schema"). Conventions:

* WAL journal, ``synchronous=NORMAL`` (consistent across application crashes), foreign keys on,
  schema version in ``PRAGMA user_version`` (:data:`SCHEMA_VERSION`).
* One sweep is written in one transaction (``BEGIN IMMEDIATE``): a crash loses at most the
  sweep in progress, never a committed one.
* Tables are STRICT, so a numpy scalar slipping through is an error rather than a BLOB.
* ``channel_vectors`` holds a columnar copy of each sweep's channel rows (little-endian blobs)
  written in the same transaction; the analysis side reads it for speed. ``channels`` stays the
  row-per-channel table anyone can query with ``sqlite3``.
"""

from __future__ import annotations

import json
import os
import sqlite3
import time
from dataclasses import asdict, dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np
from sqlite_utils import Database

from bandcensus import __version__
from survey.errors import StoreError
from survey.records import RunInfo, SweepResult

#: Version of the schema below, stored in ``PRAGMA user_version``.
SCHEMA_VERSION = 1

_SCHEMA_V1 = """
CREATE TABLE IF NOT EXISTS runs (
    id INTEGER PRIMARY KEY,
    started_utc TEXT NOT NULL,
    ended_utc TEXT,
    status TEXT NOT NULL DEFAULT 'running',
    tool_version TEXT NOT NULL,
    source_kind TEXT NOT NULL,
    device TEXT NOT NULL,
    settings TEXT NOT NULL,
    seed INTEGER,
    notes TEXT NOT NULL DEFAULT ''
) STRICT;
CREATE TABLE IF NOT EXISTS sweeps (
    id INTEGER PRIMARY KEY,
    run_id INTEGER NOT NULL REFERENCES runs(id),
    sequence INTEGER NOT NULL,
    configuration TEXT NOT NULL,
    input TEXT NOT NULL,
    started_utc TEXT NOT NULL,
    ended_utc TEXT NOT NULL,
    complete INTEGER NOT NULL,
    band TEXT NOT NULL,
    channel_bw_hz REAL NOT NULL,
    sample_rate_hz REAL NOT NULL,
    gain_db REAL,
    dwell_s REAL NOT NULL,
    settle_s REAL NOT NULL,
    fft_size INTEGER NOT NULL,
    usable_fraction REAL NOT NULL,
    dc_guard_hz REAL NOT NULL,
    ppm INTEGER NOT NULL,
    received_margin_db REAL NOT NULL,
    recording TEXT,
    notes TEXT NOT NULL DEFAULT ''
) STRICT;
CREATE INDEX IF NOT EXISTS sweeps_by_label ON sweeps(configuration, input, started_utc);
CREATE TABLE IF NOT EXISTS hops (
    sweep_id INTEGER NOT NULL REFERENCES sweeps(id),
    hop_index INTEGER NOT NULL,
    center_hz REAL NOT NULL,
    sample_rate_hz REAL NOT NULL,
    n_samples INTEGER NOT NULL,
    clip_fraction REAL,
    floor_dbfs_hz REAL NOT NULL,
    started_utc TEXT NOT NULL,
    PRIMARY KEY (sweep_id, hop_index)
) STRICT;
CREATE TABLE IF NOT EXISTS channels (
    sweep_id INTEGER NOT NULL REFERENCES sweeps(id),
    freq_hz INTEGER NOT NULL,
    hop_index INTEGER NOT NULL,
    power_dbfs REAL NOT NULL,
    noise_dbfs REAL NOT NULL,
    noise_density_dbfs_hz REAL NOT NULL,
    cn_db REAL,
    received INTEGER NOT NULL,
    PRIMARY KEY (sweep_id, freq_hz)
) STRICT;
CREATE TABLE IF NOT EXISTS channel_vectors (
    sweep_id INTEGER PRIMARY KEY REFERENCES sweeps(id),
    n_channels INTEGER NOT NULL,
    freqs_hz BLOB NOT NULL,
    power_dbfs BLOB NOT NULL,
    noise_dbfs BLOB NOT NULL,
    received BLOB NOT NULL
) STRICT;
CREATE TABLE IF NOT EXISTS spectra (
    sweep_id INTEGER NOT NULL REFERENCES sweeps(id),
    hop_index INTEGER NOT NULL,
    f_start_hz REAL NOT NULL,
    bin_hz REAL NOT NULL,
    n_bins INTEGER NOT NULL,
    psd_centi_dbfs_hz BLOB NOT NULL,
    PRIMARY KEY (sweep_id, hop_index)
) STRICT;
CREATE TABLE IF NOT EXISTS events (
    id INTEGER PRIMARY KEY,
    run_id INTEGER REFERENCES runs(id),
    sweep_id INTEGER,
    utc TEXT NOT NULL,
    kind TEXT NOT NULL,
    message TEXT NOT NULL
) STRICT;
"""

#: Named migrations: version reached -> SQL. Each runs in its own transaction.
MIGRATIONS: dict[int, str] = {1: _SCHEMA_V1}


def utc_now() -> str:
    """Current UTC time as ISO 8601 with microseconds and a ``Z`` suffix."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _is_full(exc: sqlite3.Error) -> bool:
    text = str(exc).lower()
    return "full" in text or "disk i/o" in text or "i/o error" in text


def _is_busy(exc: sqlite3.Error) -> bool:
    text = str(exc).lower()
    return "locked" in text or "busy" in text


def _connect(path: Path, busy_timeout_s: float) -> sqlite3.Connection:
    conn = sqlite3.connect(str(path), timeout=busy_timeout_s, isolation_level=None)
    conn.execute("PRAGMA foreign_keys = ON")
    return conn


#: ``PRAGMA application_id`` of a bandcensus database ("BCNS"); set on create (SQLite file
#: format, header offset 68). Databases of schema v1 written before it existed are recognised
#: by their tables and ``user_version`` and get it on their next opening for writing.
APPLICATION_ID = 0x42434E53

_OUR_TABLES = frozenset({"runs", "sweeps", "hops", "channels"})


def check_ownership(conn: sqlite3.Connection, path: Path) -> None:
    """Refuse (StoreError) an SQLite file that is not a bandcensus database, reading only.

    Ours: an empty file; or ``application_id`` = :data:`APPLICATION_ID`; or (older files)
    ``application_id`` 0 with ``user_version`` > 0 and our core tables. Anything else (another
    program's tables, another application id, tables without a schema version) is refused
    before a single byte is written.
    """
    app_id = conn.execute("PRAGMA application_id").fetchone()[0]
    version = conn.execute("PRAGMA user_version").fetchone()[0]
    tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type='table'")}
    if app_id == APPLICATION_ID or (not tables and app_id == 0 and version == 0):
        return
    if app_id == 0 and version > 0 and _OUR_TABLES <= tables:
        return
    why = (f"application id {app_id:#x}" if app_id else
           f"tables {', '.join(sorted(tables)[:4])}{' ...' if len(tables) > 4 else ''}" if tables else
           f"user_version {version}")
    raise StoreError(f"{path} is an SQLite database of another program ({why}); it was left untouched: "
                     "choose a new file name")


def open_error(exc: sqlite3.Error, path: Path) -> StoreError:
    """The true one-line reason an SQLite file cannot be opened or read, with the remedy."""
    text = str(exc)
    low = text.lower()
    if "malformed" in low or "corrupt" in low:
        return StoreError(f"{path} is damaged ({text}); restore it from a copy, or recover what is left "
                          f"with: sqlite3 {path} .recover")
    if "readonly" in low or "read-only" in low or (path.exists() and not os.access(path, os.W_OK)):
        return StoreError(f"{path} is read-only (read-only mount or permissions); copy it to a writable "
                          "folder to add sweeps (reading commands work as is)")
    if _is_busy(exc):
        return StoreError(f"{path} is locked by another program (exclusive lock); wait for it to finish "
                          "or stop it, then try again")
    if "unable to open" in low and not os.access(path.parent, os.W_OK):
        return StoreError(f"{path} lies in a read-only folder (read-only mount?) and its journal cannot be "
                          "opened there; copy the database to a writable folder")
    if "unable to open" in low:
        return StoreError(f"cannot open {path} ({text}); check the path and the folder's permissions")
    if "not a database" in low or "encrypted" in low:
        return StoreError(f"{path} is not a bandcensus database (not an SQLite file); choose a new file name")
    return StoreError(f"cannot use {path} ({text}); check the file")


class SurveyStore:
    """Writer (and reader) of a survey database.

    Parameters
    ----------
    path : str or Path
        Database file; created with the current schema if missing.
    busy_timeout_s : float
        How long one statement waits for another writer before ``SQLITE_BUSY``.
    busy_retries : int
        How many times a sweep write is retried when the database stays busy.
    """

    def __init__(self, path: str | Path, busy_timeout_s: float = 10.0, busy_retries: int = 3):
        self.path = Path(path)
        self.busy_retries = busy_retries
        if self.path.exists() and self.path.is_dir():
            raise StoreError(f"{self.path} is a folder; give a database file path such as survey.db")
        folder = self.path.parent
        if not folder.is_dir():
            raise StoreError(f"folder {folder} does not exist; create it (mkdir -p {folder}) or choose another path")
        if not self.path.exists() and not os.access(folder, os.W_OK):
            raise StoreError(f"cannot create {self.path}: folder {folder} is not writable (read-only mount or "
                             "permissions); choose a writable folder")
        try:
            self.conn = _connect(self.path, busy_timeout_s)
            self.db = Database(self.conn)
            check_ownership(self.conn, self.path)  # reads only: nothing is written to a foreign file
            self.conn.execute("PRAGMA journal_mode = WAL")
            self.conn.execute("PRAGMA synchronous = NORMAL")
            self._migrate()
        except sqlite3.DatabaseError as exc:
            raise open_error(exc, self.path) from exc

    # -- schema -----------------------------------------------------------------------------
    def _migrate(self) -> None:
        version = self.conn.execute("PRAGMA user_version").fetchone()[0]
        if version > SCHEMA_VERSION:
            raise StoreError(
                f"{self.path} has schema version {version}, newer than this bandcensus "
                f"({SCHEMA_VERSION}); upgrade bandcensus"
            )
        if self.conn.execute("PRAGMA application_id").fetchone()[0] != APPLICATION_ID:
            self.conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")  # ours (checked): mark it
        for target in sorted(MIGRATIONS):
            if target <= version:
                continue
            self.conn.execute("BEGIN IMMEDIATE")
            try:  # statement by statement: executescript would commit early
                for statement in MIGRATIONS[target].split(";"):
                    if statement.strip():
                        self.conn.execute(statement)
                self.conn.execute(f"PRAGMA user_version = {int(target)}")
                self.conn.execute("COMMIT")
            except BaseException:
                self.conn.execute("ROLLBACK")
                raise

    @property
    def schema_version(self) -> int:
        """The ``PRAGMA user_version`` of the open database."""
        return int(self.conn.execute("PRAGMA user_version").fetchone()[0])

    # -- writing ----------------------------------------------------------------------------
    def _write(self, work) -> int:
        """Run ``work(conn)`` in one ``BEGIN IMMEDIATE`` transaction, retrying while busy."""
        attempt = 0
        while True:
            try:
                self.conn.execute("BEGIN IMMEDIATE")
                try:
                    result = work(self.conn)
                    self.conn.execute("COMMIT")
                    return result
                except BaseException:
                    if self.conn.in_transaction:
                        self.conn.execute("ROLLBACK")
                    raise
            except sqlite3.OperationalError as exc:
                if _is_busy(exc) and attempt < self.busy_retries:
                    attempt += 1
                    time.sleep(0.2 * attempt)
                    continue
                if _is_full(exc):
                    raise StoreError(
                        f"cannot write to {self.path}: {exc}; free disk space (committed sweeps are safe)"
                    ) from exc
                if _is_busy(exc):
                    raise StoreError(
                        f"{self.path} stayed locked by another writer; stop the other scan or use another file"
                    ) from exc
                raise StoreError(f"cannot write to {self.path}: {exc}") from exc
            except sqlite3.DatabaseError as exc:
                raise StoreError(f"cannot write to {self.path}: {exc}") from exc

    def begin_run(self, info: RunInfo, started_utc: str | None = None) -> int:
        """Record the start of a run; returns its id."""
        row = (
            started_utc or utc_now(),
            info.tool_version or __version__,
            info.source_kind,
            json.dumps(info.device) if not isinstance(info.device, str) else info.device,
            json.dumps(info.settings, sort_keys=True, default=str),
            None if info.seed is None else int(info.seed),
            info.notes,
        )
        return self._write(
            lambda c: c.execute(
                "INSERT INTO runs (started_utc, tool_version, source_kind, device, settings, seed, notes)"
                " VALUES (?,?,?,?,?,?,?)",
                row,
            ).lastrowid
        )

    def end_run(self, run_id: int, status: str = "finished") -> None:
        """Mark a run ended (``finished``, ``stopped`` or ``failed``) and checkpoint the WAL."""
        self._write(
            lambda c: c.execute(
                "UPDATE runs SET ended_utc = ?, status = ? WHERE id = ?", (utc_now(), status, int(run_id))
            )
        )
        try:
            self.conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        except sqlite3.DatabaseError:
            pass

    def add_event(self, run_id: int | None, kind: str, message: str, sweep_id: int | None = None) -> None:
        """Record an event (``gap``, ``receiver-error``, ``clock-jump``, ``stop`` ...)."""
        self._write(
            lambda c: c.execute(
                "INSERT INTO events (run_id, sweep_id, utc, kind, message) VALUES (?,?,?,?,?)",
                (run_id, sweep_id, utc_now(), kind, message),
            )
        )

    def next_sequence(self, run_id: int) -> int:
        """Sequence number for the next sweep of a run (0-based)."""
        row = self.conn.execute("SELECT COALESCE(MAX(sequence)+1, 0) FROM sweeps WHERE run_id=?", (run_id,))
        return int(row.fetchone()[0])

    def write_sweep(self, run_id: int, result: SweepResult, keep_spectra: bool = False) -> int:
        """Write one sweep with its hops and channels in one transaction; returns the sweep id."""

        def work(c: sqlite3.Connection) -> int:
            s = result.settings
            seq = int(c.execute("SELECT COALESCE(MAX(sequence)+1, 0) FROM sweeps WHERE run_id=?", (run_id,)).fetchone()[0])
            sweep_id = c.execute(
                "INSERT INTO sweeps (run_id, sequence, configuration, input, started_utc, ended_utc,"
                " complete, band, channel_bw_hz, sample_rate_hz, gain_db, dwell_s, settle_s, fft_size,"
                " usable_fraction, dc_guard_hz, ppm, received_margin_db, recording, notes)"
                " VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
                (
                    int(run_id), seq, result.configuration, result.input, result.started_utc,
                    result.ended_utc, int(bool(result.complete)), s.band, float(s.channel_bw_hz),
                    float(s.sample_rate_hz), None if s.gain_db is None else float(s.gain_db),
                    float(s.dwell_s), float(s.settle_s), int(s.fft_size), float(s.usable_fraction),
                    float(s.dc_guard_hz), int(s.ppm), float(s.received_margin_db), result.recording,
                    result.notes,
                ),
            ).lastrowid
            c.executemany(
                "INSERT INTO hops (sweep_id, hop_index, center_hz, sample_rate_hz, n_samples,"
                " clip_fraction, floor_dbfs_hz, started_utc) VALUES (?,?,?,?,?,?,?,?)",
                [
                    (
                        sweep_id, int(h.index), float(h.center_hz), float(h.sample_rate_hz),
                        int(h.n_samples), None if h.clip_fraction is None else float(h.clip_fraction),
                        float(h.floor_dbfs_hz), h.started_utc,
                    )
                    for h in result.hops
                ],
            )
            rows = sorted(result.channels, key=lambda r: r.freq_hz)
            c.executemany(
                "INSERT INTO channels (sweep_id, freq_hz, hop_index, power_dbfs, noise_dbfs,"
                " noise_density_dbfs_hz, cn_db, received) VALUES (?,?,?,?,?,?,?,?)",
                [
                    (
                        sweep_id, int(r.freq_hz), int(r.hop_index), float(r.power_dbfs),
                        float(r.noise_dbfs), float(r.noise_density_dbfs_hz),
                        None if r.cn_db is None else float(r.cn_db), int(bool(r.received)),
                    )
                    for r in rows
                ],
            )
            c.execute(
                "INSERT INTO channel_vectors (sweep_id, n_channels, freqs_hz, power_dbfs, noise_dbfs, received)"
                " VALUES (?,?,?,?,?,?)",
                (
                    sweep_id,
                    len(rows),
                    np.asarray([r.freq_hz for r in rows], dtype="<i8").tobytes(),
                    np.asarray([r.power_dbfs for r in rows], dtype="<f4").tobytes(),
                    np.asarray([r.noise_dbfs for r in rows], dtype="<f4").tobytes(),
                    np.asarray([r.received for r in rows], dtype=np.uint8).tobytes(),
                ),
            )
            if keep_spectra:
                for h in result.hops:
                    if h.psd_dbfs_hz is None or h.psd_freqs_hz is None or len(h.psd_freqs_hz) < 2:
                        continue
                    f = np.asarray(h.psd_freqs_hz, dtype=np.float64)
                    centi = np.clip(np.round(np.asarray(h.psd_dbfs_hz, np.float64) * 100.0), -32768, 32767)
                    c.execute(
                        "INSERT INTO spectra (sweep_id, hop_index, f_start_hz, bin_hz, n_bins, psd_centi_dbfs_hz)"
                        " VALUES (?,?,?,?,?,?)",
                        (sweep_id, int(h.index), float(f[0]), float(f[1] - f[0]), int(f.size),
                         centi.astype("<i2").tobytes()),
                    )
            return int(sweep_id)

        return self._write(work)

    def integrity_ok(self) -> bool:
        """True when ``PRAGMA integrity_check`` reports ``ok``."""
        return self.conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"

    def close(self) -> None:
        """Close the connection. Safe to call twice."""
        try:
            self.conn.close()
        except sqlite3.Error:
            pass

    def __enter__(self) -> "SurveyStore":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


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
        """Carrier-to-noise ``10 log10((P-N)/N)`` in dB; NaN where P <= N or not measured."""
        p = np.power(10.0, self.power_dbfs.astype(np.float64) / 10.0)
        n = np.power(10.0, self.noise_dbfs.astype(np.float64) / 10.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            cn = 10.0 * np.log10((p - n) / n)
        return np.where(np.isfinite(cn), cn, np.nan)


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
    rows = []
    for r in conn.execute(sql, args):
        d = dict(zip(_SWEEP_COLUMNS, r))
        d["complete"] = bool(d["complete"])
        rows.append(SweepRow(**d))
    return rows


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


def read_hops(conn: sqlite3.Connection, sweep_ids: Iterable[int]) -> list[dict]:
    """Hop rows of the given sweeps as dicts, in sweep then hop order."""
    ids = [int(i) for i in sweep_ids]
    out: list[dict] = []
    cols = ["sweep_id", "hop_index", "center_hz", "sample_rate_hz", "n_samples", "clip_fraction",
            "floor_dbfs_hz", "started_utc"]
    for chunk_start in range(0, len(ids), 900):
        chunk = ids[chunk_start:chunk_start + 900]
        marks = ",".join("?" * len(chunk))
        for r in conn.execute(
            f"SELECT {', '.join(cols)} FROM hops WHERE sweep_id IN ({marks}) ORDER BY sweep_id, hop_index", chunk
        ):
            out.append(dict(zip(cols, r)))
    return out


def read_spectra(conn: sqlite3.Connection, sweep_id: int) -> list[tuple[np.ndarray, np.ndarray]]:
    """Kept spectra of one sweep: a list of ``(freqs_hz absolute, psd_dbfs_hz)`` per hop."""
    out = []
    for f0, df, n, blob in conn.execute(
        "SELECT f_start_hz, bin_hz, n_bins, psd_centi_dbfs_hz FROM spectra WHERE sweep_id=? ORDER BY hop_index",
        (int(sweep_id),),
    ):
        out.append((f0 + df * np.arange(n), np.frombuffer(blob, dtype="<i2").astype(np.float32) / 100.0))
    return out


def read_events(conn: sqlite3.Connection, run_id: int | None = None) -> list[dict]:
    """Events (gaps, errors, clock jumps, stops), optionally of one run."""
    sql = "SELECT id, run_id, sweep_id, utc, kind, message FROM events"
    args: list = []
    if run_id is not None:
        sql += " WHERE run_id = ?"; args.append(int(run_id))
    cols = ["id", "run_id", "sweep_id", "utc", "kind", "message"]
    return [dict(zip(cols, r)) for r in conn.execute(sql + " ORDER BY id", args)]
