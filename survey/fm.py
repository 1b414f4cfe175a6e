"""FM broadcast synthesis: a programme-like stereo multiplex frequency-modulating a carrier.

The multiplex follows the pilot-tone stereo system (ITU-R BS.450-3): ``M = (L+R)/2`` below
15 kHz, a 19 kHz pilot at about 9 % of the peak deviation, and, for stereo, ``S = (L-R)/2`` on a
double-sideband suppressed carrier at 38 kHz (twice the pilot phase). With ``|L|, |R| <= 1``
the multiplex stays within ``[-1, 1]``, so the peak deviation never exceeds the station's
``deviation_hz`` (75 kHz in Europe, ITU-R BS.450-3; 47 CFR 73.1570). Programme audio is
band-limited Gaussian noise with a falling spectrum, 50 us pre-emphasis and a peak limiter:
noise-like, as a spectrum analyser sees broadcast programme (common practice, no source).

Everything is vectorised; samples are float32 / complex64, phases accumulate in float64.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import scipy.fft

from survey.errors import SceneError
from survey.rds.waveform import RdsProgramme, rds_subcarrier

PILOT_HZ = 19_000.0
AUDIO_BW_HZ = 15_000.0
PILOT_FRACTION = 0.09
PREEMPHASIS_S = 50e-6
#: RDS injection as a fraction of the peak deviation: 3 kHz of 75 kHz (2-4 kHz is usual
#: practice; common practice, no source).
RDS_FRACTION = 0.04


def programme_audio(
    rng: np.random.Generator,
    n: int,
    sample_rate_hz: float,
    *,
    bandwidth_hz: float = AUDIO_BW_HZ,
    preemphasis_s: float = PREEMPHASIS_S,
    side_ratio: float = 0.35,
    rms: float = 0.3,
) -> tuple[np.ndarray, np.ndarray]:
    """Left and right programme-like audio, ``n`` samples each, peak-limited to ``[-1, 1]``.

    Mid and side signals are independent band-limited Gaussian noises (20 Hz to
    ``bandwidth_hz``, spectrum falling above 500 Hz, then pre-emphasised with time constant
    ``preemphasis_s``); the side is ``side_ratio`` of the mid, so L and R are correlated like
    real programme. The mid is scaled to ``rms`` before the limiter (a hard clip at 1).
    """
    f = scipy.fft.fftfreq(n, 1.0 / sample_rate_hz)
    af = np.abs(f)
    band = (af >= 20.0) & (af <= bandwidth_hz)
    idx = np.nonzero(band)[0]
    tilt = 1.0 / np.sqrt(1.0 + (af[idx] / 500.0) ** 2)
    emph = np.sqrt(1.0 + (2.0 * np.pi * af[idx] * preemphasis_s) ** 2)
    amp = (tilt * emph).astype(np.float32)
    spec = np.zeros(n, dtype=np.complex64)
    g = rng.standard_normal((2, idx.size), dtype=np.float32)
    spec[idx] = (g[0] + 1j * g[1]) * amp
    z = scipy.fft.ifft(spec)  # complex: real and imaginary parts are independent real noises
    mid = z.real.astype(np.float32)
    side = z.imag.astype(np.float32)
    scale = np.float32(rms / max(float(np.sqrt(np.mean(mid.astype(np.float64) ** 2))), 1e-30))
    mid *= scale
    side *= scale * np.float32(side_ratio)
    left = np.clip(mid + side, -1.0, 1.0)
    right = np.clip(mid - side, -1.0, 1.0)
    return left, right


def multiplex(
    rng: np.random.Generator,
    n: int,
    sample_rate_hz: float,
    stereo: bool,
    *,
    pilot_fraction: float = PILOT_FRACTION,
    rds: RdsProgramme | None = None,
    rds_fraction: float = RDS_FRACTION,
) -> np.ndarray:
    """The baseband multiplex (float32, within ``[-1, 1]``) for one station.

    Stereo: ``(1-p) [M + S cos(2 theta)] + p cos(theta)`` with pilot phase ``theta`` at 19 kHz and
    ``p = pilot_fraction``; mono: ``M`` alone (no pilot). With ``rds`` the programme part is
    scaled down by ``r = rds_fraction`` and an RDS subcarrier of peak ``r`` is added (57 kHz,
    locked to ``3 theta`` in stereo; :mod:`survey.rds.waveform`), so the peak stays within 1.
    """
    left, right = programme_audio(rng, n, sample_rate_hz)
    mid = 0.5 * (left + right)
    r = float(rds_fraction) if rds is not None else 0.0
    if not stereo:
        if rds is None:
            return mid.astype(np.float32)
        out = (1.0 - r) * mid + r * rds_subcarrier(rng, rds, n, sample_rate_hz, None)
        return out.astype(np.float32)
    side = 0.5 * (left - right)
    theta0 = rng.uniform(0.0, 2.0 * np.pi)
    t = np.arange(n, dtype=np.float64) / sample_rate_hz
    theta = (2.0 * np.pi * PILOT_HZ * t + theta0) % (2.0 * np.pi)
    th32 = theta.astype(np.float32)
    out = (1.0 - pilot_fraction - r) * (mid + side * np.cos(2.0 * th32)) + pilot_fraction * np.cos(th32)
    if rds is not None:
        out = out + r * rds_subcarrier(rng, rds, n, sample_rate_hz, 3.0 * theta)
    return out.astype(np.float32)


def fm_phase(mpx: np.ndarray, sample_rate_hz: float, deviation_hz: float, phase0_rad: float = 0.0) -> np.ndarray:
    """Instantaneous phase (float64 rad) of ``mpx`` frequency-modulated with peak ``deviation_hz``.

    ``phi[n] = phase0 + 2 pi deviation / fs * sum_{m<=n} mpx[m]`` (rectangular integration).
    """
    return phase0_rad + (2.0 * np.pi * deviation_hz / sample_rate_hz) * np.cumsum(mpx, dtype=np.float64)


def station_phase(
    rng: np.random.Generator, n: int, sample_rate_hz: float, stereo: bool, deviation_hz: float,
    rds: RdsProgramme | None = None,
) -> np.ndarray:
    """Modulation phase (float64 rad, random start) of one station over ``n`` samples."""
    mpx = multiplex(rng, n, sample_rate_hz, stereo, rds=rds)
    return fm_phase(mpx, sample_rate_hz, deviation_hz, rng.uniform(0.0, 2.0 * np.pi))


def carrier(phase_rad: np.ndarray, offset_hz: float, sample_rate_hz: float, amplitude: float,
            t0_s: float = 0.0) -> np.ndarray:
    """``amplitude * exp(j (2 pi offset t + phase))`` as complex64 (phase wrapped in float64)."""
    n = phase_rad.size
    t = t0_s + np.arange(n, dtype=np.float64) / sample_rate_hz
    total = np.mod(2.0 * np.pi * offset_hz * t + phase_rad, 2.0 * np.pi).astype(np.float32)
    out = np.empty(n, dtype=np.complex64)
    out.real = np.cos(total)
    out.imag = np.sin(total)
    out *= np.float32(amplitude)
    return out


def _template_from_phases(phases: list[np.ndarray], nfft: int) -> np.ndarray:
    win = np.hanning(nfft + 1)[:-1].astype(np.float32)
    acc = np.zeros(nfft, dtype=np.float64)
    count = 0
    for ph in phases:
        z = np.exp(1j * ph).astype(np.complex64)
        segs = z[: (z.size // nfft) * nfft].reshape(-1, nfft)
        spec = scipy.fft.fft(segs * win, axis=-1)
        acc += (np.abs(spec) ** 2).sum(axis=0)
        count += segs.shape[0]
    acc = scipy.fft.fftshift(acc / count)
    return acc / acc.sum()


@lru_cache(maxsize=32)
def occupancy(kind: tuple, sample_rate_hz: float, nfft: int = 4096) -> tuple[np.ndarray, np.ndarray]:
    """Normalised power spectrum of a modulated carrier about its centre (for truth integrals).

    ``kind`` is ``("station", stereo, deviation_hz)`` or ``("im3", stereo1, dev1, stereo2, dev2)``
    (an intermodulation product with phase ``2 phi1 - phi2``). Returns ``(offsets_hz, fraction)``
    with ``fraction.sum() == 1``, estimated from four seeded 2^18-sample renders (Welch, Hann).
    The in-channel share of an FM signal depends on the programme only statistically; the
    render of any one hop differs from this mean by a few hundredths of a dB.
    """
    rng = np.random.default_rng(20260601)
    n = 1 << 18
    phases = []
    for _ in range(4):
        if kind[0] == "station":
            phases.append(station_phase(rng, n, sample_rate_hz, bool(kind[1]), float(kind[2])))
        elif kind[0] == "im3":
            p1 = station_phase(rng, n, sample_rate_hz, bool(kind[1]), float(kind[2]))
            p2 = station_phase(rng, n, sample_rate_hz, bool(kind[3]), float(kind[4]))
            phases.append(2.0 * p1 - p2)
        else:
            raise SceneError(f"unknown occupancy kind {kind!r}; use (\"station\", ...) or (\"im3\", ...)")
    frac = _template_from_phases(phases, nfft)
    offsets = scipy.fft.fftshift(scipy.fft.fftfreq(nfft, 1.0 / sample_rate_hz))
    frac.setflags(write=False)
    offsets.setflags(write=False)
    return offsets, frac
