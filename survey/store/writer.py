"""Writing the survey database: runs, events and sweeps, each sweep in one transaction.

One sweep is written in one transaction (``BEGIN IMMEDIATE``): a crash loses at most the sweep in
progress, never a committed one. ``channel_vectors`` holds a columnar copy of each sweep's
channel rows (little-endian blobs) and ``station_vectors`` of its station rows
(:mod:`survey.store.station_columns`), both written in the same transaction; kept spectra are written
through :mod:`survey.spectra_codec` (full resolution for noise inputs, thinned for antenna sweeps).
"""

from __future__ import annotations

import json
import os
import sqlite3
import time
from pathlib import Path
from typing import Iterable

import numpy as np

from survey import spectra_codec
from survey.version import __version__
from survey.errors import StoreError
from survey.records import EmissionReading, RunInfo, SweepResult
from survey.store.read import read_spectra
from survey.store.station_columns import build_missing_station_vectors, insert_station_vector
from survey.store.schema import (
    _RDS_COLUMN_TYPES, APPLICATION_ID, MIGRATIONS, SCHEMA_VERSION, _connect, _is_busy, _is_full, check_ownership, open_error,
    utc_now,
)


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
        if version == 2:
            self._add_rds_columns()  # before schema 3, whose index and columnar copy read them
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
                if target == 3 and version >= 1:
                    build_missing_station_vectors(self.conn)
                self.conn.execute(f"PRAGMA user_version = {int(target)}")
                self.conn.execute("COMMIT")
            except BaseException:
                self.conn.execute("ROLLBACK")
                raise

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
            emissions = sorted(result.emissions, key=lambda e: e.freq_hz)
            _insert_station_rows(c, sweep_id, emissions)
            insert_station_vector(c, sweep_id, emissions)  # the same rows, columnar (same order)
            if keep_spectra:
                spectra_rows = []
                for h in result.hops:
                    if h.psd_dbfs_hz is None or h.psd_freqs_hz is None or len(h.psd_freqs_hz) < 2:
                        continue
                    row = spectra_codec.encode(h.psd_freqs_hz, h.psd_dbfs_hz, result.input, float(h.center_hz),
                                               float(h.sample_rate_hz), float(s.usable_fraction), float(s.dc_guard_hz))
                    spectra_rows.append((sweep_id, int(h.index), row.f_start_hz, row.bin_hz, row.n_bins, row.blob))
                c.executemany(
                    "INSERT INTO spectra (sweep_id, hop_index, f_start_hz, bin_hz, n_bins, psd_centi_dbfs_hz)"
                    " VALUES (?,?,?,?,?,?)",
                    spectra_rows,
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



def upgrade_database(path: str | Path) -> list[str]:
    """Bring an existing database to :data:`SCHEMA_VERSION`; returns what could not be done.

    A no-op for a current database. Raises :class:`StoreError` for a missing file.
    """
    p = Path(path)
    if not p.exists():
        raise StoreError(f"database {p} does not exist; run 'bandcensus replay', 'simulate' or 'scan' first")
    with SurveyStore(p) as store:
        return list(store.migration_notes)
