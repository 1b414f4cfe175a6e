"""The analysis model: one survey database opened once, its selections read once and shared.

Every analysis takes a :class:`Survey`. It opens the database read-only once, resolves the
configuration labels once (one error that lists every label and input present), and keeps
what was read (sweep lists, channel and station matrices, hop rows, kept spectra, noise
groups) so that analyses composed into one command or one report share a single read.
Results of whole analyses composed by :mod:`analysis.workflows` are kept too
(:meth:`Survey.memo`), so each is computed once per survey.

All reads go through :mod:`survey.store`'s typed read helpers; nothing here speaks SQL or
decodes storage blobs.

The per-item matrix the comparisons consume comes from :func:`_matrix_for` (the single place
that chooses between raster channels and the station census).
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import Callable, Sequence, TypeVar

import numpy as np

from analysis.census import StationMatrix, census_matrix
from analysis.terms import check_input, normalise_utc
from analysis.errors import NoDataError
from survey.errors import StoreError
from survey.store import (
    ChannelMatrix,
    EventRow,
    HopRow,
    HopSpectrum,
    LabelCount,
    RunRow,
    SweepRow,
    count_complete_sweeps,
    list_sweeps,
    open_for_reading,
    read_channel_hop_centers,
    read_event_rows,
    read_hop_spectra,
    read_hops,
    read_runs,
    read_station_rows,
    read_sweep_matrix,
    spectra_span_hz,
    sweeps_with_spectra,
)

T = TypeVar("T")


def _matrix_for(survey: "Survey", sweeps: Sequence[SweepRow], kinds: tuple[str, ...] = ("fm",)) -> StationMatrix:
    """The per-station matrix (rows = ``sweeps``) every comparison, count and headline is made on.

    This is the one place that chooses the unit of the analyses: the station census
    (:func:`analysis.census.census_matrix`, one column per transmitter). Raster channels
    (:meth:`Survey.channel_matrix`) stay the detail behind the ``--channels`` option. Both records
    share the fields the analyses read (``sweep_ids``, ``started_utc``, ``freqs_hz``,
    ``power_dbfs``, ``noise_dbfs``, ``cn_db``, ``detected`` and ``rows(...)``). C/I and the stereo
    flag are not among them and are left out (``detail=False``).
    """
    survey.require_census()
    # the raster channels fill the sweeps that did not find a station; read once, shared
    return census_matrix(survey.connection, sweeps, kinds=kinds, channels=survey.channel_matrix(sweeps),
                         detail=False)


def _take_rows(matrix, start: int, stop: int):
    """Rows ``start:stop`` of a per-item matrix (station or channel), same columns."""
    ids = matrix.sweep_ids[start:stop]
    if hasattr(matrix, "rows"):
        return matrix.rows(ids)
    return replace(matrix, sweep_ids=ids, started_utc=tuple(matrix.started_utc[start:stop]),
                   power_dbfs=matrix.power_dbfs[start:stop], noise_dbfs=matrix.noise_dbfs[start:stop],
                   received=matrix.received[start:stop])


class Survey:
    """A survey database opened read-only for analysis, with everything read kept for reuse.

    Parameters
    ----------
    db_path : path
        The survey database (SQLite). Raises ``survey.errors.StoreError`` when it does not
        exist or is not a bandcensus database.

    Use as a context manager or call :meth:`close`.
    """

    def __init__(self, db_path: str | Path):
        self.db_path = Path(db_path)
        self._conn = open_for_reading(self.db_path)
        self._cache: dict[tuple, object] = {}
        self._read: list[ChannelMatrix] = []

    # -- lifetime --------------------------------------------------------------------------
    @property
    def connection(self):
        """The read-only connection, for :mod:`survey.store` read helpers only."""
        return self._conn

    def close(self) -> None:
        """Close the database connection (cached results stay usable)."""
        self._conn.close()

    def __enter__(self) -> "Survey":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def memo(self, key: tuple, compute: Callable[[], T]) -> T:
        """``compute()`` once per ``key`` for the life of this survey (results are immutable)."""
        if key not in self._cache:
            self._cache[key] = compute()
        return self._cache[key]  # type: ignore[return-value]

    # -- labels ----------------------------------------------------------------------------
    def label_counts(self) -> tuple[LabelCount, ...]:
        """Complete sweeps per (configuration, input)."""
        return self.memo(("label_counts",), lambda: tuple(count_complete_sweeps(self._conn)))

    def labels(self) -> tuple[str, ...]:
        """Every configuration label with at least one complete sweep, sorted."""
        return tuple(sorted({c.configuration for c in self.label_counts()}))

    def present(self) -> str:
        """What the database holds, e.g.
        ``"bare (antenna: 7 sweeps, terminated: 3 sweeps); preamp-a (antenna: 7 sweeps)"``."""
        by_label: dict[str, list[str]] = {}
        for c in self.label_counts():
            by_label.setdefault(c.configuration, []).append(f"{c.input}: {c.sweeps} sweeps")
        if not by_label:
            return "nothing (the database has no complete sweeps)"
        return "; ".join(f"{label} ({', '.join(parts)})" for label, parts in sorted(by_label.items()))

    def has(self, configuration: str, input: str | None = None) -> bool:
        """True when ``configuration`` (with ``input``, if given) has complete sweeps."""
        return any(c.configuration == configuration and (input is None or c.input == input)
                   for c in self.label_counts())

    def require(self, labels: Sequence[str | None], input: str | None = None) -> None:
        """Raise one :class:`NoDataError` naming every label (of ``input``) that has no complete
        sweeps, with what the database holds; ``None`` labels are skipped."""
        missing = [label for label in dict.fromkeys(labels) if label is not None and not self.has(label, input)]
        if missing:
            what = ", ".join(f"'{m}'" for m in missing)
            of = f" with input '{input}'" if input else ""
            raise NoDataError(
                f"no complete sweeps of configuration {what}{of} in {self.db_path}; it holds: {self.present()}; "
                "check the spelling"
            )

    def require_census(self) -> None:
        """Raise one :class:`NoDataError` when the database predates the station census.

        A schema-1 database has no ``stations`` table; this survey is read-only and never
        migrates it. The message names the command that does (once, keeping every row).
        """
        def check() -> bool:
            try:
                read_station_rows(self._conn, [])
            except StoreError:
                raise NoDataError(
                    f"{self.db_path} predates the station census (schema 1): run `bandcensus stations --db "
                    f"{self.db_path}` once to migrate it (`compare --channels` reads the raster channels without it)"
                ) from None
            return True
        self.memo(("census_present",), check)

    # -- sweeps and matrices ---------------------------------------------------------------
    def sweeps(self, configuration: str | None, input: str = "antenna", since: str | None = None,
               until: str | None = None) -> tuple[SweepRow, ...]:
        """Complete sweeps of one configuration (None: all) and input in a time range, oldest first.

        Raises :class:`NoDataError` (naming what exists) when nothing matches.
        """
        check_input(input)
        since_n, until_n = normalise_utc(since, "since"), normalise_utc(until, "until")
        rows = self.find_sweeps(configuration, input, since_n, until_n)
        if not rows:
            what = f"configuration '{configuration}'" if configuration is not None else "any configuration"
            span = f" between {since or 'the start'} and {until or 'the end'}" if since or until else ""
            raise NoDataError(
                f"no complete sweeps of {what} with input '{input}'{span} in {self.db_path}; it holds: "
                f"{self.present()}; check the spelling or the time range"
            )
        return rows

    def all_sweeps(self) -> tuple[SweepRow, ...]:
        """Every complete sweep, in time order (read once)."""
        return self.memo(("all_sweeps",), lambda: tuple(list_sweeps(self._conn)))

    def find_sweeps(self, configuration: str | None = None, input: str | None = None,
                    since_utc: str | None = None, until_utc: str | None = None) -> tuple[SweepRow, ...]:
        """Complete sweeps matching the selection (possibly none); times as stored (UTC)."""
        def select() -> tuple[SweepRow, ...]:
            groups = self._sweep_groups()
            picked = [rows for (c, i), rows in groups.items()
                      if (configuration is None or c == configuration) and (input is None or i == input)]
            if len(picked) == 1:
                rows = picked[0]
            else:  # several labels: back in time order (their positions in all_sweeps)
                position = self._sweep_positions()
                rows = sorted((s for g in picked for s in g), key=lambda s: position[id(s)])
            if since_utc is None and until_utc is None:
                return tuple(rows)
            return tuple(s for s in rows if (since_utc is None or s.started_utc >= since_utc)
                         and (until_utc is None or s.started_utc < until_utc))
        return self.memo(("sweeps", configuration, input, since_utc, until_utc), select)

    def _sweep_groups(self) -> dict[tuple[str, str], list[SweepRow]]:
        """Every complete sweep grouped by (configuration, input), time order kept (one pass)."""
        def group() -> dict[tuple[str, str], list[SweepRow]]:
            out: dict[tuple[str, str], list[SweepRow]] = {}
            for s in self.all_sweeps():
                out.setdefault((s.configuration, s.input), []).append(s)
            return out
        return self.memo(("sweep_groups",), group)

    def _sweep_positions(self) -> dict[int, int]:
        """Position of each record of :meth:`all_sweeps` (by object identity)."""
        return self.memo(("sweep_positions",), lambda: {id(s): k for k, s in enumerate(self.all_sweeps())})

    def channel_matrix(self, sweeps: Sequence[SweepRow]) -> ChannelMatrix:
        """Raster-channel readings of ``sweeps`` (rows in the order given), read once.

        Sweeps already read as part of a larger request are taken from it (rows selected in
        memory) instead of being read and decoded again.
        """
        ids = tuple(int(s.id) for s in sweeps)
        return self.memo(("channel_matrix", ids), lambda: self._rows_from_read(ids) or
                         self._remember(read_sweep_matrix(self._conn, list(sweeps))))

    def channel_matrices(self, *groups: Sequence[SweepRow]) -> tuple[ChannelMatrix, ...]:
        """Raster-channel matrices of several groups of sweeps from ONE read of all of them (in id
        order, the read :func:`_matrix_for` shares); one matrix per group, rows in the order given."""
        every = sorted({int(s.id): s for g in groups for s in g}.values(), key=lambda s: int(s.id))
        self.channel_matrix(every)
        return tuple(self.channel_matrix(g) for g in groups)

    def channel_rows(self, *groups: Sequence[SweepRow]) -> tuple[ChannelMatrix, tuple[np.ndarray, ...]]:
        """One raster-channel matrix holding every sweep of ``groups`` (a read shared with
        :meth:`channel_matrices` and the census) and, per group, the row of each of its sweeps in
        it: for analyses that need a few columns of each group, without copying the groups' rows."""
        every = sorted({int(s.id): s for g in groups for s in g}.values(), key=lambda s: int(s.id))
        whole = self.channel_matrix(every)
        ids = whole.sweep_ids
        order = np.argsort(ids, kind="stable")
        return whole, tuple(order[np.searchsorted(ids, np.asarray([int(s.id) for s in g], np.int64), sorter=order)]
                            for g in groups)

    def _remember(self, matrix: ChannelMatrix) -> ChannelMatrix:
        self._read.append(matrix)
        return matrix

    def _rows_from_read(self, ids: tuple[int, ...]) -> ChannelMatrix | None:
        """The rows ``ids`` of a matrix read earlier, or None when no earlier read holds them all."""
        wanted = np.asarray(ids, np.int64)
        for whole in self._read:
            have = whole.sweep_ids
            if not have.size:
                if wanted.size:
                    continue
                return whole
            order = np.argsort(have, kind="stable")
            pos = np.minimum(np.searchsorted(have, wanted, sorter=order), have.size - 1)
            take = order[pos]
            if np.array_equal(have[take], wanted):  # every sweep asked for is a row of this read
                return replace(whole, sweep_ids=whole.sweep_ids[take],
                               started_utc=tuple(whole.started_utc[i] for i in take.tolist()),
                               power_dbfs=whole.power_dbfs[take], noise_dbfs=whole.noise_dbfs[take],
                               received=whole.received[take])
        return None

    def item_matrix(self, sweeps: Sequence[SweepRow], kinds: tuple[str, ...] = ("fm",)):
        """The per-item matrix of ``sweeps`` that verdicts and counts are made on (see
        :func:`_matrix_for`), read once."""
        ids = tuple(int(s.id) for s in sweeps)
        return self.memo(("item_matrix", ids, tuple(kinds)), lambda: _matrix_for(self, sweeps, tuple(kinds)))

    def item_matrices(self, *groups: Sequence[SweepRow], kinds: tuple[str, ...] = ("fm",)) -> tuple:
        """Per-item matrices of several groups of sweeps from ONE read, so that every group has the
        same columns (the same stations); one matrix per group, rows in the order given."""
        # one canonical read (sweeps in id order) serves every grouping and order of the same sweeps
        every = sorted({int(s.id): s for g in groups for s in g}.values(), key=lambda s: int(s.id))
        whole = self.item_matrix(every, kinds)
        key = tuple(int(s.id) for s in every)

        def rows_of(group) -> object:
            ids = tuple(int(s.id) for s in group)
            return whole if ids == key else self.memo(("item_rows", key, ids, tuple(kinds)),
                                                      lambda: whole.rows(list(ids)))
        return tuple(rows_of(g) for g in groups)

    def station_matrix(self, configuration: str, input: str = "antenna", since: str | None = None,
                       until: str | None = None, kinds: tuple[str, ...] = ("fm",)):
        """Per-station readings of one configuration's sweeps (through :func:`_matrix_for`)."""
        return self.item_matrix(self.sweeps(configuration, input, since, until), kinds)

    # -- other typed reads -----------------------------------------------------------------
    def hops(self, sweep_ids: Sequence[int]) -> tuple[HopRow, ...]:
        """Hop rows of the given sweeps, in sweep then hop order."""
        ids = tuple(int(i) for i in sweep_ids)
        return self.memo(("hops", ids), lambda: tuple(read_hops(self._conn, ids)))

    def sweeps_with_spectra(self) -> frozenset[int]:
        """Ids of the sweeps that kept spectra (read once)."""
        return self.memo(("with_spectra",), lambda: frozenset(sweeps_with_spectra(self._conn)))

    def hop_spectra(self, sweep_id: int) -> tuple[HopSpectrum, ...]:
        """Kept spectra of one sweep with their hop settings (empty when none were kept)."""
        if int(sweep_id) not in self.sweeps_with_spectra():
            return ()
        return self.memo(("spectra", int(sweep_id)), lambda: tuple(read_hop_spectra(self._conn, sweep_id)))

    def spectra_span_hz(self, sweep_id: int) -> tuple[float, float] | None:
        """Frequency span (Hz) of the kept spectra of one sweep; None if none were kept."""
        if int(sweep_id) not in self.sweeps_with_spectra():
            return None
        return self.memo(("span", int(sweep_id)), lambda: spectra_span_hz(self._conn, sweep_id))

    def channel_hop_centers(self, sweep_id: int):
        """``(freqs_hz, hop centre Hz)`` of every channel of one sweep."""
        return self.memo(("hop_centers", int(sweep_id)), lambda: read_channel_hop_centers(self._conn, sweep_id))

    def runs(self) -> tuple[RunRow, ...]:
        """Every run, oldest first."""
        return self.memo(("runs",), lambda: tuple(read_runs(self._conn)))

    def events(self, run_id: int) -> tuple[EventRow, ...]:
        """Events of one run."""
        return self.memo(("events", int(run_id)), lambda: tuple(read_event_rows(self._conn, run_id)))


def as_survey(source: "Survey | str | Path") -> tuple[Survey, bool]:
    """``(survey, opened_here)``: a :class:`Survey` as given, or opened from a path (the caller
    closes it when ``opened_here``)."""
    if isinstance(source, Survey):
        return source, False
    return Survey(source), True
