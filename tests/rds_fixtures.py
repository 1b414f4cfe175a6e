"""Seeded IQ of one FM station (with or without RDS) in white noise at a given C/N.

C/N is the carrier power over the noise power in 200 kHz (the survey's channel bandwidth); the
carrier has amplitude 1 (power 1, 0 dBFS) at ``offset_hz`` from the block centre.
"""

from __future__ import annotations

import numpy as np

from survey import fm
from survey.rds import RdsProgramme

FS = 1.024e6  # a rate the receiver offers; halves the cost of many-seed tests against 2.048e6
OFFSET_HZ = 300e3
CHANNEL_BW_HZ = 200e3
PROGRAMME = RdsProgramme(pi=0xE3D2, ps="HILLTOP", pty=10)


def noise(rng: np.random.Generator, n: int, cn_db: float) -> np.ndarray:
    """Complex white noise whose power in 200 kHz is ``-cn_db`` dB below a unit carrier."""
    density = 10.0 ** (-cn_db / 10.0) / CHANNEL_BW_HZ
    sd = np.sqrt(density * FS / 2.0)
    g = rng.standard_normal((2, n), dtype=np.float32)
    return (g[0] + 1j * g[1]) * np.float32(sd)


def station_iq(seed: int, cn_db: float, duration_s: float = 0.5, *, stereo: bool = True,
               programme: RdsProgramme | None = PROGRAMME, offset_hz: float = OFFSET_HZ) -> np.ndarray:
    """One station (75 kHz deviation, programme-like audio, RDS at 3 kHz) plus noise, complex64."""
    rng = np.random.default_rng(seed)
    n = int(round(duration_s * FS))
    phase = fm.station_phase(rng, n, FS, stereo, 75e3, rds=programme)
    return (fm.carrier(phase, offset_hz, FS, 1.0) + noise(rng, n, cn_db)).astype(np.complex64)


def noise_iq(seed: int, duration_s: float) -> np.ndarray:
    """Receiver noise alone (unit power per sample), complex64."""
    rng = np.random.default_rng(seed)
    n = int(round(duration_s * FS))
    g = rng.standard_normal((2, n), dtype=np.float32)
    return ((g[0] + 1j * g[1]) / np.sqrt(2.0)).astype(np.complex64)
