"""One station's C/N over time, per configuration (a night of sweeps, a week of logging).

:func:`station_history` selects the complete sweeps of each configuration (one input, optional
time range), reads the station's readings through :func:`_station_series` and summarises them:
how often the station was detected, its C/N median and spread, and how often it was listenable
(thresholds in :mod:`analysis.thresholds`).

C/N is ``10 log10((P - N)/N)`` dB in the channel bandwidth (some call it SNR). Where ``P`` did not
exceed ``N`` the C/N is not measurable and is NaN; ``detected`` is the sweep's own verdict at its
detection margin.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np

from analysis.errors import MismatchError, NoDataError
from analysis.thresholds import LISTENABLE_MONO_CN_DB, LISTENABLE_SOURCE, LISTENABLE_STEREO_CN_DB
from survey.store import SweepRow, list_sweeps, open_for_reading


@dataclass(frozen=True)
class _SeriesData:
    """What :func:`_station_series` returns: the station's readings in the given sweeps.

    Field names follow :class:`analysis.census.StationMatrix` (one column of it): ``freq_hz``
    is the frequency the readings belong to; arrays are one value per sweep, in sweep order.
    """

    freq_hz: float
    power_dbfs: np.ndarray
    noise_dbfs: np.ndarray
    cn_db: np.ndarray
    detected: np.ndarray


@dataclass(frozen=True)
class StationSeries:
    """One station in one configuration, sweep by sweep (arrays in time order).

    ``cn_db`` NaN: not measurable (P did not exceed N) or not measured in that sweep.
    """

    configuration: str
    freq_hz: float
    sweep_ids: tuple[int, ...]
    started_utc: tuple[str, ...]
    power_dbfs: np.ndarray
    noise_dbfs: np.ndarray
    cn_db: np.ndarray
    detected: np.ndarray
    detection_margin_db: float
    gain_db: float | None

    @property
    def n_sweeps(self) -> int:
        """Number of sweeps in the series."""
        return len(self.sweep_ids)


@dataclass(frozen=True)
class StationHistory:
    """A station's series in every configuration asked for (order of first sweep)."""

    station_hz: float
    input: str
    series: tuple[StationSeries, ...]


#: A station is taken as the one asked for when its carrier lies within this of the frequency given:
#: half of a 200 kHz channel spacing, so a frequency typed to 0.1 MHz finds the station on or
#: beside it and not its neighbour one channel away (common practice, no source).
STATION_MATCH_HZ = 100e3


def _station_series(conn: sqlite3.Connection, sweeps: Sequence[SweepRow], station_hz: float) -> _SeriesData:
    """The station's readings in ``sweeps``: the census station nearest ``station_hz``.

    The one place that decides what "the station" is in a sweep. Stations are those of the
    census (:func:`analysis.census.census_matrix`: FM emissions grouped across the sweeps, one
    column per transmitter), so a station off the raster or drifting between sweeps stays one
    series; in a sweep where it was not found as an emission, its raster channel's P and N give
    the C/N (NaN where P <= N) and it counts as not detected. Raises :class:`NoDataError` when
    no station lies within :data:`STATION_MATCH_HZ` of ``station_hz``, naming the nearest ones.
    """
    from analysis.census import census_matrix

    matrix = census_matrix(conn, sweeps)
    freqs = np.asarray(matrix.freqs_hz, dtype=np.float64)
    if freqs.size == 0:
        raise NoDataError("no FM station was found in the selected sweeps; check the database, the "
                          "configuration and the time range")
    distance = np.abs(freqs - station_hz)
    col = int(np.argmin(distance))
    if distance[col] > STATION_MATCH_HZ:
        nearest = sorted(np.argsort(distance)[:3].tolist(), key=lambda k: freqs[k])
        listed = ", ".join(f"{freqs[k] / 1e6:.2f}" for k in nearest)
        raise NoDataError(
            f"no station within {STATION_MATCH_HZ / 1e3:g} kHz of {station_hz / 1e6:g} MHz in the selected "
            f"sweeps; nearest stations: {listed} MHz"
        )
    return _SeriesData(
        freq_hz=float(freqs[col]),
        power_dbfs=np.asarray(matrix.power_dbfs[:, col], dtype=np.float64),
        noise_dbfs=np.asarray(matrix.noise_dbfs[:, col], dtype=np.float64),
        cn_db=np.asarray(matrix.cn_db[:, col], dtype=np.float64),
        detected=np.asarray(matrix.detected[:, col], dtype=bool),
    )


def station_history(
    db_path: str | Path,
    station_hz: float,
    configurations: Sequence[str] | None = None,
    input: str = "antenna",
    since_utc: str | None = None,
    until_utc: str | None = None,
) -> StationHistory:
    """One station's readings over time in each configuration.

    Parameters
    ----------
    station_hz : float
        Station frequency, Hz (the census station nearest it, within :data:`STATION_MATCH_HZ`).
    configurations : sequence of str, optional
        Labels to include (default: every configuration with sweeps of ``input``).

    Raises :class:`NoDataError` (naming the labels present) when a label has no sweeps, and
    :class:`MismatchError` when the series would mix channel bandwidths (C/N in different
    bandwidths is not comparable).
    """
    conn = open_for_reading(db_path)
    try:
        every = list_sweeps(conn, input=input, since_utc=since_utc, until_utc=until_utc)
        present = list(dict.fromkeys(s.configuration for s in every))
        labels = list(configurations) if configurations else present
        if not every or not labels:
            raise NoDataError(f"no complete {input} sweeps in {db_path}" +
                              (" in the time range given" if since_utc or until_utc else ""))
        missing = [c for c in labels if c not in present]
        if missing:
            raise NoDataError(
                f"no complete {input} sweeps of configuration '{missing[0]}' in {db_path}; configurations "
                f"present: {', '.join(present)}"
            )
        chosen = [s for s in every if s.configuration in labels]
        bandwidths = sorted({s.channel_bw_hz for s in chosen})
        if len(bandwidths) > 1:
            raise MismatchError(
                f"the sweeps use channel bandwidths {', '.join(f'{b:g}' for b in bandwidths)} Hz; C/N in "
                "different bandwidths is not comparable: select one configuration or a time range with one"
            )
        data = _station_series(conn, chosen, station_hz)
    finally:
        conn.close()
    series = []
    for label in labels:
        rows = [i for i, s in enumerate(chosen) if s.configuration == label]
        sweeps = [chosen[i] for i in rows]
        gains = {s.gain_db for s in sweeps}
        series.append(StationSeries(
            configuration=label,
            freq_hz=data.freq_hz,
            sweep_ids=tuple(s.id for s in sweeps),
            started_utc=tuple(s.started_utc for s in sweeps),
            power_dbfs=data.power_dbfs[rows],
            noise_dbfs=data.noise_dbfs[rows],
            cn_db=data.cn_db[rows],
            detected=data.detected[rows],
            detection_margin_db=float(sweeps[0].received_margin_db),
            gain_db=sweeps[0].gain_db if len(gains) == 1 else None,
        ))
    return StationHistory(station_hz=float(station_hz), input=input, series=tuple(series))


def summarise_series(s: StationSeries) -> dict:
    """Summary of one series: counts, fractions and C/N statistics (JSON-ready; NaN as None).

    Fractions are of all sweeps; C/N statistics are over the sweeps where it was measurable
    (``cn_measured`` of them). ``cn_p10_db``/``cn_p90_db`` are the 10th and 90th percentiles
    (linear interpolation between order statistics, numpy's default).
    """
    n = s.n_sweeps
    cn = s.cn_db[np.isfinite(s.cn_db)]

    def stat(fn, *args) -> float | None:
        return float(fn(cn, *args)) if cn.size else None

    return {
        "configuration": s.configuration,
        "freq_hz": s.freq_hz,
        "sweeps": n,
        "first_utc": s.started_utc[0] if n else None,
        "last_utc": s.started_utc[-1] if n else None,
        "cn_measured": int(cn.size),
        "detected_fraction": float(np.mean(s.detected)) if n else None,
        "listenable_mono_fraction": float(np.mean(np.nan_to_num(s.cn_db, nan=-np.inf) >= LISTENABLE_MONO_CN_DB)) if n else None,
        "listenable_stereo_fraction": float(np.mean(np.nan_to_num(s.cn_db, nan=-np.inf) >= LISTENABLE_STEREO_CN_DB)) if n else None,
        "cn_median_db": stat(np.median),
        "cn_p10_db": stat(np.percentile, 10),
        "cn_p90_db": stat(np.percentile, 90),
        "cn_min_db": stat(np.min),
        "cn_max_db": stat(np.max),
        "detection_margin_db": s.detection_margin_db,
        "listenable_mono_cn_db": LISTENABLE_MONO_CN_DB,
        "listenable_stereo_cn_db": LISTENABLE_STEREO_CN_DB,
        "listenable_source": LISTENABLE_SOURCE,
    }


def series_rows(history: StationHistory) -> list[dict]:
    """One dict per sweep and configuration, in time order within each configuration."""
    rows = []
    for s in history.series:
        for k in range(s.n_sweeps):
            cn = float(s.cn_db[k])
            finite = np.isfinite(cn)
            rows.append({
                "configuration": s.configuration,
                "sweep_id": s.sweep_ids[k],
                "started_utc": s.started_utc[k],
                "freq_hz": s.freq_hz,
                "power_dbfs": float(s.power_dbfs[k]),
                "noise_dbfs": float(s.noise_dbfs[k]),
                "cn_db": cn if finite else None,
                "detected": bool(s.detected[k]),
                "listenable_mono": bool(finite and cn >= LISTENABLE_MONO_CN_DB),
                "listenable_stereo": bool(finite and cn >= LISTENABLE_STEREO_CN_DB),
            })
    return rows
