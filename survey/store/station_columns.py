"""Columnar copy of the ``stations`` table: one ``station_vectors`` row per sweep.

``stations`` holds one row per emission per sweep (every column, for SQL users, the RDS text
and the census's rebuild of older databases). Reading it one Python record per row costs about
3.5 µs a row, which at a week of sweeps is most of a comparison. ``station_vectors`` holds the
same emissions of one sweep as one blob of little-endian fixed-size records
(:data:`STATION_RECORD`), written in the same transaction as the rows, in the same order
(frequency ascending); :func:`read_station_columns` decodes every asked sweep at once into
numpy columns (:class:`StationColumns`).

The RDS columns are not in the records: a sweep with any RDS data in its rows (``n_rds`` > 0)
is read from ``stations`` (the PS name is text), as is a sweep without a ``station_vectors``
row (a database written before schema 3 and opened read-only). Both paths give the same
columns.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from typing import Iterable, Sequence

import numpy as np

#: One emission in a ``station_vectors.records`` blob (little-endian, packed, 62 bytes).
#: Levels in dBFS and dB, NaN where the ``stations`` column is NULL; ``flags`` bit 0 stereo,
#: bit 1 separable; ``kind`` indexes the row's comma-separated ``kinds`` vocabulary.
STATION_RECORD = np.dtype([
    ("freq_hz", "<f8"), ("power_dbfs", "<f8"), ("noise_dbfs", "<f8"), ("cn_db", "<f8"),
    ("ci_db", "<f8"), ("occupied_bw_hz", "<f8"), ("channel_freq_hz", "<i8"), ("hop_index", "<i4"),
    ("kind", "u1"), ("flags", "u1"),
])

_STEREO, _SEPARABLE = 1, 2


def _real(value) -> float:
    """A level as the ``stations`` table reads back: NaN for None or a non-finite value."""
    if value is None:
        return float("nan")
    f = float(value)
    return f if np.isfinite(f) else float("nan")


def has_rds(e) -> bool:
    """True when an emission (or station row) carries any RDS data."""
    return (e.rds_pi is not None or e.rds_ps is not None or e.rds_pty is not None
            or bool(e.rds_blocks) or bool(e.rds_block_errors))


def station_records(freq_hz, power_dbfs, noise_dbfs, cn_db, ci_db, occupied_bw_hz, channel_freq_hz, hop_index,
                    kind, stereo, separable) -> bytes:
    """One ``station_vectors.records`` blob from equal-length columns (one element per emission,
    frequency ascending): levels NaN where missing, ``kind`` the codes into the row's ``kinds``."""
    rec = np.zeros(np.size(freq_hz), STATION_RECORD)
    rec["freq_hz"] = freq_hz
    for name, values in (("power_dbfs", power_dbfs), ("noise_dbfs", noise_dbfs), ("cn_db", cn_db), ("ci_db", ci_db)):
        v = np.asarray(values, np.float64)
        rec[name] = np.where(np.isfinite(v), v, np.nan)  # as a REAL column reads back: NULL -> NaN
    rec["occupied_bw_hz"] = occupied_bw_hz
    rec["channel_freq_hz"] = channel_freq_hz
    rec["hop_index"] = hop_index
    rec["kind"] = kind
    rec["flags"] = np.where(np.asarray(stereo, bool), _STEREO, 0) | np.where(np.asarray(separable, bool), _SEPARABLE, 0)
    return rec.tobytes()


def pack_station_vector(emissions: Iterable) -> tuple[int, int, str, bytes]:
    """``(n_stations, n_rds, kinds, records)`` of one sweep's ``station_vectors`` row.

    ``emissions`` are :class:`survey.records.EmissionReading` or
    :class:`survey.store.read.StationRow` (the same attributes), in the order their
    ``stations`` rows are written (frequency ascending). ``n_rds`` counts emissions carrying
    RDS data; ``kinds`` is the sorted vocabulary the ``kind`` codes index.
    """
    rows = list(emissions)
    kinds = sorted({str(e.kind) for e in rows})
    if len(kinds) > 255:
        raise ValueError("more than 255 emission kinds in one sweep")
    code = {k: i for i, k in enumerate(kinds)}
    blob = station_records(
        [float(e.freq_hz) for e in rows], [_real(e.power_dbfs) for e in rows], [_real(e.noise_dbfs) for e in rows],
        [_real(e.cn_db) for e in rows], [_real(e.ci_db) for e in rows], [float(e.occupied_bw_hz) for e in rows],
        [int(e.channel_freq_hz) for e in rows], [int(e.hop_index) for e in rows], [code[str(e.kind)] for e in rows],
        [bool(e.stereo) for e in rows], [bool(e.separable) for e in rows])
    return len(rows), sum(1 for e in rows if has_rds(e)), ",".join(kinds), blob


def insert_station_vector(c: sqlite3.Connection, sweep_id: int, emissions: Iterable) -> None:
    """Write one sweep's ``station_vectors`` row (inside the caller's transaction)."""
    n, n_rds, kinds, blob = pack_station_vector(emissions)
    c.execute("INSERT INTO station_vectors (sweep_id, n_stations, n_rds, kinds, records) VALUES (?,?,?,?,?)",
              (int(sweep_id), n, n_rds, kinds, blob))


@dataclass(frozen=True)
class StationColumns:
    """Station rows of several sweeps as numpy columns (one element per emission).

    Ordered by sweep (as asked) then frequency, as :func:`survey.store.read_station_rows`.
    Units and meaning as :class:`survey.records.EmissionReading`: ``freq_hz``,
    ``occupied_bw_hz`` Hz (float64); ``power_dbfs``, ``noise_dbfs``, ``cn_db`` and ``ci_db``
    float64, NaN where not measured (``ci_db`` NaN: no neighbour power); ``kind`` codes into
    ``kind_names``; ``rds_pi`` and ``rds_pty`` -1 where None, ``rds_ps`` an object array
    (None where not read).
    """

    sweep_id: np.ndarray
    freq_hz: np.ndarray
    hop_index: np.ndarray
    kind: np.ndarray
    kind_names: tuple[str, ...]
    occupied_bw_hz: np.ndarray
    power_dbfs: np.ndarray
    noise_dbfs: np.ndarray
    cn_db: np.ndarray
    ci_db: np.ndarray
    stereo: np.ndarray
    channel_freq_hz: np.ndarray
    separable: np.ndarray
    rds_pi: np.ndarray
    rds_ps: np.ndarray
    rds_pty: np.ndarray
    rds_blocks: np.ndarray
    rds_block_errors: np.ndarray

    @property
    def size(self) -> int:
        """Number of emissions."""
        return int(self.freq_hz.size)

    def is_kind(self, *names: str) -> np.ndarray:
        """Boolean mask of the emissions whose kind is one of ``names``."""
        codes = [i for i, k in enumerate(self.kind_names) if k in names]
        return np.isin(self.kind, np.asarray(codes, np.uint8))

    def take(self, index) -> "StationColumns":
        """The emissions at ``index`` (a boolean mask or integer indices), same vocabulary."""
        return StationColumns(**{name: (value if name == "kind_names" else value[index])
                                 for name, value in self.__dict__.items()})


def _has_table(conn: sqlite3.Connection, name: str) -> bool:
    return conn.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name=?", (name,)).fetchone() is not None


def _rows_piece(rows: Sequence) -> tuple[bytes, str, list]:
    """Records, vocabulary and RDS values of station rows read from ``stations``."""
    _, _, kinds, blob = pack_station_vector(rows)
    rds = [(r.rds_pi, r.rds_ps, r.rds_pty, r.rds_blocks, r.rds_block_errors) for r in rows]
    return blob, kinds, rds


def read_station_columns(conn: sqlite3.Connection, sweep_ids: Sequence[int]) -> StationColumns:
    """Station rows of the given sweeps as :class:`StationColumns` (same rows and order as
    :func:`survey.store.read_station_rows`).

    Sweeps with a ``station_vectors`` row and no RDS data are decoded from their blobs; the
    others (RDS text, or no columnar copy) are read row by row from ``stations``. Raises
    :class:`survey.errors.StoreError` when the database has no ``stations`` table (schema 1).
    """
    from survey.store.read import read_station_rows  # the row path (and its schema-1 error)

    ids = [int(i) for i in sweep_ids]
    order = {sid: k for k, sid in enumerate(ids)}
    unique = sorted(order, key=order.__getitem__)
    vectors: dict[int, tuple[int, str, bytes]] = {}
    if _has_table(conn, "station_vectors"):
        for start in range(0, len(unique), 900):
            chunk = unique[start:start + 900]
            marks = ",".join("?" * len(chunk))
            for sid, n, n_rds, kinds, blob in conn.execute(
                f"SELECT sweep_id, n_stations, n_rds, kinds, records FROM station_vectors WHERE sweep_id IN ({marks})",
                chunk,
            ):
                if not n_rds:
                    vectors[int(sid)] = (int(n), kinds, blob)
    by_rows = [sid for sid in unique if sid not in vectors]
    rows_of: dict[int, list] = {}
    for r in read_station_rows(conn, by_rows):  # also raises the schema-1 error
        rows_of.setdefault(r.sweep_id, []).append(r)
    blobs, counts, vocab_of_sweep, rds_pieces = [], [], [], []
    vocabularies: dict[str, int] = {}
    offset = 0
    for sid in unique:
        if sid in vectors:
            n, kinds, blob = vectors[sid]
        else:
            rows = rows_of.get(sid, [])
            blob, kinds, rds = _rows_piece(rows)
            n = len(rows)
            rds_pieces.append((offset, rds))
        blobs.append(blob)
        counts.append(n)
        vocab_of_sweep.append(vocabularies.setdefault(kinds, len(vocabularies)))
        offset += n
    rec = np.frombuffer(b"".join(blobs), STATION_RECORD)
    names = sorted({k for text in vocabularies for k in text.split(",") if k})
    remap = np.zeros((max(len(vocabularies), 1), 256), np.uint8)
    for text, v in vocabularies.items():
        for local, k in enumerate(k for k in text.split(",") if k):
            remap[v, local] = names.index(k)
    counts_arr = np.asarray(counts, np.int64)
    kind = remap[np.repeat(np.asarray(vocab_of_sweep, np.int64), counts_arr), rec["kind"]]
    total = rec.size
    rds_pi = np.full(total, -1, np.int64)
    rds_pty = np.full(total, -1, np.int64)
    rds_blocks = np.zeros(total, np.int64)
    rds_errors = np.zeros(total, np.int64)
    rds_ps = np.full(total, None, dtype=object)
    for start, rds in rds_pieces:
        for k, (pi, ps, pty, blocks, errors) in enumerate(rds):
            rds_pi[start + k] = -1 if pi is None else int(pi)
            rds_ps[start + k] = ps
            rds_pty[start + k] = -1 if pty is None else int(pty)
            rds_blocks[start + k] = int(blocks or 0)
            rds_errors[start + k] = int(errors or 0)
    flags = rec["flags"]
    return StationColumns(
        sweep_id=np.repeat(np.asarray(unique, np.int64), counts_arr),
        freq_hz=rec["freq_hz"].copy(), hop_index=rec["hop_index"].astype(np.int64),
        kind=kind, kind_names=tuple(names), occupied_bw_hz=rec["occupied_bw_hz"].copy(),
        power_dbfs=rec["power_dbfs"].copy(), noise_dbfs=rec["noise_dbfs"].copy(), cn_db=rec["cn_db"].copy(),
        ci_db=rec["ci_db"].copy(), stereo=(flags & _STEREO).astype(bool),
        channel_freq_hz=rec["channel_freq_hz"].copy(), separable=(flags & _SEPARABLE).astype(bool),
        rds_pi=rds_pi, rds_ps=rds_ps, rds_pty=rds_pty, rds_blocks=rds_blocks, rds_block_errors=rds_errors,
    )


def build_missing_station_vectors(c: sqlite3.Connection) -> int:
    """Write the ``station_vectors`` row of every sweep that has none, from its ``stations``
    rows (inside the caller's transaction; the schema-3 migration). Returns how many."""
    from survey.store.read import read_station_rows

    missing = [int(r[0]) for r in c.execute(
        "SELECT id FROM sweeps WHERE id NOT IN (SELECT sweep_id FROM station_vectors) ORDER BY id")]
    for start in range(0, len(missing), 500):
        chunk = missing[start:start + 500]
        rows_of: dict[int, list] = {sid: [] for sid in chunk}
        for r in read_station_rows(c, chunk):
            rows_of[r.sweep_id].append(r)
        for sid in chunk:
            insert_station_vector(c, sid, rows_of[sid])
    return len(missing)
