"""Schema of the survey database: tables, version, migrations, and how a file is opened.

The schema is the contract between the capture side and the analysis side; it is documented
in the README ("Database schema"). WAL journal, ``synchronous=NORMAL``, foreign keys on, schema
version in ``PRAGMA user_version`` (:data:`SCHEMA_VERSION`), our files marked by
``PRAGMA application_id`` (:data:`APPLICATION_ID`). Tables are STRICT, so a numpy scalar
slipping through is an error rather than a BLOB.
"""

from __future__ import annotations

import os
import sqlite3
from datetime import datetime, timezone
from pathlib import Path

from survey.errors import StoreError

#: Version of the schema below, stored in ``PRAGMA user_version``.
SCHEMA_VERSION = 3

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

_SCHEMA_V3 = """
CREATE TABLE IF NOT EXISTS station_vectors (
    sweep_id INTEGER PRIMARY KEY REFERENCES sweeps(id),
    n_stations INTEGER NOT NULL,
    n_rds INTEGER NOT NULL,
    kinds TEXT NOT NULL,
    freq_hz BLOB NOT NULL,
    power_dbfs BLOB NOT NULL,
    noise_dbfs BLOB NOT NULL,
    cn_db BLOB NOT NULL,
    ci_db BLOB NOT NULL,
    channel_freq_hz BLOB NOT NULL,
    kind BLOB NOT NULL,
    flags BLOB NOT NULL,
    occupied_bw_hz BLOB NOT NULL,
    hop_index BLOB NOT NULL
) STRICT;
CREATE INDEX IF NOT EXISTS stations_identified ON stations(sweep_id) WHERE rds_pi IS NOT NULL;
"""

#: RDS columns of ``stations`` with their types (as in :data:`_SCHEMA_V2`).
_RDS_COLUMN_TYPES = (("rds_pi", "INTEGER"), ("rds_ps", "TEXT"), ("rds_pty", "INTEGER"),
                     ("rds_blocks", "INTEGER NOT NULL DEFAULT 0"),
                     ("rds_block_errors", "INTEGER NOT NULL DEFAULT 0"))

#: Named migrations: version reached -> SQL. Each runs in its own transaction.
MIGRATIONS: dict[int, str] = {1: _SCHEMA_V1, 2: _SCHEMA_V2, 3: _SCHEMA_V3}


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
