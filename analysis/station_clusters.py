"""Grouping emissions of many sweeps into stations, vectorised over numpy columns.

Single linkage along frequency, each kind apart: the carriers of one kind, sorted, split
wherever two neighbours lie more than the kind's tolerance apart. A station's frequency is the
median of its emissions' carriers, its raster channel the most common channel among them.
Stations of all kinds are then ordered by frequency (stable: FM before narrow at an equal
frequency). A station's *members* are its emissions ordered by carrier frequency, emissions at
the same frequency in the order given (sweep order); that order decides the rare ties (two
channels equally common, two emissions of one station in one sweep with equal C/N).

This is what :mod:`analysis.census` did emission by emission in Python. Here only the carrier
values are sorted (not an index array), each emission finds its station by a binary search on
the stations' lowest carriers, and members are put in order only for the stations that need it
(a tie, RDS to merge), so a week of sweeps is grouped in a few passes over the columns; the
results are identical (``tests/test_census_columns.py``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from survey.store import StationColumns


@dataclass(frozen=True)
class Clusters:
    """Stations found among the emissions of a :class:`~survey.store.StationColumns`.

    Per station (ordered by frequency): ``freq_hz`` (median carrier, Hz), ``kinds`` and
    ``channel_freq_hz`` (most common raster channel). ``station`` gives each emission's station
    (index into those; -1 for an emission of a kind not grouped).
    """

    freq_hz: np.ndarray
    kinds: tuple[str, ...]
    channel_freq_hz: np.ndarray
    station: np.ndarray

    @property
    def n(self) -> int:
        """Number of stations."""
        return int(self.freq_hz.size)


def station_members(clusters: Clusters, freq_hz: np.ndarray, which) -> dict[int, np.ndarray]:
    """Members of the stations ``which``: emission indices by carrier frequency, equal
    frequencies in the order given (the census's member order)."""
    wanted = [int(j) for j in which]
    if not wanted:
        return {}
    index = np.flatnonzero(np.isin(clusters.station, np.asarray(wanted)))
    grouped = index[np.argsort(clusters.station[index], kind="stable")]
    order = sorted(set(wanted))
    edges = np.searchsorted(clusters.station[grouped], np.asarray(order + [order[-1] + 1]))
    out = {}
    for k, j in enumerate(order):
        part = grouped[edges[k]:edges[k + 1]]
        out[j] = part[np.argsort(freq_hz[part], kind="stable")]
    return out


def _most_common_by_rule(values: list[int]) -> int:
    """The census's rule for the raster channel of a station: ``max(set(values), key=values.count)``
    over the channels of its members in member order (ties: the set's iteration order)."""
    return max(set(values), key=values.count)


def cluster_columns(cols: StationColumns, tolerance_hz: Mapping[str, float]) -> Clusters:
    """Stations among the emissions of ``cols`` whose kind is a key of ``tolerance_hz``.

    ``tolerance_hz`` maps each kind to the largest gap (Hz) between neighbouring carriers of
    one station, e.g. ``{"fm": 25e3, "narrow": 5e3}``; kinds are grouped in its order (which
    decides the order of stations of different kinds at exactly the same frequency).
    """
    station_dtype = np.int32
    station = np.full(cols.size, -1, station_dtype)
    freqs_parts, kinds_parts = [], []
    offset = 0
    for kind, tolerance in tolerance_hz.items():
        mask = cols.is_kind(kind)
        if not mask.any():
            continue
        every = bool(mask.all())
        carriers = cols.freq_hz if every else cols.freq_hz[mask]
        ordered = np.sort(carriers, kind="stable")  # each sweep's carriers come sorted: runs merge fast
        starts = np.r_[0, np.flatnonzero(np.diff(ordered) > tolerance) + 1]
        count = np.diff(np.r_[starts, ordered.size])
        lo, hi = ordered[starts + (count - 1) // 2], ordered[starts + count // 2]
        freqs_parts.append(np.where(count % 2 == 1, lo, (lo + hi) / 2.0))  # np.median of each run
        kinds_parts.extend([kind] * count.size)
        first = ordered[starts]
        del ordered
        local = (np.searchsorted(first, carriers, side="right") - 1 + offset).astype(station_dtype)
        if every:
            station = local
        else:
            station[mask] = local
        offset += count.size
    if not freqs_parts:
        return Clusters(np.zeros(0), (), np.zeros(0, np.int64), station)
    freqs = np.concatenate(freqs_parts)
    rank = np.argsort(freqs, kind="stable")          # final order of the stations
    if not np.array_equal(rank, np.arange(rank.size)):
        position = np.empty(rank.size + 1, station_dtype)
        position[rank] = np.arange(rank.size, dtype=station_dtype)
        position[-1] = -1                            # station -1 (not grouped) stays -1
        station = position[station]
    freqs, kinds = freqs[rank], tuple(kinds_parts[i] for i in rank.tolist())
    clusters = Clusters(freqs, kinds, np.zeros(freqs.size, np.int64), station)
    return Clusters(freqs, kinds, _channels(cols, clusters), station)


def _channels(cols: StationColumns, clusters: Clusters) -> np.ndarray:
    """Most common raster channel of each station (the census's rule, ties included)."""
    grouped = clusters.station >= 0
    every = bool(grouped.all())
    station = clusters.station if every else clusters.station[grouped]
    channel = cols.channel_freq_hz if every else cols.channel_freq_hz[grouped]
    ref = np.zeros(clusters.n, np.int64)
    ref[station] = channel                           # some member's channel
    mixed = np.flatnonzero(np.bincount(station[channel != ref[station]], minlength=clusters.n))
    members = station_members(clusters, cols.freq_hz, mixed.tolist())
    for j in mixed.tolist():
        ref[j] = _most_common_by_rule(cols.channel_freq_hz[members[j]].tolist())
    return ref
