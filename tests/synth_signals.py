"""Seeded synthetic IQ with known answers, for the DSP tests and the speed benchmark.

All powers are in full-scale units (FS^2): a complex exponential of amplitude A has power A^2,
complex white noise of variance s2 has density s2 / fs (FS^2/Hz). Invented signals only.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from survey.records import IQBlock

Density = Callable[[np.ndarray], np.ndarray]


def complex_noise(n: int, variance: float, rng: np.random.Generator) -> np.ndarray:
    """Circular complex white Gaussian noise with ``E|z|^2 = variance``, complex64."""
    scale = np.sqrt(variance / 2.0)
    z = rng.standard_normal(2 * n, dtype=np.float32).view(np.complex64)
    return (z * np.float32(scale)).astype(np.complex64)


def tone(n: int, sample_rate_hz: float, offset_hz: float, amplitude: float, phase: float = 0.0) -> np.ndarray:
    """Complex exponential ``A exp(i(2 pi f t + phase))``, complex64; its power is ``A^2``."""
    t = np.arange(n) / sample_rate_hz
    return (amplitude * np.exp(1j * (2.0 * np.pi * offset_hz * t + phase))).astype(np.complex64)


def _lowpass(x: np.ndarray, sample_rate_hz: float, cutoff_hz: float) -> np.ndarray:
    spec = np.fft.rfft(x)
    spec[np.fft.rfftfreq(x.size, 1.0 / sample_rate_hz) > cutoff_hz] = 0.0
    return np.fft.irfft(spec, n=x.size)


def _programme(n: int, sample_rate_hz: float, audio_hz: float, rng: np.random.Generator) -> np.ndarray:
    """Band-limited random audio, soft-limited like a broadcast processor, peak 1."""
    x = _lowpass(rng.standard_normal(n), sample_rate_hz, audio_hz)
    x = np.tanh(2.0 * x / np.std(x))
    x = _lowpass(x, sample_rate_hz, audio_hz)
    return x / np.max(np.abs(x))


def fm_broadcast(
    n: int,
    sample_rate_hz: float,
    offset_hz: float,
    amplitude: float,
    rng: np.random.Generator,
    *,
    deviation_hz: float = 75e3,
    stereo: bool = True,
    audio_hz: float = 15e3,
) -> np.ndarray:
    """An FM broadcast-like signal: real frequency modulation of a random programme.

    Baseband: mono ``(L+R)/2``, and for ``stereo`` a ``(L-R)/2`` double-sideband subcarrier at
    38 kHz and a 19 kHz pilot at 10 % of the deviation; the composite peaks at ``deviation_hz``.
    Phase ``2 pi dev cumsum(m) / fs``. Constant envelope, so the power is exactly ``A^2``.
    Carson bandwidth ``2 (dev + f_m)``: 180 kHz mono, 256 kHz stereo (FS-1037C).
    """
    t = np.arange(n) / sample_rate_hz
    left = _programme(n, sample_rate_hz, audio_hz, rng)
    if stereo:
        right = _programme(n, sample_rate_hz, audio_hz, rng)
        mpx = 0.5 * (left + right) + 0.5 * (left - right) * np.cos(2.0 * np.pi * 38e3 * t)
        m = 0.9 * mpx / np.max(np.abs(mpx)) + 0.1 * np.cos(2.0 * np.pi * 19e3 * t)
    else:
        m = left
    phase = 2.0 * np.pi * deviation_hz * np.cumsum(m) / sample_rate_hz
    return (amplitude * np.exp(1j * (2.0 * np.pi * offset_hz * t + phase))).astype(np.complex64)


def shaped_noise(n: int, sample_rate_hz: float, density: Density, rng: np.random.Generator) -> np.ndarray:
    """Gaussian noise whose PSD is ``density(offset_hz)`` (FS^2/Hz), by filtering in one long FFT."""
    z = complex_noise(n, sample_rate_hz, rng).astype(np.complex128)  # density 1 FS^2/Hz
    freqs = np.fft.fftfreq(n, 1.0 / sample_rate_hz)
    spec = np.fft.fft(z) * np.sqrt(density(freqs))
    return np.fft.ifft(spec).astype(np.complex64)


def tuned_circuit_gain(freq_hz: np.ndarray, resonance_hz: float, q: float) -> np.ndarray:
    """Power response of a single tuned circuit, ``1 / (1 + (2 Q (f - f0) / f0)^2)``."""
    return 1.0 / (1.0 + (2.0 * q * (np.asarray(freq_hz) - resonance_hz) / resonance_hz) ** 2)


def edge_rolloff_gain(offset_hz: np.ndarray, sample_rate_hz: float, start_fraction: float = 0.4,
                      depth_db: float = 8.0) -> np.ndarray:
    """Anti-alias-filter-like power roll-off: flat inside ``start_fraction * fs``, then a
    raised-cosine fall (in dB) reaching ``-depth_db`` at ``fs / 2``."""
    a = np.abs(np.asarray(offset_hz)) / sample_rate_hz
    u = np.clip((a - start_fraction) / (0.5 - start_fraction), 0.0, 1.0)
    return 10.0 ** (-depth_db * 0.5 * (1.0 - np.cos(np.pi * u)) / 10.0)


def band_average(density: Density, offset_hz: float, bandwidth_hz: float, points: int = 4001) -> float:
    """Mean of ``density`` over ``offset +- bandwidth / 2`` (trapezoid on a fine grid)."""
    f = np.linspace(offset_hz - bandwidth_hz / 2.0, offset_hz + bandwidth_hz / 2.0, points)
    return float(np.trapezoid(density(f), f) / bandwidth_hz)


def in_band_power(x: np.ndarray, sample_rate_hz: float, offset_hz: float, bandwidth_hz: float) -> float:
    """Power of ``x`` inside ``offset +- bandwidth / 2``, from one FFT of the whole record."""
    spec = np.fft.fft(np.asarray(x, dtype=np.complex128))
    freqs = np.fft.fftfreq(x.size, 1.0 / sample_rate_hz)
    inside = np.abs(freqs - offset_hz) <= bandwidth_hz / 2.0
    return float(np.sum(np.abs(spec[inside]) ** 2) / x.size**2)


def quantize(z: np.ndarray, datatype: str) -> np.ndarray:
    """Complex samples at full scale to raw interleaved values of ``datatype`` (rounded, clipped)."""
    iq = np.empty(2 * z.size, dtype=np.float64)
    iq[0::2], iq[1::2] = z.real, z.imag
    if datatype == "cu8":
        return np.clip(np.rint(iq * 127.5 + 127.5), 0, 255).astype(np.uint8)
    if datatype == "ci8":
        return np.clip(np.rint(iq * 128.0), -128, 127).astype(np.int8)
    if datatype == "ci16_le":
        return np.clip(np.rint(iq * 32768.0), -32768, 32767).astype("<i2")
    if datatype == "cf32_le":
        return iq.astype("<f4")
    raise ValueError(f"no quantizer for {datatype}")


def make_block(z: np.ndarray, center_hz: float, sample_rate_hz: float, datatype: str = "cf32_le",
               started_utc: str = "2025-03-01T12:00:00.000000Z") -> IQBlock:
    """An :class:`IQBlock` holding ``z`` in ``datatype``."""
    return IQBlock(center_hz=center_hz, sample_rate_hz=sample_rate_hz, datatype=datatype,
                   raw=quantize(z, datatype), started_utc=started_utc)
