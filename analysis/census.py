"""Census of stations: one entry per transmitter, across sweeps and configurations.

An emission (see :class:`survey.records.EmissionReading`) found in different sweeps within a few
kHz of the same carrier is the same station. Analyses consume a :class:`StationMatrix`: the same
shape of data as :class:`survey.store.ChannelMatrix`, with stations as columns instead of raster
channels, so every count and verdict is per transmitter.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


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

    @property
    def n_stations(self) -> int:
        """Number of stations (columns)."""
        return int(self.freqs_hz.size)

    def rows(self, sweep_ids) -> "StationMatrix":
        """The same stations for a subset of the sweeps (in the order given)."""
        index = {int(s): i for i, s in enumerate(self.sweep_ids.tolist())}
        take = np.asarray([index[int(s)] for s in sweep_ids], dtype=np.int64)
        return StationMatrix(
            sweep_ids=self.sweep_ids[take],
            started_utc=tuple(self.started_utc[i] for i in take.tolist()),
            freqs_hz=self.freqs_hz,
            kinds=self.kinds,
            channel_freqs_hz=self.channel_freqs_hz,
            power_dbfs=self.power_dbfs[take],
            noise_dbfs=self.noise_dbfs[take],
            cn_db=self.cn_db[take],
            ci_db=self.ci_db[take],
            detected=self.detected[take],
            stereo=self.stereo[take],
        )
