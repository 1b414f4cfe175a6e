"""A crowded band behind a steep preamp, rendered hop by hop with numpy only (no simulator).

Independent of ``survey.scene`` and ``survey.sources.simulated``: the noise density at absolute
frequency ``f`` is ``n_in G(f) + n_rx`` (FS^2/Hz) with ``G`` the power response of identical
tuned circuits, ``1 / (1 + (2 Q (f - f0) / f0)^2)`` each; FM stations (tests/synth_signals.py)
of amplitude ``a sqrt(G(f_c))``. The truth of a channel's noise is the density's band average
times the bandwidth. Invented signals only.
"""

from __future__ import annotations

from datetime import datetime, timezone

import numpy as np

from survey.records import IQBlock
from synth_signals import band_average, fm_broadcast, quantize, shaped_noise, tuned_circuit_gain


class CrowdedBand:
    """Tunable IQ source (the :class:`survey.sources.base.IQSource` protocol) of a crowded band."""

    kind = "simulated"

    def __init__(self, occupancy: float, seed: int, *, f0_hz: float = 98.0e6, q: float = 24.0,
                 circuits: int = 3, gain_db: float = 20.0, n_in: float = 1e-10, n_rx: float = 1e-10,
                 sample_rate_hz: float = 2.4e6):
        rng = np.random.default_rng(seed)
        raster = np.arange(87.6e6, 108.0e6, 200e3)
        self.stations_hz = raster[rng.random(raster.size) < occupancy]
        # C/N 3-30 dB against the input noise in 200 kHz
        self.amplitudes = np.sqrt(n_in * 200e3 * 10 ** (rng.uniform(3.0, 30.0, self.stations_hz.size) / 10.0))
        self.f0_hz, self.q, self.circuits = f0_hz, q, circuits
        self.gain = 10 ** (gain_db / 10.0)
        self.n_in, self.n_rx = n_in, n_rx
        self._fs = float(sample_rate_hz)
        self._seed = seed
        self._center = 0.0

    def response(self, freq_hz):
        """Power gain ``G(f)`` of the preamp (linear)."""
        return self.gain * tuned_circuit_gain(np.asarray(freq_hz, float), self.f0_hz, self.q) ** self.circuits

    def density(self, freq_hz):
        """Noise density at absolute frequency (FS^2/Hz)."""
        return self.n_in * self.response(freq_hz) + self.n_rx

    def channel_noise_dbfs(self, freq_hz: float, bandwidth_hz: float) -> float:
        """Truth: noise power in a channel (dBFS)."""
        return float(10 * np.log10(band_average(self.density, freq_hz, bandwidth_hz) * bandwidth_hz))

    @property
    def sample_rate_hz(self) -> float:
        return self._fs

    @property
    def fixed_centers_hz(self):
        return None

    def describe(self) -> dict:
        return {"kind": self.kind, "synthetic": "crowded band (numpy only)"}

    def tune(self, center_hz: float) -> None:
        self._center = float(center_hz)

    def read(self, n_samples: int | None) -> IQBlock:
        n = int(n_samples or 65536)
        fc = self._center
        rng = np.random.default_rng([self._seed, int(fc)])
        z = shaped_noise(n, self._fs, lambda off: self.density(fc + off), rng).astype(np.complex128)
        near = np.abs(self.stations_hz - fc) < self._fs / 2.0 - 150e3
        for f, a in zip(self.stations_hz[near], self.amplitudes[near]):
            z += fm_broadcast(n, self._fs, f - fc, a * np.sqrt(self.response(f)), rng)
        raw = quantize(z.astype(np.complex64), "cf32_le")
        return IQBlock(center_hz=fc, sample_rate_hz=self._fs, datatype="cf32_le", raw=raw,
                       started_utc=datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ"))

    def close(self) -> None:
        pass
