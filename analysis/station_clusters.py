"""Grouping emissions of many sweeps into stations, vectorised over numpy columns.

Single linkage along frequency, each kind apart: the emissions of one kind sorted by carrier
frequency (stable, so emissions at the same frequency keep their sweep order) split wherever
two neighbours lie more than the kind's tolerance apart. A station's frequency is the median
of its emissions' carriers, its raster channel the most common channel among them. Stations
of all kinds are then ordered by frequency (stable: FM before narrow at an equal frequency).
This is what :mod:`analysis.census` did emission by emission in Python, done in numpy; the
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
    ``channel_freq_hz`` (most common raster channel). ``members`` lists the emission indices
    station after station (within a station by carrier frequency, ties in sweep order);
    ``member_station`` the station of each; ``bounds[j]:bounds[j + 1]`` are station j's members.
    """

    freq_hz: np.ndarray
    kinds: tuple[str, ...]
    channel_freq_hz: np.ndarray
    members: np.ndarray
    member_station: np.ndarray
    bounds: np.ndarray

    @property
    def n(self) -> int:
        """Number of stations."""
        return int(self.freq_hz.size)


def _most_common(channels: np.ndarray, starts: np.ndarray) -> np.ndarray:
    """Most common value of each run ``channels[starts[k]:starts[k + 1]]`` (int64).

    A tie is resolved as ``max(set(values), key=values.count)`` on the run's values in order
    (the rule the census has always used), which only ties ever reach.
    """
    n_runs = starts.size - 1
    out = np.zeros(n_runs, np.int64)
    if n_runs == 0:
        return out
    run = np.repeat(np.arange(n_runs), np.diff(starts))
    order = np.lexsort((channels, run))
    r_sorted, c_sorted = run[order], channels[order]
    new = np.r_[True, (r_sorted[1:] != r_sorted[:-1]) | (c_sorted[1:] != c_sorted[:-1])]
    first = np.flatnonzero(new)
    counts = np.diff(np.r_[first, r_sorted.size])
    group_run, group_chan = r_sorted[first], c_sorted[first]
    best = np.zeros(n_runs, np.int64)
    np.maximum.at(best, group_run, counts)
    at_best = counts == best[group_run]
    n_best = np.bincount(group_run[at_best], minlength=n_runs)
    unique_best = at_best & (n_best[group_run] == 1)
    out[group_run[unique_best]] = group_chan[unique_best]
    for k in np.flatnonzero(n_best > 1).tolist():
        values = channels[starts[k]:starts[k + 1]].tolist()
        out[k] = max(set(values), key=values.count)
    return out


def cluster_columns(cols: StationColumns, tolerance_hz: Mapping[str, float]) -> Clusters:
    """Stations among the emissions of ``cols`` whose kind is a key of ``tolerance_hz``.

    ``tolerance_hz`` maps each kind to the largest gap (Hz) between neighbouring carriers of
    one station, e.g. ``{"fm": 25e3, "narrow": 5e3}``; kinds are grouped in its order (which
    decides the order of stations of different kinds at exactly the same frequency).
    """
    freqs_parts, kinds_parts, chan_parts, member_parts, station_parts = [], [], [], [], []
    offset = 0
    for kind, tolerance in tolerance_hz.items():
        idx = np.flatnonzero(cols.is_kind(kind))
        if idx.size == 0:
            continue
        ordered = idx[np.argsort(cols.freq_hz[idx], kind="stable")]
        f = cols.freq_hz[ordered]
        starts = np.r_[0, np.flatnonzero(np.diff(f) > tolerance) + 1, f.size]
        count = np.diff(starts)
        lo, hi = f[starts[:-1] + (count - 1) // 2], f[starts[:-1] + count // 2]
        freqs_parts.append(np.where(count % 2 == 1, lo, (lo + hi) / 2.0))  # np.median of each run
        kinds_parts.extend([kind] * count.size)
        chan_parts.append(_most_common(cols.channel_freq_hz[ordered], starts))
        member_parts.append(ordered)
        station_parts.append(offset + np.repeat(np.arange(count.size), count))
        offset += count.size
    if not freqs_parts:
        empty = np.zeros(0, np.int64)
        return Clusters(np.zeros(0), (), empty, empty, empty, np.zeros(1, np.int64))
    freqs = np.concatenate(freqs_parts)
    rank = np.argsort(freqs, kind="stable")          # final order of the stations
    position = np.empty_like(rank)
    position[rank] = np.arange(rank.size)
    member_station = position[np.concatenate(station_parts)]
    regroup = np.argsort(member_station, kind="stable")
    member_station = member_station[regroup]
    members = np.concatenate(member_parts)[regroup]
    bounds = np.r_[0, np.cumsum(np.bincount(member_station, minlength=rank.size))]
    return Clusters(freqs[rank], tuple(kinds_parts[i] for i in rank.tolist()),
                    np.concatenate(chan_parts)[rank], members, member_station, bounds)
