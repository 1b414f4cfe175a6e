"""The reference of a tuning session: the receiver alone, with the same input, per channel.

A reference is read from stored sweeps (``--reference LABEL`` in the session's database or in
another one) or measured at the start of a simulated session. Channel powers are averaged over
the sweeps in linear power (then back to dB), the reception flag by majority; the reference is
compared with the live curve as a power *density* (channel power over channel bandwidth), so a
reference taken with another channel bandwidth or raster still lines up: it is interpolated
linearly in dB onto the live channels, never extrapolated beyond its own span.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass, replace
from typing import Sequence

import numpy as np

from analysis.errors import MismatchError, NoDataError
from survey.store import list_sweeps, read_channel_matrix


@dataclass(frozen=True)
class TuningReference:
    """Per-channel reference levels (Hz, dBFS/Hz) and where they came from.

    ``receiver_gain_db`` lists the receiver gains the stored sweeps were measured at (empty: not
    recorded, or measured here).
    """

    freqs_hz: np.ndarray
    power_density_dbfs_hz: np.ndarray
    noise_density_dbfs_hz: np.ndarray
    received: np.ndarray
    label: str
    input: str
    n_sweeps: int
    origin: str
    receiver_gain_db: tuple[float, ...] = ()

    def on(self, freqs_hz: Sequence[float]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Reference ``(power density, noise density, received)`` at ``freqs_hz``; NaN/False outside its span."""
        f = np.asarray(freqs_hz, np.float64)
        inside = (f >= self.freqs_hz[0] - 1.0) & (f <= self.freqs_hz[-1] + 1.0)
        p = np.where(inside, np.interp(f, self.freqs_hz, self.power_density_dbfs_hz), np.nan)
        n = np.where(inside, np.interp(f, self.freqs_hz, self.noise_density_dbfs_hz), np.nan)
        idx = np.clip(np.searchsorted(self.freqs_hz, f), 0, self.freqs_hz.size - 1)
        near = np.abs(self.freqs_hz[idx] - f) < 1.0
        rx = inside & near & self.received[idx]
        return p, n, rx

    @property
    def stations_hz(self) -> tuple[int, ...]:
        """Channels received in the reference (the stations on air, antenna input)."""
        return tuple(int(f) for f in self.freqs_hz[self.received])


def _mean_db(values_db: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        lin = np.nanmean(np.power(10.0, np.asarray(values_db, np.float64) / 10.0), axis=0)
        return 10.0 * np.log10(lin)


def reference_from_channels(freqs_hz: np.ndarray, power_dbfs: np.ndarray, noise_dbfs: np.ndarray,
                            received: np.ndarray, channel_bw_hz: float, label: str, input: str,
                            origin: str) -> TuningReference:
    """A reference from channel rows of one or more sweeps (arrays ``sweeps x channels``)."""
    p = np.atleast_2d(np.asarray(power_dbfs, np.float64))
    n = np.atleast_2d(np.asarray(noise_dbfs, np.float64))
    r = np.atleast_2d(np.asarray(received, bool))
    f = np.asarray(freqs_hz, np.float64)
    bw_db = 10.0 * np.log10(float(channel_bw_hz))
    p_mean, n_mean = _mean_db(p) - bw_db, _mean_db(n) - bw_db
    ok = np.isfinite(p_mean) & np.isfinite(n_mean)
    if np.count_nonzero(ok) < 2:
        raise NoDataError(f"the reference '{label}' ({input}) has fewer than two measured channels; "
                          "measure it again over the target band")
    majority = r.sum(axis=0) * 2 >= r.shape[0]
    order = np.argsort(f[ok])
    return TuningReference(f[ok][order], p_mean[ok][order], n_mean[ok][order], majority[ok][order],
                           label, input, int(p.shape[0]), origin)


def load_reference(conn: sqlite3.Connection, label: str, input: str, target_hz: tuple[float, float],
                   origin: str, max_sweeps: int = 50) -> TuningReference:
    """The newest ``max_sweeps`` complete sweeps labelled ``label`` with input ``input``.

    Raises :class:`NoDataError` when there are none, :class:`MismatchError` when they do not
    reach over the target band.
    """
    sweeps = list_sweeps(conn, configuration=label, input=input)
    if not sweeps:
        have = sorted({(s.configuration, s.input) for s in list_sweeps(conn)})
        listed = ", ".join(f"{c}/{i}" for c, i in have) or "none"
        raise NoDataError(
            f"no complete sweeps labelled '{label}' with input '{input}' in {origin} (it has: {listed}); "
            f"measure the receiver alone first, e.g. bandcensus scan --config {label} --input {input} --sweeps 4"
        )
    sweeps = sweeps[-max_sweeps:]
    bws = {s.channel_bw_hz for s in sweeps}
    if len(bws) > 1:
        raise MismatchError(f"reference '{label}' mixes channel bandwidths {sorted(bws)} Hz; "
                            "select sweeps of one bandwidth (e.g. one run's database)")
    m = read_channel_matrix(conn, [s.id for s in sweeps])
    ref = reference_from_channels(m.freqs_hz, m.power_dbfs, m.noise_dbfs, m.received, bws.pop(), label, input,
                                  origin)
    gains = tuple(sorted({s.gain_db for s in sweeps if s.gain_db is not None}))
    ref = replace(ref, receiver_gain_db=gains)
    lo, hi = target_hz
    if ref.freqs_hz[0] > lo + 200_000 or ref.freqs_hz[-1] < hi - 200_000:
        raise MismatchError(
            f"reference '{label}' covers {ref.freqs_hz[0] / 1e6:.2f}-{ref.freqs_hz[-1] / 1e6:.2f} MHz, not the "
            f"target {lo / 1e6:g}-{hi / 1e6:g} MHz; measure it over the whole target"
        )
    return ref
