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
* Kept spectra are written through :mod:`survey.spectra_codec`: full resolution for noise
  inputs, a thinned copy for antenna sweeps; :func:`read_spectra` reads both.
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

from survey import spectra_codec
from survey.version import __version__
from survey.errors import StoreError
from survey.records import EmissionReading, RunInfo, SweepResult

#: Version of the schema below, stored in ``PRAGMA user_version``.
SCHEMA_VERSION = 2

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

_SCHEMA_V2 = """
CREATE TABLE IF NOT EXISTS stations (
    sweep_id INTEGER NOT NULL REFERENCES sweeps(id),
    freq_hz REAL NOT NULL,
    hop_index INTEGER NOT NULL,
    kind TEXT NOT NULL,
    occupied_bw_hz REAL NOT NULL,
    power_dbfs REAL,
    noise_dbfs REAL,
    cn_db REAL,
    ci_db REAL,
    stereo INTEGER NOT NULL,
    channel_freq_hz INTEGER NOT NULL,
    separable INTEGER NOT NULL,
    rds_pi INTEGER,
    rds_ps TEXT,
    rds_pty INTEGER,
    rds_blocks INTEGER NOT NULL DEFAULT 0,
    rds_block_errors INTEGER NOT NULL DEFAULT 0
) STRICT;
CREATE INDEX IF NOT EXISTS stations_by_sweep ON stations(sweep_id, freq_hz);
"""

#: RDS columns of ``stations`` with their types (as in :data:`_SCHEMA_V2`).
_RDS_COLUMN_TYPES = (("rds_pi", "INTEGER"), ("rds_ps", "TEXT"), ("rds_pty", "INTEGER"),
                     ("rds_blocks", "INTEGER NOT NULL DEFAULT 0"),
                     ("rds_block_errors", "INTEGER NOT NULL DEFAULT 0"))

#: Named migrations: version reached -> SQL. Each runs in its own transaction.
MIGRATIONS: dict[int, str] = {1: _SCHEMA_V1, 2: _SCHEMA_V2}


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
        #: What the last schema upgrade could not do (e.g. sweeps whose station rows could not
        #: be rebuilt, and why); also recorded as ``migration`` events.
        self.migration_notes: list[str] = []
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
            check_ownership(self.conn, self.path)  # reads only: nothing is written to a foreign file
            self.conn.execute("PRAGMA journal_mode = WAL")
            self.conn.execute("PRAGMA synchronous = NORMAL")
            self._migrate()
        except sqlite3.DatabaseError as exc:
            raise open_error(exc, self.path) from exc

    @property
    def db(self):
        """A :class:`sqlite_utils.Database` over the same connection, for interactive use.

        Imported on first use only: sqlite_utils pulls in pandas-sized dependencies that the
        capture and the read-only commands do not need.
        """
        from sqlite_utils import Database

        return Database(self.conn)

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
                if target == 2 and version >= 1:
                    self.migration_notes.extend(_rebuild_station_rows(self.conn))
                self.conn.execute(f"PRAGMA user_version = {int(target)}")
                self.conn.execute("COMMIT")
            except BaseException:
                self.conn.execute("ROLLBACK")
                raise
        if version == 2:
            self._add_rds_columns()

    def _add_rds_columns(self) -> None:
        """Add the RDS columns to a schema-2 ``stations`` table written before they existed.

        Schema 2 gained them before its first release; rows written without them read as not
        decoded (NULL, 0).
        """
        present = {row[1] for row in self.conn.execute("PRAGMA table_info(stations)")}
        missing = [(name, kind) for name, kind in _RDS_COLUMN_TYPES if name not in present]
        if not missing:
            return
        self.conn.execute("BEGIN IMMEDIATE")
        try:
            for name, kind in missing:
                self.conn.execute(f"ALTER TABLE stations ADD COLUMN {name} {kind}")
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
            _insert_station_rows(c, sweep_id, result.emissions)
            if keep_spectra:
                for h in result.hops:
                    if h.psd_dbfs_hz is None or h.psd_freqs_hz is None or len(h.psd_freqs_hz) < 2:
                        continue
                    row = spectra_codec.encode(h.psd_freqs_hz, h.psd_dbfs_hz, result.input, float(h.center_hz),
                                               float(h.sample_rate_hz), float(s.usable_fraction), float(s.dc_guard_hz))
                    c.execute(
                        "INSERT INTO spectra (sweep_id, hop_index, f_start_hz, bin_hz, n_bins, psd_centi_dbfs_hz)"
                        " VALUES (?,?,?,?,?,?)",
                        (sweep_id, int(h.index), row.f_start_hz, row.bin_hz, row.n_bins, row.blob),
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


def _nullable(value: float | None) -> float | None:
    """A float for SQLite, None for a missing or non-finite value (a REAL column holds no NaN)."""
    if value is None:
        return None
    f = float(value)
    return f if np.isfinite(f) else None


def _insert_station_rows(c: sqlite3.Connection, sweep_id: int, emissions: Iterable[EmissionReading]) -> None:
    """One ``stations`` row per emission of a sweep (inside the caller's transaction)."""
    c.executemany(
        "INSERT INTO stations (sweep_id, freq_hz, hop_index, kind, occupied_bw_hz, power_dbfs, noise_dbfs,"
        " cn_db, ci_db, stereo, channel_freq_hz, separable, rds_pi, rds_ps, rds_pty, rds_blocks,"
        " rds_block_errors) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
        [
            (
                int(sweep_id), float(e.freq_hz), int(e.hop_index), str(e.kind), float(e.occupied_bw_hz),
                _nullable(e.power_dbfs), _nullable(e.noise_dbfs), _nullable(e.cn_db), _nullable(e.ci_db),
                int(bool(e.stereo)), int(e.channel_freq_hz), int(bool(e.separable)),
                None if e.rds_pi is None else int(e.rds_pi), None if e.rds_ps is None else str(e.rds_ps),
                None if e.rds_pty is None else int(e.rds_pty), int(e.rds_blocks), int(e.rds_block_errors),
            )
            for e in sorted(emissions, key=lambda e: e.freq_hz)
        ],
    )


def _rebuild_station_rows(c: sqlite3.Connection) -> list[str]:
    """Station rows of a version-1 database, rebuilt from the kept spectra (inside the migration).

    The floor and the emissions are recomputed from each hop's stored PSD (0.01 dB steps) with
    the sweep's own settings; ``K_eff`` follows from the hop's sample count. Without the IQ
    samples the stereo pilot cannot be examined: rebuilt rows say ``stereo`` 0. Sweeps stored
    without spectra cannot be rebuilt; they are named in the returned notes and in a
    ``migration`` event, and keep their channel rows.
    """
    from survey.emissions import emissions_from_spectra  # heavy imports only when migrating

    missing: list[int] = []
    rebuilt = 0
    sweeps = c.execute("SELECT id, channel_bw_hz, usable_fraction, dc_guard_hz FROM sweeps ORDER BY id").fetchall()
    for sweep_id, bw, usable_fraction, dc_guard in sweeps:
        hops = {h: (center, fs, n) for h, center, fs, n in c.execute(
            "SELECT hop_index, center_hz, sample_rate_hz, n_samples FROM hops WHERE sweep_id=?", (sweep_id,))}
        kept = [h for (h,) in c.execute(
            "SELECT hop_index FROM spectra WHERE sweep_id=? ORDER BY hop_index", (sweep_id,))]
        if not hops or len(kept) < len(hops):
            missing.append(int(sweep_id))
            continue
        channels: dict[int, list[int]] = {}
        for f, h in c.execute("SELECT freq_hz, hop_index FROM channels WHERE sweep_id=?", (sweep_id,)):
            channels.setdefault(int(h), []).append(int(f))
        spectra = [(int(h), *hops[h], freqs, psd_db, channels.get(int(h), []))
                   for h, (freqs, psd_db) in zip(kept, read_spectra(c, sweep_id))]
        found = emissions_from_spectra(spectra, channel_bw_hz=float(bw), usable_fraction=float(usable_fraction),
                                       dc_guard_hz=float(dc_guard))
        _insert_station_rows(c, int(sweep_id), found)
        rebuilt += 1
    notes = []
    if missing:
        listed = ", ".join(str(i) for i in missing[:20]) + (" ..." if len(missing) > 20 else "")
        notes.append(
            f"schema 2: station rows of {len(missing)} sweep(s) could not be rebuilt (ids {listed}):"
            " they were stored without spectra (keep spectra to allow it); their channel rows are kept"
        )
        c.execute("INSERT INTO events (run_id, sweep_id, utc, kind, message) VALUES (?,?,?,?,?)",
                  (None, None, utc_now(), "migration", notes[-1]))
    if rebuilt:
        c.execute("INSERT INTO events (run_id, sweep_id, utc, kind, message) VALUES (?,?,?,?,?)",
                  (None, None, utc_now(), "migration",
                   f"schema 2: station rows of {rebuilt} sweep(s) rebuilt from the kept spectra (stereo not known)"))
    return notes


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
    without its columnar copy) goes through :func:`read_channel_matrix`.
    """
    ids = [int(r.id) for r in sweeps]
    blobs: dict[int, tuple[bytes, bytes, bytes, bytes]] = {}
    for start in range(0, len(ids), 900):
        chunk = ids[start:start + 900]
        marks = ",".join("?" * len(chunk))
        for sid, fr, pw, nz, rc in conn.execute(
            f"SELECT sweep_id, freqs_hz, power_dbfs, noise_dbfs, received FROM channel_vectors"
            f" WHERE sweep_id IN ({marks})", chunk,
        ):
            blobs[int(sid)] = (fr, pw, nz, rc)
    if not ids or len(blobs) != len(ids) or len({b[0] for b in blobs.values()}) != 1:
        return read_channel_matrix(conn, ids)
    freqs = np.frombuffer(blobs[ids[0]][0], dtype="<i8").astype(np.int64)
    n, m = len(ids), freqs.size
    ordered = [blobs[i] for i in ids]
    power = np.frombuffer(b"".join(b[1] for b in ordered), dtype="<f4").reshape(n, m).astype(np.float32)
    noise = np.frombuffer(b"".join(b[2] for b in ordered), dtype="<f4").reshape(n, m).astype(np.float32)
    received = np.frombuffer(b"".join(b[3] for b in ordered), dtype=np.uint8).reshape(n, m).astype(bool)
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


def upgrade_database(path: str | Path) -> list[str]:
    """Bring an existing database to :data:`SCHEMA_VERSION`; returns what could not be done.

    A no-op for a current database. Raises :class:`StoreError` for a missing file.
    """
    p = Path(path)
    if not p.exists():
        raise StoreError(f"database {p} does not exist; run 'bandcensus replay', 'simulate' or 'scan' first")
    with SurveyStore(p) as store:
        return list(store.migration_notes)
