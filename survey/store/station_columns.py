"""Columnar copy of the ``stations`` table: one ``station_vectors`` row per sweep.

``stations`` holds one row per emission per sweep (every column, for SQL users, the RDS text
and the census's rebuild of older databases). Reading it one Python record per row costs about
3.5 µs a row, which at a week of sweeps is most of a comparison. ``station_vectors`` holds the
same emissions of one sweep as one little-endian blob per column (:data:`STATION_VECTOR_FIELDS`),
written in the same transaction as the rows, in the same order (frequency ascending);
:func:`read_station_columns` joins the blobs of every asked sweep and decodes each column once
into numpy (:class:`StationColumns`).

The RDS columns are not in the blobs: a sweep with any RDS data in its rows (``n_rds`` > 0) is
read from ``stations`` (the PS name is text), as is a sweep without a ``station_vectors`` row
(a database written before schema 3 and opened read-only). Both paths give the same columns.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from operator import itemgetter
from typing import Iterable, Sequence

import numpy as np

#: Blob columns of ``station_vectors`` and their little-endian element types, one element per
#: emission. Levels in dBFS and dB, NaN where the ``stations`` column is NULL; ``flags`` bit 0
#: stereo, bit 1 separable; ``kind`` indexes the row's comma-separated ``kinds`` vocabulary.
STATION_VECTOR_FIELDS: tuple[tuple[str, str], ...] = (
    ("freq_hz", "<f8"), ("power_dbfs", "<f8"), ("noise_dbfs", "<f8"), ("cn_db", "<f8"), ("ci_db", "<f8"),
    ("channel_freq_hz", "<i8"), ("kind", "u1"), ("flags", "u1"), ("occupied_bw_hz", "<f8"), ("hop_index", "<i4"),
)
_FIELD_NAMES = tuple(name for name, _ in STATION_VECTOR_FIELDS)

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


def station_blobs(freq_hz, power_dbfs, noise_dbfs, cn_db, ci_db, occupied_bw_hz, channel_freq_hz, hop_index,
                  kind, stereo, separable) -> dict[str, bytes]:
    """The blobs of one ``station_vectors`` row (name -> bytes, :data:`STATION_VECTOR_FIELDS`)
    from equal-length columns, one element per emission in frequency order: levels NaN where
    missing, ``kind`` the codes into the row's ``kinds``."""
    def levels(values) -> np.ndarray:
        v = np.asarray(values, np.float64)
        return np.where(np.isfinite(v), v, np.nan)  # as a REAL column reads back: NULL -> NaN

    flags = (np.where(np.asarray(stereo, bool), _STEREO, 0) | np.where(np.asarray(separable, bool), _SEPARABLE, 0))
    values = {"freq_hz": freq_hz, "power_dbfs": levels(power_dbfs), "noise_dbfs": levels(noise_dbfs),
              "cn_db": levels(cn_db), "ci_db": levels(ci_db), "channel_freq_hz": channel_freq_hz, "kind": kind,
              "flags": flags, "occupied_bw_hz": occupied_bw_hz, "hop_index": hop_index}
    return {name: np.asarray(values[name]).astype(dtype).tobytes() for name, dtype in STATION_VECTOR_FIELDS}


def pack_station_vector(emissions: Iterable) -> tuple[int, int, str, dict[str, bytes]]:
    """``(n_stations, n_rds, kinds, blobs)`` of one sweep's ``station_vectors`` row.

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
    blobs = station_blobs(
        [float(e.freq_hz) for e in rows], [_real(e.power_dbfs) for e in rows], [_real(e.noise_dbfs) for e in rows],
        [_real(e.cn_db) for e in rows], [_real(e.ci_db) for e in rows], [float(e.occupied_bw_hz) for e in rows],
        [int(e.channel_freq_hz) for e in rows], [int(e.hop_index) for e in rows], [code[str(e.kind)] for e in rows],
        [bool(e.stereo) for e in rows], [bool(e.separable) for e in rows])
    return len(rows), sum(1 for e in rows if has_rds(e)), ",".join(kinds), blobs


#: The INSERT of one ``station_vectors`` row (parameters: sweep id, n_stations, n_rds, kinds, blobs).
INSERT_STATION_VECTOR = (f"INSERT INTO station_vectors (sweep_id, n_stations, n_rds, kinds, {', '.join(_FIELD_NAMES)})"
                         f" VALUES ({', '.join('?' * (4 + len(_FIELD_NAMES)))})")


def insert_station_vector(c: sqlite3.Connection, sweep_id: int, emissions: Iterable) -> None:
    """Write one sweep's ``station_vectors`` row (inside the caller's transaction)."""
    n, n_rds, kinds, blobs = pack_station_vector(emissions)
    c.execute(INSERT_STATION_VECTOR, (int(sweep_id), n, n_rds, kinds, *(blobs[f] for f in _FIELD_NAMES)))


@dataclass(frozen=True)
class StationColumns:
    """Station rows of several sweeps as numpy columns (one element per emission).

    Ordered by sweep (as asked) then frequency, as :func:`survey.store.read_station_rows`.
    Units and meaning as :class:`survey.records.EmissionReading`: ``freq_hz``,
    ``occupied_bw_hz`` Hz (float64); ``hop_index`` int32; ``power_dbfs``, ``noise_dbfs``, ``cn_db`` and ``ci_db``
    float64, NaN where not measured (``ci_db`` NaN: no neighbour power); ``kind`` codes into
    ``kind_names``; ``rds_pi`` (int32) and ``rds_pty`` (int16) -1 where None, ``rds_ps`` an
    object array (None where not read), ``rds_blocks`` and ``rds_block_errors`` int32; without
    any RDS data these five are read-only views of one value.
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
        if len(codes) == len(self.kind_names):
            return np.ones(self.kind.shape, bool)
        if len(codes) == 1:
            return self.kind == np.uint8(codes[0])  # one pass, no sort
        return np.isin(self.kind, np.asarray(codes, np.uint8))

    def take(self, index) -> "StationColumns":
        """The emissions at ``index`` (a boolean mask or integer indices), same vocabulary."""
        return StationColumns(**{name: (value if name == "kind_names" else value[index])
                                 for name, value in self.__dict__.items()})


def _has_table(conn: sqlite3.Connection, name: str) -> bool:
    return conn.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name=?", (name,)).fetchone() is not None


#: Columns that :func:`read_station_columns` leaves out without ``detail``.
_DETAIL_FIELDS = ("occupied_bw_hz", "hop_index")
#: Columns that can be left out, with the value their read-only stand-in holds.
_STAND_IN = {"occupied_bw_hz": np.float64(np.nan), "hop_index": np.int32(-1), "ci_db": np.float64(np.nan)}


def read_station_columns(conn: sqlite3.Connection, sweep_ids: Sequence[int], detail: bool = True,
                         leave_out: Sequence[str] = ()) -> StationColumns:
    """Station rows of the given sweeps as :class:`StationColumns` (same rows and order as
    :func:`survey.store.read_station_rows`).

    ``detail=False`` leaves out ``occupied_bw_hz`` and ``hop_index`` (read-only views of NaN
    and -1; the census does not use them), which saves a fifth of the memory. ``leave_out``
    names further columns not to read: ``"ci_db"`` (a read-only view of NaN).

    Sweeps with a ``station_vectors`` row and no RDS data are decoded from their blobs; the
    others (RDS text, or no columnar copy) are read row by row from ``stations``. Raises
    :class:`survey.errors.StoreError` when the database has no ``stations`` table (schema 1).
    """
    from survey.store.read import read_station_rows  # the row path (and its schema-1 error)

    ids = [int(i) for i in sweep_ids]
    order = {sid: k for k, sid in enumerate(ids)}
    unique = sorted(order, key=order.__getitem__)
    with_vectors = _has_table(conn, "station_vectors")
    # read in chunks of the asked order, appending each column's blobs as they come: the
    # blobs fetched are held one chunk at a time
    unknown = set(leave_out) - set(_STAND_IN)
    if unknown:
        raise ValueError(f"cannot leave out {', '.join(sorted(unknown))}; only {', '.join(_STAND_IN)}")
    skipped = set(leave_out) | (set() if detail else set(_DETAIL_FIELDS))
    fields = [(k, name, dtype) for k, (name, dtype) in enumerate(STATION_VECTOR_FIELDS) if name not in skipped]
    joined = [bytearray() for _ in fields]
    counts, vocab_of_sweep, rds_pieces = [], [], []
    vocabularies: dict[str, int] = {}
    offset = 0
    for start in range(0, len(unique), 900):
        chunk = unique[start:start + 900]
        vectors: dict[int, tuple] = {}
        if with_vectors:
            marks = ",".join("?" * len(chunk))
            for row in conn.execute(
                f"SELECT sweep_id, n_stations, n_rds, kinds, {', '.join(f[1] for f in fields)} FROM station_vectors"
                f" WHERE sweep_id IN ({marks})", chunk,
            ):
                if not row[2]:
                    vectors[int(row[0])] = row
        rows_of: dict[int, list] = {}
        for r in read_station_rows(conn, [sid for sid in chunk if sid not in vectors]):  # and the schema-1 error
            rows_of.setdefault(r.sweep_id, []).append(r)
        pieces = []
        for sid in chunk:
            if sid in vectors:
                row = vectors[sid]
                n, kinds, blobs = int(row[1]), row[3], row[4:]
            else:
                rows = rows_of.get(sid, [])
                n, _, kinds, packed = pack_station_vector(rows)
                blobs = tuple(packed[f[1]] for f in fields)
                rds_pieces.append((offset, [(r.rds_pi, r.rds_ps, r.rds_pty, r.rds_blocks, r.rds_block_errors)
                                            for r in rows]))
            pieces.append(blobs)
            counts.append(n)
            vocab_of_sweep.append(vocabularies.setdefault(kinds, len(vocabularies)))
            offset += n
        for k, acc in enumerate(joined):
            acc += b"".join(map(itemgetter(k), pieces))
        del vectors, pieces, rows_of
    column = {name: np.frombuffer(acc, dtype) for acc, (_, name, dtype) in zip(joined, fields)}
    for name in skipped:
        column[name] = np.broadcast_to(_STAND_IN[name], (offset,))
    names = sorted({k for text in vocabularies for k in text.split(",") if k})
    counts_arr = np.asarray(counts, np.int64)
    kind = column["kind"]
    if len(vocabularies) > 1 or any(text.split(",") != names for text in vocabularies if text):
        remap = np.zeros((len(vocabularies), 256), np.uint8)
        for text, v in vocabularies.items():
            for local, k in enumerate(k for k in text.split(",") if k):
                remap[v, local] = names.index(k)
        kind = remap[np.repeat(np.asarray(vocab_of_sweep, np.int64), counts_arr), kind]
    flags = column["flags"]
    return StationColumns(
        sweep_id=np.repeat(np.asarray(unique, np.int64), counts_arr), freq_hz=column["freq_hz"],
        hop_index=column["hop_index"], kind=kind, kind_names=tuple(names),
        occupied_bw_hz=column["occupied_bw_hz"], power_dbfs=column["power_dbfs"], noise_dbfs=column["noise_dbfs"],
        cn_db=column["cn_db"], ci_db=column["ci_db"], stereo=(flags & _STEREO).astype(bool),
        channel_freq_hz=column["channel_freq_hz"], separable=(flags & _SEPARABLE).astype(bool),
        **_rds_columns(offset, rds_pieces),
    )


def _rds_columns(total: int, pieces: list[tuple[int, list]]) -> dict[str, np.ndarray]:
    """The RDS columns of :class:`StationColumns` from the rows read from ``stations``.

    Without any RDS data they are read-only views of one value (no memory per emission).
    """
    pi, ps, pty, blocks, errors = (np.full(1, -1, np.int32), np.full(1, None, object), np.full(1, -1, np.int16),
                                   np.zeros(1, np.int32), np.zeros(1, np.int32))
    if any(any(v not in (None, 0) for item in rds for v in item) for _, rds in pieces):
        pi, ps, pty, blocks, errors = (np.repeat(a, total) for a in (pi, ps, pty, blocks, errors))
        for start, rds in pieces:
            for k, (r_pi, r_ps, r_pty, r_blocks, r_errors) in enumerate(rds):
                pi[start + k] = -1 if r_pi is None else int(r_pi)
                ps[start + k] = r_ps
                pty[start + k] = -1 if r_pty is None else int(r_pty)
                blocks[start + k] = int(r_blocks or 0)
                errors[start + k] = int(r_errors or 0)
    else:
        pi, ps, pty, blocks, errors = (np.broadcast_to(a, (total,)) for a in (pi, ps, pty, blocks, errors))
    return {"rds_pi": pi, "rds_ps": ps, "rds_pty": pty, "rds_blocks": blocks, "rds_block_errors": errors}


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
