"""RDS modulation (transmitter side, for the simulator and for tests against the standard).

IEC 62106 section 1 (partly from memory, marked): the data clock is the 57 kHz subcarrier
divided by 48, 1187.5 bit/s (``td = 1/1187.5`` s). The data are differentially encoded
(``e_k = e_{k-1} XOR d_k``), then each encoded bit becomes a biphase symbol: an impulse pair
``+a delta(t) - a delta(t - td/2)`` with ``a = +1`` for a 1 and ``-1`` for a 0, filtered by the
data-shaping filter. The overall (transmitter and receiver) shaping is
``H0(f) = cos(pi f td / 4)`` for ``0 <= f <= 2/td`` and zero above, split equally between the
transmitter and the receiver, so each has ``sqrt(H0)`` [from memory]. The shaped symbol stream
amplitude-modulates a suppressed 57 kHz subcarrier which, in a stereo multiplex, is locked to
the third harmonic of the 19 kHz pilot [C: REFERENCES.md]; in phase here (the standard also
allows quadrature, from memory). The injection is a few kHz of the 75 kHz peak deviation
(about 2-4 kHz is usual practice; common practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from survey.rds.code import GROUP_BITS, ps_cycle_bits

SUBCARRIER_HZ = 57_000.0
BIT_RATE_HZ = SUBCARRIER_HZ / 48.0  # 1187.5 bit/s
BIT_S = 1.0 / BIT_RATE_HZ
#: Highest frequency of the shaped symbol spectrum about the subcarrier, ``2/td`` = 2375 Hz.
SHAPING_EDGE_HZ = 2.0 / BIT_S


@dataclass(frozen=True)
class RdsProgramme:
    """What a simulated station sends: PI code, 8-character PS name and programme type."""

    pi: int
    ps: str
    pty: int = 0

    def cycle_bits(self) -> np.ndarray:
        """Four groups 0A (PS segments 0..3) that the station repeats, 416 bits."""
        return ps_cycle_bits(self.pi, self.ps, self.pty)


def shaping_amplitude(freq_hz: np.ndarray) -> np.ndarray:
    """One side of the split data-shaping filter, ``sqrt(cos(pi |f| td / 4))`` up to 2/td, 0 above."""
    f = np.abs(np.asarray(freq_hz, dtype=np.float64))
    out = np.zeros_like(f)
    inside = f <= SHAPING_EDGE_HZ
    out[inside] = np.sqrt(np.cos(np.pi * f[inside] * BIT_S / 4.0))
    return out


def differential_encode(bits: np.ndarray, previous: int = 0) -> np.ndarray:
    """``e_k = e_{k-1} XOR d_k`` (uint8), starting from ``e_{-1} = previous``."""
    d = np.asarray(bits, dtype=np.uint8) & 1
    return (np.bitwise_xor.accumulate(np.concatenate([[previous & 1], d]))[1:]).astype(np.uint8)


def differential_decode(encoded: np.ndarray) -> np.ndarray:
    """Inverse of :func:`differential_encode` for bits after the first: ``d_k = e_k XOR e_{k-1}``."""
    e = np.asarray(encoded, dtype=np.uint8) & 1
    return (e[1:] ^ e[:-1]).astype(np.uint8)


def biphase_baseband(encoded: np.ndarray, first_bit_s: float, n: int, sample_rate_hz: float) -> np.ndarray:
    """Shaped biphase symbol stream (float64, before the subcarrier) sampled at ``k / fs``.

    Encoded bit ``k`` starts at ``first_bit_s + k td``. Built in the frequency domain on a
    padded grid (so no symbol wraps into the block): the impulse pairs' spectrum times the
    transmit half of the shaping filter. Not normalised (a 1 kHz-wide pulse pair's peak is
    found by the caller).
    """
    import scipy.fft  # here, not at import: reading a census needs no FFT
    a = 2.0 * np.asarray(encoded, dtype=np.float64) - 1.0
    pad = int(np.ceil(6 * BIT_S * sample_rate_hz))
    total = scipy.fft.next_fast_len(int(n) + 2 * pad, real=True)
    n_bins = int(np.floor(SHAPING_EDGE_HZ * total / sample_rate_hz)) + 1
    f = np.arange(n_bins) * (sample_rate_hz / total)
    t = first_bit_s + pad / sample_rate_hz + np.arange(a.size) * BIT_S
    spec = np.zeros(total // 2 + 1, dtype=np.complex128)
    pair = shaping_amplitude(f) * (1.0 - np.exp(-1j * np.pi * f * BIT_S))
    # sum_k a_k exp(-j 2 pi f t_k), evaluated in chunks to bound memory
    acc = np.zeros(n_bins, dtype=np.complex128)
    for s in range(0, a.size, 256):
        acc += np.exp(-2j * np.pi * np.outer(f, t[s:s + 256])) @ a[s:s + 256]
    spec[:n_bins] = pair * acc * sample_rate_hz
    return scipy.fft.irfft(spec, total)[pad:pad + int(n)]


def rds_subcarrier(rng: np.random.Generator, programme: RdsProgramme, n: int, sample_rate_hz: float,
                   subcarrier_phase_rad: np.ndarray | None) -> np.ndarray:
    """The RDS component of a multiplex (float32, peak 1) for ``n`` samples.

    The station repeats the four groups 0A of :meth:`RdsProgramme.cycle_bits`; the block starts
    at a random bit of the cycle and a random fraction of a bit. ``subcarrier_phase_rad`` is the
    57 kHz phase (three times the pilot phase) for a stereo station; None draws a free-running
    subcarrier of random phase (mono).
    """
    cycle = programme.cycle_bits()
    n_bits = int(np.ceil(n / sample_rate_hz / BIT_S)) + 9
    start = int(rng.integers(0, cycle.size))
    frac = float(rng.uniform(0.0, 1.0))
    data = np.resize(np.roll(cycle, -start), n_bits)
    encoded = differential_encode(data, int(rng.integers(0, 2)))
    # shaped at 32 samples per bit (the spectrum ends at 2.4 kHz), then linearly interpolated:
    # images of the interpolation lie near 38 kHz, about 50 dB below the RDS itself
    low_rate = 32.0 * BIT_RATE_HZ
    duration = n / sample_rate_hz
    n_low = int(np.ceil(duration * low_rate)) + 2
    low = biphase_baseband(encoded, -(4.0 + frac) * BIT_S, n_low, low_rate)
    t = np.arange(n, dtype=np.float64) / sample_rate_hz
    base = np.interp(t * low_rate, np.arange(n_low, dtype=np.float64), low)
    base /= max(float(np.max(np.abs(base))), 1e-30)
    if subcarrier_phase_rad is None:
        phase = (2.0 * np.pi * SUBCARRIER_HZ * t + rng.uniform(0.0, 2.0 * np.pi)) % (2.0 * np.pi)
    else:
        phase = subcarrier_phase_rad % (2.0 * np.pi)
    return (base * np.cos(phase.astype(np.float32))).astype(np.float32)


__all__ = [
    "BIT_RATE_HZ", "BIT_S", "GROUP_BITS", "RdsProgramme", "SHAPING_EDGE_HZ", "SUBCARRIER_HZ",
    "biphase_baseband", "differential_decode", "differential_encode", "rds_subcarrier", "shaping_amplitude",
]
