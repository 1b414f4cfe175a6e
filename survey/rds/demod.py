"""From a station in a hop's IQ to RDS data bits (receiver side, vectorised, whole block at once).

Steps, each done on the whole block in the frequency domain where it is a filter:

1. **Channel**: one FFT of the hop; the bins within ``CHANNEL_EDGE_HZ`` of the station (flat to
   ``CHANNEL_FLAT_HZ``, raised-cosine taper beyond) are moved to baseband and brought back at
   about 256 kHz (an inverse FFT on fewer bins: filter and decimation in one step).
2. **FM discriminator**: instantaneous frequency ``arg(z[n] conj(z[n-1])) fs / 2 pi`` (Hz).
3. **Subcarrier**: the multiplex mixed down by exactly 57 kHz and filtered by the receiver half
   of the data-shaping filter and the biphase matched filter ``1 - exp(+j pi f td)`` together,
   then brought back at 16 samples per bit. The 19 kHz pilot is taken the same way, very narrow.
4. **Carrier phase**: where a pilot stands at least ``PILOT_MIN_SNR_DB`` above the noise around
   it, the subcarrier reference is the pilot's phase tripled (the 57 kHz subcarrier is locked to
   the third harmonic of the pilot); what phase is left is constant and found from the squared
   symbols (``arg sum u^2 / 2``, the squaring loop's estimate, which removes the data's sign).
   Without a pilot the squaring estimate is taken over a sliding window of ``WINDOW_BITS`` bits,
   which follows a subcarrier a few hertz off nominal.
5. **Clock**: the symbol timing maximising the mean symbol energy over the block, on a grid of
   1/16 bit (the bit rate is the nominal 1187.5 bit/s: locked to the subcarrier).
6. **Decisions**: the sign of each symbol, then the differential decoding ``d_k = e_k XOR e_{k-1}``,
   which also removes the 180 degree ambiguity of the phase estimate.

Method: standard coherent detection of differentially encoded biphase data (IEC 62106 section
1.4, from memory, for the symbol definition; the squaring carrier estimate is textbook
synchronisation practice, e.g. Proakis, *Digital Communications*, ch. on carrier recovery, from
memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from survey.rds.waveform import BIT_S, SHAPING_EDGE_HZ, SUBCARRIER_HZ, shaping_amplitude

PILOT_HZ = 19_000.0
CHANNEL_FLAT_HZ = 100_000.0
CHANNEL_EDGE_HZ = 125_000.0
DEMOD_RATE_HZ = 256_000.0
SAMPLES_PER_BIT = 16
TIMING_STEPS = 16
WINDOW_BITS = 33
#: Pilot power in its narrow band over the noise in the same width nearby, dB, to lock to it.
PILOT_MIN_SNR_DB = 15.0


@dataclass(frozen=True)
class RdsBits:
    """Recovered data bits of one station (before block synchronisation).

    ``bits`` are the differentially decoded data bits (uint8), ``soft`` the coherent symbol
    values they came from (one more than ``bits``), ``pilot_locked`` whether the subcarrier
    reference came from the pilot, ``first_symbol_s`` the time of the first symbol in the block.
    """

    bits: np.ndarray
    soft: np.ndarray
    pilot_locked: bool
    first_symbol_s: float


def _taper(freq_hz: np.ndarray) -> np.ndarray:
    f = np.abs(freq_hz)
    u = np.clip((f - CHANNEL_FLAT_HZ) / (CHANNEL_EDGE_HZ - CHANNEL_FLAT_HZ), 0.0, 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * u))


def channel_from_spectrum(spectrum: np.ndarray, sample_rate_hz: float, offset_hz: float) -> tuple[np.ndarray, float]:
    """Complex baseband of the station at ``offset_hz`` from the hop's full FFT ``spectrum``.

    Returns ``(z, rate_hz)``: about ``DEMOD_RATE_HZ`` samples per second (the exact rate is
    returned), filtered to the channel (flat to 100 kHz, zero beyond 125 kHz from the carrier).
    """
    import scipy.fft  # here, not at import: reading a census needs no FFT
    n = spectrum.size
    fs = float(sample_rate_hz)
    m = min(n, scipy.fft.next_fast_len(int(np.ceil(n * DEMOD_RATE_HZ / fs))))
    centre = int(round(offset_hz * n / fs))
    half = min(int(np.floor(CHANNEL_EDGE_HZ * n / fs)), (m - 1) // 2)
    rel = np.arange(-half, half + 1)
    out = np.zeros(m, dtype=np.complex64)
    out[rel % m] = spectrum[(centre + rel) % n] * _taper(rel * fs / n).astype(np.float32)
    return scipy.fft.ifft(out), fs * m / n


def discriminator(z: np.ndarray, rate_hz: float) -> np.ndarray:
    """Instantaneous frequency (Hz, float64) between successive samples of ``z``.

    Taken circularly (sample 0 pairs with the last), so the output keeps the input's length,
    a fast FFT length; the one wrapped sample lies in the block edge the decoder ignores.
    """
    return np.angle(z * np.conj(np.roll(z, 1))).astype(np.float64) * (rate_hz / (2.0 * np.pi))


def _narrowband(mpx_spectrum: np.ndarray, n: int, rate_hz: float, centre_hz: float, weights_hz, edge_hz: float,
                m_out: int) -> np.ndarray:
    """Complex envelope about ``centre_hz`` of a real signal from its ``rfft`` (length ``n`` signal).

    The bins within ``edge_hz`` of the centre, weighted by ``weights_hz(f - centre)``, are
    brought back by an inverse FFT of length ``m_out``; the fraction of a bin by which the
    centre misses the bin grid is removed afterwards by a slow rotation, so the result is the
    signal mixed down by exactly ``centre_hz``.
    """
    import scipy.fft  # here, not at import: reading a census needs no FFT
    resolution = rate_hz / n
    k0 = int(round(centre_hz / resolution))
    frac_hz = centre_hz - k0 * resolution
    half = min(int(np.floor(edge_hz / resolution)) + 1, (m_out - 1) // 2)
    rel = np.arange(-half, half + 1)
    out = np.zeros(m_out, dtype=np.complex128)
    out[rel % m_out] = mpx_spectrum[k0 + rel] * weights_hz(rel * resolution - frac_hz)
    y = scipy.fft.ifft(out) * (m_out / n)
    t = np.arange(m_out) * (n / rate_hz / m_out)
    return y * np.exp(-2j * np.pi * frac_hz * t)


def _pilot_reference(spec: np.ndarray, n: int, rate_hz: float, m_out: int) -> np.ndarray | None:
    """Unit phasor of the pilot (at the symbol grid's rate), or None when no pilot stands out."""
    resolution = rate_hz / n
    k = max(1, int(np.ceil(4.0 / resolution)))
    kp = int(round(PILOT_HZ / resolution))
    power = np.abs(spec) ** 2
    line = power[kp - k:kp + k + 1].sum()
    lo, hi = int(300.0 / resolution), int(1500.0 / resolution)
    if hi <= lo + 4:
        return None
    near = np.concatenate([power[kp - hi:kp - lo], power[kp + lo:kp + hi]])
    noise = float(np.mean(near)) * (2 * k + 1)
    if not line > noise * 10.0 ** (PILOT_MIN_SNR_DB / 10.0):
        return None
    edge = (k + 0.5) * resolution
    pil = _narrowband(spec, n, rate_hz, PILOT_HZ, lambda f: (np.abs(f) <= edge).astype(float), edge, m_out)
    return pil / np.maximum(np.abs(pil), 1e-30)


def _matched_weights(freq_hz: np.ndarray) -> np.ndarray:
    return shaping_amplitude(freq_hz) * (1.0 - np.exp(1j * np.pi * freq_hz * BIT_S))


def _interp(y: np.ndarray, rate_hz: float, times_s: np.ndarray) -> np.ndarray:
    x = times_s * rate_hz
    i0 = np.clip(np.floor(x).astype(np.int64), 0, y.size - 2)
    w = x - i0
    return y[i0] * (1.0 - w) + y[i0 + 1] * w


def bits_from_multiplex(mpx: np.ndarray, rate_hz: float) -> RdsBits:
    """Recover differentially decoded RDS bits from a demodulated multiplex (Hz) at ``rate_hz``."""
    import scipy.fft  # here, not at import: reading a census needs no FFT
    n = mpx.size
    duration = n / rate_hz
    m_out = scipy.fft.next_fast_len(int(np.ceil(duration * SAMPLES_PER_BIT / BIT_S)) + 4)
    out_rate = m_out / duration
    spec = scipy.fft.rfft(mpx)
    y = _narrowband(spec, n, rate_hz, SUBCARRIER_HZ, _matched_weights, SHAPING_EDGE_HZ, m_out)
    ref = _pilot_reference(spec, n, rate_hz, m_out)
    if ref is not None:
        y = y * np.conj(ref) ** 3
    edge = 1.5 * BIT_S
    n_sym = int(np.floor((duration - 2 * edge) / BIT_S))
    if n_sym < 2:
        return RdsBits(np.zeros(0, np.uint8), np.zeros(0), ref is not None, edge)
    grid = edge + (np.arange(TIMING_STEPS)[:, None] / TIMING_STEPS + np.arange(n_sym)[None, :]) * BIT_S
    candidates = _interp(y, out_rate, grid)
    best = int(np.argmax(np.mean(np.abs(candidates) ** 2, axis=1)))
    u = candidates[best]
    sq = u * u
    if ref is not None:
        phase = np.full(u.size, np.angle(np.sum(sq)) / 2.0)
    elif u.size <= WINDOW_BITS:  # shorter than the smoothing window: one phase for the whole block
        phase = np.full(u.size, np.angle(np.sum(sq)) / 2.0)
    else:
        smooth = np.convolve(sq, np.ones(WINDOW_BITS), mode="same")
        phase = np.unwrap(np.angle(smooth)) / 2.0
    soft = np.real(u * np.exp(-1j * phase))
    encoded = (soft > 0).astype(np.uint8)
    bits = encoded[1:] ^ encoded[:-1]
    return RdsBits(bits.astype(np.uint8), soft, ref is not None, float(grid[best, 0]))


def station_bits(spectrum: np.ndarray, sample_rate_hz: float, offset_hz: float) -> RdsBits:
    """RDS bits of the station at ``offset_hz`` (Hz from the hop centre) given the hop's full FFT."""
    z, rate = channel_from_spectrum(spectrum, sample_rate_hz, offset_hz)
    return bits_from_multiplex(discriminator(z, rate), rate)
