"""Census of stations: one entry per transmitter, across sweeps and configurations.

An emission (see :class:`survey.records.EmissionReading`) found in different sweeps within a few
kHz of the same carrier is the same station. Analyses consume a :class:`StationMatrix`: the same
shape of data as :class:`survey.store.ChannelMatrix`, with stations as columns instead of raster
channels, so every count and verdict is per transmitter.

The emissions are read as numpy columns (:func:`survey.store.read_station_columns`, the
columnar ``station_vectors`` copy) and grouped in numpy (:mod:`analysis.station_clusters`).
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from analysis.errors import BadParameterError, NoDataError
from analysis.terms import check_input, median_iqr
from survey.errors import StoreError
from survey.rds import RdsIdentity, RdsResult, merge_rds
from survey.station_names import name_for
from analysis.station_clusters import Clusters, cluster_columns, station_members
from survey.store import (ChannelMatrix, StationColumns, SweepRow, count_complete_sweeps, identified_sweep_ids,
                          list_sweeps, open_for_reading, read_channel_matrix, read_station_columns,
                          read_station_rows, upgrade_database)
from survey.units import db_to_ratio, ratio_to_db

#: Narrow emissions of different sweeps within this distance (Hz) of each other are one line.
#: A receiver's frequency error of a few ppm moves a carrier by well under 1 kHz in the VHF band.
SAME_STATION_HZ = 5_000.0
#: FM emissions within this distance are one station: FM broadcast carriers sit at least
#: 100 kHz apart (a 100 kHz or wider raster), and the carrier estimate of a station near 0 dB
#: C/N in a 5 ms dwell scatters by up to about +-10 kHz (measured on the demo recordings).
SAME_FM_STATION_HZ = 25_000.0

#: Kinds a census can hold, and what ``kinds="all"`` means.
KINDS = ("fm", "narrow")


@dataclass(frozen=True)
class StationMatrix:
    """Station readings of several sweeps; columns are stations of the census.

    Arrays are ``(n_sweeps, n_stations)`` float64. Where a station was detected as an emission
    in a sweep, ``power_dbfs`` is its own power and ``noise_dbfs`` the local floor in its channel
    bandwidth; where it was not, both come from the raster channel it sits on
    (``channel_freqs_hz``), so weak and missed stations still carry a measured value (NaN only
    where the sweep did not measure that channel). ``cn_db`` is the measured carrier-to-noise
    (may be below the detection margin, NaN where P <= N); ``detected`` says whether C/N reached
    the detection margin. ``sweep_ids`` and ``started_utc`` follow the sweeps asked for.

    A matrix made without ``detail`` (:func:`census_matrix`) holds read-only stand-ins for
    ``ci_db`` (NaN) and ``stereo`` (False), which no comparison reads.

    Station identity from RDS (IEC 62106), where decoded: ``names`` holds one display name per
    station (the PS name with its PI, or a user-supplied name; None when unknown), and
    ``rds_blocks`` / ``rds_block_errors`` the ``(n_sweeps, n_stations)`` counts of RDS block
    slots received and failed (0 where nothing was decoded; read-only zeros taking no memory when
    the sweeps hold no RDS counts at all). ``identities`` holds each
    station's RDS merged over all the sweeps of the matrix (:func:`survey.rds.merge_rds`).
    Empty when the census holds no identity data.
    """

    sweep_ids: np.ndarray
    started_utc: tuple[str, ...]
    freqs_hz: np.ndarray
    kinds: tuple[str, ...]
    channel_freqs_hz: np.ndarray
    power_dbfs: np.ndarray
    noise_dbfs: np.ndarray
    cn_db: np.ndarray
    ci_db: np.ndarray
    detected: np.ndarray
    stereo: np.ndarray
    names: tuple[str | None, ...] = ()
    rds_blocks: np.ndarray | None = None
    rds_block_errors: np.ndarray | None = None
    identities: tuple[RdsIdentity, ...] = ()

    @property
    def n_stations(self) -> int:
        """Number of stations (columns)."""
        return int(self.freqs_hz.size)

    def rows(self, sweep_ids) -> "StationMatrix":
        """The same stations for a subset of the sweeps (in the order given)."""
        wanted = np.asarray([int(s) for s in sweep_ids], dtype=np.int64)
        order = np.argsort(self.sweep_ids, kind="stable")
        pos = np.searchsorted(self.sweep_ids, wanted, sorter=order) if self.sweep_ids.size else wanted
        if wanted.size and (np.any(pos >= self.sweep_ids.size) or
                            np.any(self.sweep_ids[order[np.minimum(pos, self.sweep_ids.size - 1)]] != wanted)):
            raise KeyError("a sweep asked for is not a row of this station matrix")
        take = order[pos] if wanted.size else np.zeros(0, np.int64)
        return StationMatrix(
            sweep_ids=self.sweep_ids[take],
            started_utc=tuple(self.started_utc[i] for i in take.tolist()),
            freqs_hz=self.freqs_hz,
            kinds=self.kinds,
            channel_freqs_hz=self.channel_freqs_hz,
            power_dbfs=self.power_dbfs[take],
            noise_dbfs=self.noise_dbfs[take],
            cn_db=self.cn_db[take],
            ci_db=_take_rows(self.ci_db, take),
            detected=self.detected[take],
            stereo=_take_rows(self.stereo, take),
            names=self.names,
            rds_blocks=_take_rows(self.rds_blocks, take),
            rds_block_errors=_take_rows(self.rds_block_errors, take),
            identities=self.identities,
        )


def _take_rows(counts: np.ndarray | None, take: np.ndarray) -> np.ndarray | None:
    """Rows ``take`` of a matrix; a read-only matrix of one value (a stand-in) stays one."""
    if counts is None:
        return None
    if counts.size and not any(counts.strides):
        return np.broadcast_to(counts[(0,) * counts.ndim], (take.size,) + counts.shape[1:])
    return counts[take]


def display_name(identity: RdsIdentity | None, user_name: str | None = None) -> str | None:
    """A station's name for display: ``"PS (PI XXXX)"`` when RDS gave the whole PS name.

    Without a whole PS, a user-supplied name (with the PI when one is confirmed), else
    ``"PI XXXX"`` when only the PI is known, else None. An RDS name always wins over the user's.
    """
    pi = identity.pi_hex if identity is not None else None
    ps = identity.ps if identity is not None else None
    if ps is not None and pi is not None:
        return f"{ps.strip() or ps} (PI {pi})"
    if user_name:
        return f"{user_name} (PI {pi})" if pi is not None else user_name
    return f"PI {pi}" if pi is not None else None


#: The identity of a station of which nothing was decoded (the same for every such station).
_NO_IDENTITY = merge_rds(())


def _results(cols: StationColumns, index) -> list[RdsResult]:
    """The RDS result of each emission ``index`` of ``cols`` (in that order)."""
    return [RdsResult.from_columns(None if pi < 0 else pi, ps, None if pty < 0 else pty, blocks, errors)
            for pi, ps, pty, blocks, errors in zip(cols.rds_pi[index].tolist(), cols.rds_ps[index].tolist(),
                                                   cols.rds_pty[index].tolist(), cols.rds_blocks[index].tolist(),
                                                   cols.rds_block_errors[index].tolist())]


def _with_rds(cols: StationColumns) -> np.ndarray:
    """Emissions carrying a confirmed PI or RDS block counts (what an identity is merged from)."""
    return (cols.rds_pi >= 0) | (cols.rds_blocks != 0)


def _identities(cols: StationColumns, clusters: Clusters) -> list[RdsIdentity]:
    """Each station's RDS merged over its emissions: PS segments accumulate only under the
    confirmed PI; a station of which nothing was decoded gets the empty identity."""
    out = [_NO_IDENTITY] * clusters.n
    if not clusters.n:
        return out
    with_rds = _with_rds(cols) & (clusters.station >= 0)
    decoded = np.flatnonzero(np.bincount(clusters.station[with_rds], minlength=clusters.n))
    for j, members in station_members(clusters, cols.freq_hz, decoded.tolist()).items():
        out[j] = merge_rds(_results(cols, members))
    return out


def _identities_across_survey(conn: sqlite3.Connection, cols: StationColumns, clusters: Clusters,
                              sweep_ids: Sequence[int]) -> list[RdsIdentity | None]:
    """Each FM station's RDS merged with the identified rows of every other sweep of the database.

    Who a transmitter is does not depend on the configuration it was heard through: a long
    identification recording (or the sweeps of another preamp) can name a station that the short
    hops of a comparison only measure. Only rows that confirm a PI are drawn in, within
    :data:`SAME_FM_STATION_HZ` of the station; None where no other sweep identifies it.
    """
    mine = set(int(i) for i in sweep_ids)
    other = [i for i in identified_sweep_ids(conn) if i not in mine]
    if not other or not clusters.n:
        return [None] * clusters.n
    known = read_station_columns(conn, other)
    known = known.take(known.is_kind("fm") & (known.rds_pi >= 0))
    near = {j: np.flatnonzero(np.abs(known.freq_hz - f) <= SAME_FM_STATION_HZ)
            for j, (f, kind) in enumerate(zip(clusters.freq_hz.tolist(), clusters.kinds)) if kind == "fm"}
    near = {j: rows for j, rows in near.items() if rows.size}
    own = station_members(clusters, cols.freq_hz, list(near))
    return [merge_rds(_results(cols, own[j]) + _results(known, near[j])) if j in near else None
            for j in range(clusters.n)]


def _sweep_rows(sweep_id: np.ndarray, ids: Sequence[int]) -> np.ndarray:
    """Row of the census matrix (position in ``ids``) of each emission; emissions come grouped by sweep."""
    row_of = {sid: i for i, sid in enumerate(ids)}
    change = np.flatnonzero(np.r_[True, sweep_id[1:] != sweep_id[:-1]]) if sweep_id.size else np.zeros(0, np.int64)
    runs = np.diff(np.r_[change, sweep_id.size])
    first = np.fromiter((row_of[s] for s in sweep_id[change].tolist()), np.int64, count=change.size)
    return np.repeat(first, runs)


def _strongest_per_cell(cell: np.ndarray, cn_db: np.ndarray, freq_hz: np.ndarray, n_cells: int) -> np.ndarray:
    """Index of the emission read for each occupied cell (``cell`` -1: none): the highest C/N
    (NaN last); among equal C/N the first member (lowest carrier, then the first given).
    One index per cell, in no particular order.

    A cell (sweep, station) almost always holds one emission; only the cells holding several are
    sorted.
    """
    if cell.size and cell[0] >= 0 and bool(np.all(cell[1:] > cell[:-1])):
        # the usual layout (sweeps in order, each sweep's emissions by frequency, one per station):
        # strictly increasing cells, so every emission is the only one of its cell
        return np.arange(cell.size)
    valid = cell >= 0
    every = bool(valid.all())
    count = np.bincount(cell if every else cell[valid], minlength=n_cells)
    single = count[cell if every else np.where(valid, cell, 0)] == 1
    del count
    if not every:
        single &= valid
    shared = np.flatnonzero(valid & ~single)
    if not shared.size:
        return np.flatnonzero(single)
    sub = cell[shared]
    order = np.lexsort((shared, freq_hz[shared], -np.nan_to_num(cn_db[shared], nan=-np.inf), sub))
    best = shared[order[np.r_[True, sub[order][1:] != sub[order][:-1]]]]
    return np.concatenate([np.flatnonzero(single), best])


def cluster_stations(cols: StationColumns) -> Clusters:
    """The census's stations among the emissions ``cols``: single linkage along frequency, FM
    within :data:`SAME_FM_STATION_HZ`, narrow within :data:`SAME_STATION_HZ`
    (:func:`analysis.station_clusters.cluster_columns`)."""
    return cluster_columns(cols, {"fm": SAME_FM_STATION_HZ, "narrow": SAME_STATION_HZ})


def census_matrix(conn: sqlite3.Connection, sweeps: Sequence[SweepRow], kinds=("fm",),
                  names: Mapping[int, str] | None = None,
                  channels: ChannelMatrix | None = None, detail: bool = True) -> StationMatrix:
    """Stations heard in any of ``sweeps``, one column each, one row per sweep (order kept).

    Emissions (the ``stations`` table) of all the given sweeps are grouped into stations: an
    emission of the same kind within :data:`SAME_FM_STATION_HZ` (FM) or :data:`SAME_STATION_HZ`
    (narrow) of another belongs to the same transmitter (single linkage along frequency). A
    station's frequency is the median of its emissions' carriers. Where a sweep has an emission of the station, the row holds
    its own power, floor, C/N, C/I and stereo flag (the strongest, if a sweep has two);
    ``detected`` is C/N at or above the sweep's detection margin. Where it has none, power and
    noise come from the raster channel the station sits on (as ``channels`` stores them), C/N
    is ``10 log10((P - N)/N)`` (NaN where P <= N), C/I NaN, stereo False, not detected.

    Parameters
    ----------
    conn : sqlite3.Connection
        An open survey database of schema 2 or later (:func:`survey.store.open_for_reading`).
    sweeps : sequence of SweepRow
        Sweeps to include, e.g. base and test sweeps of a comparison; split the result with
        :meth:`StationMatrix.rows`.
    kinds : sequence of str
        Emission kinds to keep (``"fm"``, ``"narrow"``).
    names : mapping of int to str, optional
        User-supplied names ``{freq_hz: name}`` (:func:`survey.station_names.read_station_names`),
        matched within 50 kHz; they name stations whose RDS gives no whole PS
        (:func:`display_name`).
    channels : ChannelMatrix, optional
        The raster channels of the same ``sweeps`` (rows in the same order) when already read
        (:func:`survey.store.read_sweep_matrix`); read here otherwise.
    detail : bool
        False leaves out C/I and the stereo flag (``ci_db`` NaN, ``stereo`` False, read-only and
        taking no memory): what the comparisons read does not include them.

    Identity: each station's RDS results (one per stored emission) are merged over all the
    given sweeps (:func:`survey.rds.merge_rds`: PI by vote among confirmed codes, PS segments
    only from results confirming it), giving ``identities``; ``rds_blocks`` and
    ``rds_block_errors`` are per sweep. ``names`` also draw on the identified rows of every other
    sweep of the database (a transmitter's identity does not depend on the configuration).
    """
    ids = [int(s.id) for s in sweeps]
    margin = {int(s.id): float(s.received_margin_db) for s in sweeps}
    cols = read_station_columns(conn, ids, detail=False, leave_out=() if detail else ("ci_db",))
    wanted = cols.is_kind(*kinds)
    if not wanted.all():
        cols = cols.take(wanted)
    clusters = cluster_stations(cols)
    n, m = len(ids), clusters.n
    shape = (n, m)
    power = np.full(shape, np.nan)
    noise = np.full(shape, np.nan)
    cn = np.full(shape, np.nan)
    ci = np.full(shape, np.nan) if detail else np.broadcast_to(np.float64(np.nan), shape)
    detected = np.zeros(shape, dtype=bool)
    stereo = np.zeros(shape, dtype=bool) if detail else np.broadcast_to(False, shape)
    heard = np.zeros(shape, dtype=bool)
    counted = bool(m) and bool(cols.rds_blocks.any() or cols.rds_block_errors.any())
    # without RDS block counts in these sweeps, read-only zeros (no memory, nothing to copy per row)
    blocks = np.zeros(shape, dtype=np.int64) if counted else np.broadcast_to(np.int64(0), shape)
    block_errors = np.zeros(shape, dtype=np.int64) if counted else np.broadcast_to(np.int64(0), shape)
    if m:
        # every emission at once: where a sweep holds two emissions of one station, the one
        # with the higher C/N is the station's reading (NaN C/N last; equal C/N: the first member)
        grouped = clusters.station >= 0
        every = bool(grouped.all())
        cell = _sweep_rows(cols.sweep_id, ids)
        cell *= m
        cell += clusters.station                      # flat index into the (n, m) matrices
        if not every:
            cell = np.where(grouped, cell, -1)
        if counted:
            take = grouped if not every else slice(None)
            blocks += np.bincount(cell[take], cols.rds_blocks[take], minlength=n * m).reshape(shape).astype(np.int64)
            block_errors += np.bincount(cell[take], cols.rds_block_errors[take],
                                        minlength=n * m).reshape(shape).astype(np.int64)
        chosen = _strongest_per_cell(cell, cols.cn_db, cols.freq_hz, n * m)
        flat = cell[chosen]
        del cell
        # usually every emission is its cell's reading, in order: then the columns are used as they are
        pick = (lambda column: column) if chosen.size == cols.size and (
            chosen.size == 0 or (chosen[0] == 0 and chosen[-1] == chosen.size - 1 and
                                 bool(np.all(np.diff(chosen) == 1)))) else (lambda column: column[chosen])
        heard.ravel()[flat] = True
        power.ravel()[flat] = pick(cols.power_dbfs)
        noise.ravel()[flat] = pick(cols.noise_dbfs)
        if detail:
            ci.ravel()[flat] = pick(cols.ci_db)
            stereo.ravel()[flat] = pick(cols.stereo)
        chosen_cn = pick(cols.cn_db)
        cn.ravel()[flat] = chosen_cn
        margins = np.asarray([margin[s] for s in ids], dtype=np.float64)[flat // m]
        detected.ravel()[flat] = np.isfinite(chosen_cn) & (chosen_cn >= margins)
        del chosen, flat, chosen_cn, margins
    chan_freqs = clusters.channel_freq_hz.astype(np.int64)
    if m and (~heard).any():
        if channels is None or [int(s) for s in channels.sweep_ids.tolist()] != ids:
            channels = read_channel_matrix(conn, ids)
        axis = channels.freqs_hz
        if axis.size:
            col = np.clip(np.searchsorted(axis, chan_freqs), 0, axis.size - 1)
            fi, fj = np.nonzero(~heard & (axis[col] == chan_freqs)[np.newaxis, :])
            p_fill = channels.power_dbfs[fi, col[fj]].astype(np.float64)
            n_fill = channels.noise_dbfs[fi, col[fj]].astype(np.float64)
            power[fi, fj] = p_fill
            noise[fi, fj] = n_fill
            with np.errstate(invalid="ignore", over="ignore"):
                cn_fill = np.asarray(ratio_to_db(np.asarray(db_to_ratio(p_fill - n_fill)) - 1.0))
            cn[fi, fj] = np.where(np.isfinite(cn_fill), cn_fill, np.nan)
    started = {int(s.id): s.started_utc for s in sweeps}
    identities = tuple(_identities(cols, clusters))
    known = _identities_across_survey(conn, cols, clusters, ids)
    user = dict(names or {})
    return StationMatrix(
        sweep_ids=np.asarray(ids, dtype=np.int64),
        started_utc=tuple(started[i] for i in ids),
        freqs_hz=np.asarray(clusters.freq_hz, dtype=np.float64),
        kinds=clusters.kinds,
        channel_freqs_hz=chan_freqs,
        power_dbfs=power,
        noise_dbfs=noise,
        cn_db=cn,
        ci_db=ci,
        detected=detected,
        stereo=stereo,
        names=tuple(display_name(wide if wide is not None else ident, name_for(user, f) if user else None)
                    for ident, wide, f in zip(identities, known, clusters.freq_hz.tolist())),
        rds_blocks=blocks,
        rds_block_errors=block_errors,
        identities=identities,
    )


@dataclass(frozen=True)
class StationSummary:
    """One station of a census over the sweeps of one configuration and input.

    Medians over the sweeps: ``cn_db`` treats a sweep in which the station was not detected as
    below the floor (left-censored, ranked below every detected sweep; None when fewer than half
    detected it); ``ci_db``, ``occupied_bw_hz`` and the levels are medians over the sweeps that
    heard it (None if none). ``stereo`` is True when the pilot was found in at least half of the
    sweeps that detected it. ``heard_sweeps`` of ``sweeps`` detected it.

    RDS over these sweeps (:func:`survey.rds.merge_rds`): ``rds_pi`` the confirmed PI,
    ``rds_ps`` the whole PS name or what is known of it (``_`` per missing character),
    ``rds_pty`` the programme type, ``rds_block_error_rate`` failed over received block slots
    (None without synchronisation); ``name`` the display name (:func:`display_name`).
    """

    configuration: str
    input: str
    freq_hz: float
    kind: str
    channel_freq_hz: int
    cn_db: float | None
    ci_db: float | None
    power_dbfs: float | None
    noise_dbfs: float | None
    occupied_bw_hz: float | None
    stereo: bool
    heard_sweeps: int
    sweeps: int
    rds_pi: int | None = None
    rds_ps: str | None = None
    rds_pty: int | None = None
    rds_block_error_rate: float | None = None
    name: str | None = None


def _finite_or_none(value: float) -> float | None:
    return float(value) if np.isfinite(value) else None


def summarise_stations(conn: sqlite3.Connection, sweeps: Sequence[SweepRow],
                       kinds=("fm",), names: Mapping[int, str] | None = None) -> list[StationSummary]:
    """Per-station summary of sweeps that share one configuration and input (never pooled).

    Raises :class:`BadParameterError` if ``sweeps`` mixes configurations or inputs.
    """
    labels = {(s.configuration, s.input) for s in sweeps}
    if len(labels) > 1:
        raise BadParameterError("summarise one configuration and input at a time; got " + ", ".join(
            f"{c}/{i}" for c, i in sorted(labels)))
    if not sweeps:
        return []
    configuration, input_label = next(iter(labels))
    matrix = census_matrix(conn, sweeps, kinds=kinds, names=names)
    cols = read_station_columns(conn, [s.id for s in sweeps])
    obw: dict[int, np.ndarray] = {}
    for j, (f, kind) in enumerate(zip(matrix.freqs_hz.tolist(), matrix.kinds)):
        reach = SAME_FM_STATION_HZ if kind == "fm" else SAME_STATION_HZ
        near = cols.is_kind(kind) & (np.abs(cols.freq_hz - f) <= reach)
        obw[j] = cols.occupied_bw_hz[near]
    censored = np.where(matrix.detected, matrix.cn_db, -np.inf)
    censored = np.where(np.isfinite(matrix.power_dbfs) | matrix.detected, censored, np.nan)
    cn_med, _ = median_iqr(censored)
    out = []
    for j in range(matrix.n_stations):
        ident = matrix.identities[j]
        det = matrix.detected[:, j]
        ci_vals = matrix.ci_db[det, j]
        ci_vals = ci_vals[np.isfinite(ci_vals)]
        out.append(StationSummary(
            configuration=configuration, input=input_label, freq_hz=float(matrix.freqs_hz[j]),
            kind=matrix.kinds[j], channel_freq_hz=int(matrix.channel_freqs_hz[j]),
            cn_db=_finite_or_none(cn_med[j]),
            ci_db=float(np.median(ci_vals)) if ci_vals.size else None,
            power_dbfs=_finite_or_none(np.median(matrix.power_dbfs[det, j])) if det.any() else None,
            noise_dbfs=_finite_or_none(np.median(matrix.noise_dbfs[det, j])) if det.any() else None,
            occupied_bw_hz=float(np.median(obw[j])) if obw[j].size else None,
            stereo=bool(det.any() and matrix.stereo[det, j].mean() >= 0.5),
            heard_sweeps=int(det.sum()),
            sweeps=int(matrix.sweep_ids.size),
            rds_pi=ident.pi,
            rds_ps=ident.ps if ident.ps is not None else ident.ps_partial,
            rds_pty=ident.pty,
            rds_block_error_rate=ident.block_error_rate,
            name=matrix.names[j],
        ))
    return out


def kinds_from_option(kind: str) -> tuple[str, ...]:
    """``"fm"``, ``"narrow"`` or ``"all"`` as the tuple of kinds :func:`census_matrix` takes."""
    if kind == "all":
        return KINDS
    if kind not in KINDS:
        raise BadParameterError(f"kind {kind!r} is not one of fm, narrow, all")
    return (kind,)


def _complete_sweeps(conn: sqlite3.Connection, configuration: str | None, input: str) -> list[SweepRow]:
    """Complete sweeps of one configuration (None: all) and input; one error naming what exists."""
    rows = list_sweeps(conn, configuration=configuration, input=input)
    if not rows:
        present = ", ".join(f"'{c.configuration}' {c.input} ({c.sweeps})" for c in count_complete_sweeps(conn))
        what = f"configuration '{configuration}'" if configuration is not None else "any configuration"
        raise NoDataError(f"no complete sweeps of {what} with input '{input}'; the database holds: "
                          f"{present or 'no complete sweeps'}; check the spelling")
    return rows


def station_census(path, configuration: str | None = None, input: str = "antenna",
                   kinds=("fm",), names: Mapping[int, str] | None = None) -> tuple[list[StationSummary], list[str]]:
    """Census of a database file: one :class:`StationSummary` per station and configuration.

    Without ``configuration`` every configuration that has complete sweeps of ``input`` gets its
    own block (medians are never pooled across configurations). A schema-1 database is migrated
    first (its station rows rebuilt from kept spectra); the second value lists what the
    migration could not rebuild and why (empty when nothing was missing). ``names``: user-supplied
    station names, see :func:`census_matrix`.
    """
    check_input(input)
    notes: list[str] = []
    conn = open_for_reading(path)
    try:
        try:
            read_station_rows(conn, [])
        except StoreError:
            conn.close()
            notes = upgrade_database(path)
            conn = open_for_reading(path)
        rows = _complete_sweeps(conn, configuration, input)
        by_config: dict[str, list[SweepRow]] = {}
        for r in rows:
            by_config.setdefault(r.configuration, []).append(r)
        out: list[StationSummary] = []
        for label in sorted(by_config):
            out.extend(summarise_stations(conn, by_config[label], kinds=kinds, names=names))
        return out, notes
    finally:
        conn.close()
