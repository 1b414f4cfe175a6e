"""Per-hop signal processing: raw IQ to channel power, local noise floor and carrier-to-noise.

Everything runs vectorised in single precision; accumulations that subtract nearly equal
numbers (cumulative channel integrals) run in double precision.

Full-scale convention
---------------------
Samples are normalised so that a complex exponential of amplitude 1.0 is 0 dBFS (power 1.0):

============  ======================  =====================================================
datatype      raw storage             normalisation
============  ======================  =====================================================
``cu8``       uint8 I,Q interleaved   ``(b - 127.5) / 127.5`` (the receiver's own offset)
``ci8``       int8 I,Q interleaved    ``b / 128``
``ci16_le``   int16 little-endian     ``b / 32768``
``cf32_le``   float32 little-endian   as stored
============  ======================  =====================================================

Pipeline of :func:`measure_hop`
-------------------------------
1. :func:`clip_fraction` on the raw block.
2. :func:`raw_averaged_psd` (conversion as :func:`to_complex64`, folded into the window) and
   :func:`averaged_psd`: averaged periodogram (Welch 1967), periodic Hann window, density in
   FS^2/Hz (FS^2 is full-scale power), two-sided, ordered by ascending offset from the hop centre.
3. :func:`usable_bins`: the flat inner part of the hop minus a guard around the DC spike.
4. :func:`local_noise_floor` (in :mod:`survey.noise_floor`): a smooth floor fitted to the
   log-PSD below the signals, with an FM-shaped occupancy mask.
5. Per channel: ``P`` (:func:`channel_power`), ``N = integral of N0 over the band``,
   ``C/N = 10 log10((P - N) / N)`` (called SNR in the tool's output).
6. Optionally (``emissions_out``) the emissions of the hop, each measured alone
   (:func:`survey.emissions.find_emissions`), from the same PSD and floor, with the RDS of its
   FM emissions read from the hop's IQ (:func:`survey.rds.columns.decode_hop_emissions`).

References
----------
.. [1] P. D. Welch, "The use of fast Fourier transform for the estimation of power spectra: a
   method based on time averaging over short, modified periodograms," IEEE Trans. Audio
   Electroacoust., vol. AU-15, no. 2, pp. 70-73, 1967.

The references of the noise-floor method are in :mod:`survey.noise_floor`.
"""

from __future__ import annotations

import threading
from dataclasses import replace
from datetime import datetime, timedelta, timezone
from functools import lru_cache
from typing import Callable, Sequence

import numpy as np
import scipy.fft

from survey.errors import PlanError, RecordingError
from survey.records import ChannelReading, EmissionReading, HopReading, IQBlock, SweepSettings
from survey.noise_floor import local_noise_floor, log_average_bias_db  # re-exported: public API
from survey.emissions import find_emissions
from survey.rds.columns import decode_hop_emissions, stored_columns
from survey.units import ratio_to_db

#: Datatypes (SigMF spelling) that :func:`to_complex64` converts.
SUPPORTED_DATATYPES = ("cu8", "ci8", "ci16_le", "cf32_le")

#: Default fractional overlap of PSD segments. With a Hann window, 0 % overlap keeps the
#: segments statistically independent (each bin is exactly ``S chi2(2K)/(2K)`` for Gaussian
#: noise) at half the FFT work of 50 % overlap, which Welch [1]_ shows buys only ~1.9x the
#: equivalent averages for the same samples. The speed goal (>= 70x real time on one core at
#: 2.4 MS/s up to the PSD and channel powers, see tests/benchmarks/dsp_speed.py) is met at 0 %;
#: lengthen the dwell for more averages.
DEFAULT_OVERLAP = 0.0

_NATIVE = {"cu8": np.dtype(np.uint8), "ci8": np.dtype(np.int8),
           "ci16_le": np.dtype("<i2"), "cf32_le": np.dtype("<f4")}
_SCALE = {"ci8": 1.0 / 128.0, "ci16_le": 1.0 / 32768.0}
#: Most FFT segments transformed in one call; a 0.1 s hop at 2.4 MS/s (117 segments of 2048) is
#: one call, longer blocks are taken in chunks so that the work buffer stays about 4 MB.
_CHUNK_SEGMENTS = 256


def _native(raw: np.ndarray, datatype: str) -> np.ndarray:
    """``raw`` as a flat array of its datatype's native element type (I, Q interleaved)."""
    if datatype not in _NATIVE:
        raise RecordingError(
            f"unsupported sample datatype '{datatype}'; supported are {', '.join(SUPPORTED_DATATYPES)}"
            " (convert the recording, e.g. to cf32_le, before replaying it)"
        )
    want = _NATIVE[datatype]
    arr = np.asarray(raw)
    if arr.dtype != want:
        if arr.dtype.itemsize == 1 and arr.dtype.kind in "ui" and arr.size % want.itemsize == 0:
            arr = np.ascontiguousarray(arr).reshape(-1).view(want)  # raw bytes of the file
        else:
            raise RecordingError(
                f"samples are stored as {arr.dtype} but the datatype says '{datatype}' ({want});"
                " fix the recording's core:datatype or the source that built the block"
            )
    arr = arr.reshape(-1)
    if arr.size % 2:
        raise RecordingError(
            f"{arr.size} {datatype} values is not a whole number of I,Q pairs;"
            " the recording is cut mid-sample: trim it to an even number of values"
        )
    return arr


def to_complex64(raw: np.ndarray, datatype: str) -> np.ndarray:
    """Convert interleaved raw I,Q values to complex64 at the documented full scale.

    Parameters
    ----------
    raw : numpy.ndarray
        Interleaved I,Q in the datatype's native element type, or the raw bytes of it.
    datatype : str
        One of :data:`SUPPORTED_DATATYPES`.

    Returns
    -------
    numpy.ndarray
        complex64, ``raw.size // 2`` samples; a complex exponential of amplitude 1.0 is 0 dBFS.
        ``cu8`` maps ``b`` to ``(b - 127.5) / 127.5``, ``ci8`` to ``b / 128``, ``ci16_le`` to
        ``b / 32768``; ``cf32_le`` is returned as stored (a view when possible).

    Raises
    ------
    RecordingError
        Unsupported datatype, mismatched element type, or an odd number of values.
    """
    arr = _native(raw, datatype)
    if datatype == "cf32_le":
        return np.ascontiguousarray(arr).view(np.complex64)
    f = arr.astype(np.float32)
    if datatype == "cu8":
        f -= np.float32(127.5)
        f *= np.float32(1.0 / 127.5)
    else:
        f *= np.float32(_SCALE[datatype])
    return f.view(np.complex64)


def clip_fraction(raw: np.ndarray, datatype: str) -> float | None:
    """Fraction of I and Q values within one converter step of full scale, for every datatype.

    ``cu8`` rails are 0 and 255 and ``ci8`` rails -128 and 127 (the extreme codes);
    ``ci16_le`` counts values <= -32767 or >= 32766 (one step inside the rails). ``cf32_le`` has
    no step of its own: a float recording of this receiver family holds 8-bit codes rescaled to
    full scale 1.0, so values with magnitude >= 1 - 1/128 (one 8-bit step of full scale; values
    beyond 1.0 included) count (common practice, no source). None only for an empty block.
    """
    arr = _native(raw, datatype)
    if arr.size == 0:
        return None
    if datatype == "ci16_le":
        lo, hi = arr.min(), arr.max()
        if lo > -32767 and hi < 32766:
            return 0.0
        return float(np.count_nonzero((arr <= -32767) | (arr >= 32766)) / arr.size)
    if datatype == "cf32_le":
        limit = np.float32(1.0 - 1.0 / 128.0)
        if -limit < arr.min() and arr.max() < limit:
            return 0.0
        return float(np.count_nonzero(np.abs(arr) >= limit) / arr.size)
    u = arr if datatype == "cu8" else arr.view(np.uint8) ^ np.uint8(0x80)  # -128..127 -> 0..255
    if u.min() > 0 and u.max() < 255:
        return 0.0  # two fast reductions settle the common unclipped block without temporaries
    at_rail = np.count_nonzero((u + np.uint8(1)) <= 1)  # 255 wraps to 0, 0 becomes 1
    return float(at_rail / arr.size)


@lru_cache(maxsize=16)
def _hann(fft_size: int) -> np.ndarray:
    """Periodic Hann window ``w_n = 0.5 - 0.5 cos(2 pi n / L)``, float32, read-only.

    The DFT-even form (Harris 1978), identical to ``scipy.signal.get_window('hann', L)``.
    """
    n = np.arange(fft_size, dtype=np.float64)
    win = (0.5 - 0.5 * np.cos(2.0 * np.pi * n / fft_size)).astype(np.float32)
    win.setflags(write=False)
    return win


@lru_cache(maxsize=16)
def _scaled_window(fft_size: int, datatype: str) -> tuple[np.ndarray, np.ndarray | None]:
    """Window with the datatype's full-scale divisor folded in, repeated for I and Q.

    Returns ``(gain, offset)`` (float32, length ``2 L``, read-only) such that the windowed
    sample is ``raw * gain - offset``: for ``cu8`` ``(b - 127.5)/127.5 * w = b (w/127.5) - w``;
    the other integer types have no offset (None).
    """
    win = np.repeat(_hann(fft_size).astype(np.float64), 2)
    if datatype == "cu8":
        gain, offset = (win / 127.5).astype(np.float32), win.astype(np.float32)
        offset.setflags(write=False)
    else:
        gain, offset = (win * _SCALE[datatype]).astype(np.float32), None
    gain.setflags(write=False)
    return gain, offset


class _Workspace:
    """Work buffers of :func:`averaged_psd` reused from hop to hop (no per-hop allocation).

    One complex64 ``(segments, L)`` block that receives the windowed samples, is transformed in
    place and squared in place, plus the float32 accumulator of the segment sum. Handing a
    1.9 MB temporary back to the allocator every hop costs page faults (hundreds per hop);
    reusing it costs none. Not shared between threads (one workspace per thread).
    """

    def __init__(self, segments: int, fft_size: int):
        self.block = np.empty((segments, fft_size), dtype=np.complex64)
        self.acc = np.empty(2 * fft_size, dtype=np.float32)


_WORKSPACES: dict[tuple[int, int, int], _Workspace] = {}


def _workspace(segments: int, fft_size: int) -> _Workspace:
    """The cached workspace for ``segments`` x ``fft_size`` of the calling thread (few sizes kept)."""
    key = (threading.get_ident(), segments, fft_size)
    ws = _WORKSPACES.get(key)
    if ws is None:
        if len(_WORKSPACES) >= 8:
            _WORKSPACES.pop(next(iter(_WORKSPACES)))
        ws = _WORKSPACES[key] = _Workspace(segments, fft_size)
    return ws


@lru_cache(maxsize=16)
def _hann_energy(fft_size: int) -> float:
    """``sum w_n^2`` of the float32 window, accumulated in double precision."""
    return float(np.sum(_hann(fft_size).astype(np.float64) ** 2))


@lru_cache(maxsize=16)
def _shifted_offsets(fft_size: int, sample_rate_hz: float) -> np.ndarray:
    offsets = np.fft.fftshift(np.fft.fftfreq(fft_size, d=1.0 / sample_rate_hz))
    offsets.setflags(write=False)
    return offsets


def _step(fft_size: int, overlap: float) -> int:
    if not 0.0 <= overlap < 1.0:
        raise PlanError(f"PSD overlap {overlap} is outside [0, 1); use e.g. 0.0 or 0.5")
    return max(1, fft_size - int(round(overlap * fft_size)))


def averaged_psd(
    samples: np.ndarray,
    sample_rate_hz: float,
    fft_size: int = 2048,
    overlap: float = DEFAULT_OVERLAP,
    workers: int | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Averaged Hann periodogram (Welch's method [1]_), two-sided, in FS^2/Hz.

    .. math:: \\hat S(f_k) = \\frac{1}{K} \\sum_{m=0}^{K-1}
              \\frac{|\\sum_n w_n x_{mD+n} e^{-2\\pi i k n / L}|^2}{f_s \\sum_n w_n^2}

    with the periodic Hann window ``w`` of length ``L = fft_size`` (as
    ``scipy.signal.get_window('hann', L)``), step ``D = L - round(overlap L)`` and
    ``K = 1 + (n - L) // D`` segments. No detrending. Equal to
    ``scipy.signal.welch(x, fs, 'hann', L, L - D, detrend=False, return_onesided=False)``.

    Parameters
    ----------
    samples : numpy.ndarray
        complex64 samples at full scale (see :func:`to_complex64`).
    sample_rate_hz : float
        Sample rate, Hz.
    fft_size : int
        Segment length ``L`` (bin width ``fs / L``).
    overlap : float
        Fraction of ``L`` shared by consecutive segments, in [0, 1).
    workers : int, optional
        Threads for ``scipy.fft`` (None: its default, one unless ``scipy.fft.set_workers``).

    Returns
    -------
    offsets_hz : numpy.ndarray
        float64, ascending bin centres relative to the hop centre, ``-fs/2 .. fs/2 - fs/L``.
    psd : numpy.ndarray
        float32 power spectral density in FS^2/Hz (linear); a complex exponential of
        amplitude A integrates to A^2 over the bins (Parseval).

    Raises
    ------
    PlanError
        Fewer samples than one segment, or an overlap outside [0, 1).
    """
    z = np.asarray(samples)
    if z.dtype != np.complex64:
        z = z.astype(np.complex64)
    z = z.reshape(-1)
    if fft_size < 8 or z.size < fft_size:
        raise PlanError(
            f"{z.size} samples cannot fill one FFT of {fft_size}; lengthen the dwell or use a "
            "smaller fft_size (at least 8)"
        )
    step = _step(fft_size, overlap)
    win = _hann(fft_size)
    n_seg = 1 + (z.size - fft_size) // step
    if step == fft_size:  # no overlap: the segments are consecutive rows of the block
        segments = z[: n_seg * fft_size].reshape(n_seg, fft_size)
    else:
        segments = np.lib.stride_tricks.sliding_window_view(z, fft_size)[::step][:n_seg]

    def fill(block: np.ndarray, first: int) -> None:
        np.multiply(segments[first : first + block.shape[0]], win, out=block)

    return _psd_from_segments(fill, n_seg, float(sample_rate_hz), fft_size, workers)


def raw_averaged_psd(
    raw: np.ndarray,
    datatype: str,
    sample_rate_hz: float,
    fft_size: int = 2048,
    overlap: float = DEFAULT_OVERLAP,
    workers: int | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`averaged_psd` of raw interleaved I,Q, converted straight into the FFT input.

    Same result as ``averaged_psd(to_complex64(raw, datatype), ...)`` (the full-scale
    normalisation of :func:`to_complex64` is folded into the window: ``cu8`` becomes
    ``b (w/127.5) - w``), without the complex64 copy of the block. Integer datatypes without
    overlap take the fused path; ``cf32_le`` and overlapping segments go through
    :func:`to_complex64`.

    Raises
    ------
    RecordingError
        As :func:`to_complex64`.
    PlanError
        As :func:`averaged_psd`.
    """
    arr = _native(raw, datatype)
    step = _step(fft_size, overlap)
    if datatype == "cf32_le" or step != fft_size:
        return averaged_psd(to_complex64(arr, datatype), sample_rate_hz, fft_size, overlap, workers)
    n_samples = arr.size // 2
    if fft_size < 8 or n_samples < fft_size:
        raise PlanError(
            f"{n_samples} samples cannot fill one FFT of {fft_size}; lengthen the dwell or use a "
            "smaller fft_size (at least 8)"
        )
    n_seg = n_samples // fft_size
    rows = arr[: n_seg * 2 * fft_size].reshape(n_seg, 2 * fft_size)
    gain, offset = _scaled_window(fft_size, datatype)

    def fill(block: np.ndarray, first: int) -> None:
        out = block.view(np.float32)
        np.multiply(rows[first : first + block.shape[0]], gain, out=out)
        if offset is not None:
            np.subtract(out, offset, out=out)

    return _psd_from_segments(fill, n_seg, float(sample_rate_hz), fft_size, workers)


def _psd_from_segments(
    fill: Callable[[np.ndarray, int], None], n_seg: int, sample_rate_hz: float, fft_size: int,
    workers: int | None,
) -> tuple[np.ndarray, np.ndarray]:
    """Average ``|FFT|^2`` of ``n_seg`` windowed segments that ``fill(block, first)`` writes.

    The segments are transformed in place in the cached workspace, all of them in one FFT
    call (chunks of :data:`_CHUNK_SEGMENTS` for long blocks); returns offsets and the
    fftshifted one-sided-free density as :func:`averaged_psd` documents.
    """
    chunk = min(n_seg, _CHUNK_SEGMENTS)
    ws = _workspace(chunk, fft_size)
    total = np.zeros(2 * fft_size, dtype=np.float64)
    for first in range(0, n_seg, chunk):
        block = ws.block[: min(chunk, n_seg - first)]
        fill(block, first)
        spec = scipy.fft.fft(block, axis=-1, overwrite_x=True, workers=workers)
        power = spec.view(np.float32)
        np.square(power, out=power)
        np.sum(power, axis=0, dtype=np.float32, out=ws.acc)
        total += ws.acc
    scale = 1.0 / (n_seg * sample_rate_hz * _hann_energy(fft_size))
    density = total.reshape(fft_size, 2).sum(axis=1)
    density *= scale
    psd = np.empty(fft_size, dtype=np.float32)  # fftshift while rounding to single precision
    half = fft_size // 2
    psd[half:] = density[: fft_size - half]
    psd[:half] = density[fft_size - half :]
    return _shifted_offsets(fft_size, sample_rate_hz).copy(), psd


def welch_effective_averages(n_samples: int, fft_size: int, overlap: float = DEFAULT_OVERLAP) -> float:
    """Equivalent number of independent averages ``K_eff`` of :func:`averaged_psd`.

    Welch [1]_ gives the variance of the averaged periodogram of Gaussian noise with a smooth
    spectrum as ``S^2 / K_eff`` with

    .. math:: \\frac{1}{K_{eff}} = \\frac{1}{K}\\Big[1 + 2\\sum_{j=1}^{K-1}
              \\big(1 - \\tfrac{j}{K}\\big)\\rho^2(j)\\Big],\\qquad
              \\rho(j) = \\frac{\\sum_n w_n w_{n+jD}}{\\sum_n w_n^2}

    so each bin is close to ``S chi2(2 K_eff) / (2 K_eff)``; exact with ``K_eff = K`` for
    non-overlapping segments.
    """
    step = _step(fft_size, overlap)
    k = 1 + (int(n_samples) - fft_size) // step
    if k < 1:
        raise PlanError(f"{n_samples} samples cannot fill one FFT of {fft_size}; lengthen the dwell")
    lags = np.arange(1, min(k, -(-fft_size // step)))
    if lags.size == 0:
        return float(k)
    w = _hann(fft_size).astype(np.float64)
    rho = np.array([np.dot(w[: fft_size - j * step], w[j * step :]) for j in lags]) / np.dot(w, w)
    return float(k / (1.0 + 2.0 * np.sum((1.0 - lags / k) * rho**2)))


def psd_to_dbfs_hz(psd: np.ndarray) -> np.ndarray:
    """Linear PSD (FS^2/Hz) to dBFS/Hz, float32 (0 gives -inf, see :func:`survey.units.ratio_to_db`)."""
    return np.asarray(ratio_to_db(np.asarray(psd)), dtype=np.float32)


def usable_bins(offsets_hz: np.ndarray, sample_rate_hz: float, usable_fraction: float,
                dc_guard_hz: float) -> np.ndarray:
    """Boolean mask of bins with ``dc_guard_hz <= |offset| <= usable_fraction * fs / 2``."""
    a = np.abs(offsets_hz)
    return (a <= usable_fraction * sample_rate_hz / 2.0) & (a >= dc_guard_hz)


def channel_power(offsets_hz: np.ndarray, psd: np.ndarray, channel_offsets_hz: np.ndarray,
                  bandwidth_hz: float) -> np.ndarray:
    """Power in each channel: the PSD integrated over ``offset +- bandwidth_hz / 2``.

    Each bin is treated as constant density over its width ``df``; bins cut by a channel edge
    count in proportion to the part inside. Vectorised over channels with one cumulative sum
    (double precision, so a weak channel beside a strong one keeps its digits).

    Parameters
    ----------
    offsets_hz : numpy.ndarray
        Ascending, uniformly spaced bin centres, Hz.
    psd : numpy.ndarray
        Density per bin (FS^2/Hz for a PSD; any density unit works).
    channel_offsets_hz : numpy.ndarray
        Channel centres relative to the same origin, Hz.
    bandwidth_hz : float
        Integration bandwidth ``B``, Hz.

    Returns
    -------
    numpy.ndarray
        float64 power per channel, FS^2 (linear).

    Raises
    ------
    PlanError
        A channel band reaches outside the spectrum.
    """
    return _band_integrals(offsets_hz, np.asarray(psd)[np.newaxis], channel_offsets_hz, bandwidth_hz)[0]


def _band_integrals(offsets_hz: np.ndarray, densities: np.ndarray, channel_offsets_hz: np.ndarray,
                    bandwidth_hz: float) -> np.ndarray:
    """:func:`channel_power` of each row of ``densities`` (one cumulative sum per row)."""
    offsets = np.asarray(offsets_hz, dtype=np.float64)
    centers = np.atleast_1d(np.asarray(channel_offsets_hz, dtype=np.float64))
    k, frac, rest = _band_edges(offsets.size, float(offsets[0]), float(offsets[1] - offsets[0]),
                                float(offsets[-1]), centers.tobytes(), float(bandwidth_hz))
    width = float(offsets[1] - offsets[0])
    rows = densities.shape[0]
    cumulative = np.zeros((rows, offsets.size + 1))
    np.cumsum(densities, axis=1, dtype=np.float64, out=cumulative[:, 1:])
    cumulative *= width
    # linear interpolation of the cumulative integral at the band edges (fractional edge bins)
    at = cumulative[:, k] * rest + cumulative[:, k + 1] * frac
    return at[:, : centers.size] - at[:, centers.size :]


@lru_cache(maxsize=256)
def _band_edges(n_bins: int, first_center_hz: float, width_hz: float, last_center_hz: float,
                centers_bytes: bytes, bandwidth_hz: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Bin index, fraction and ``1 - fraction`` of the upper then lower band edges (read-only)."""
    width = width_hz
    first = first_center_hz - width / 2.0
    last = last_center_hz + width / 2.0
    centers = np.frombuffer(centers_bytes, dtype=np.float64)
    lo = centers - bandwidth_hz / 2.0
    hi = centers + bandwidth_hz / 2.0
    slack = 1e-6 * width
    if centers.size and (lo.min() < first - slack or hi.max() > last + slack):
        raise PlanError(
            f"a channel band ({lo.min():.0f}..{hi.max():.0f} Hz from the centre) reaches outside "
            f"the spectrum ({first:.0f}..{last:.0f} Hz); plan channels inside the hop"
        )
    pos = (np.concatenate([hi, lo]) - first) / width
    np.clip(pos, 0.0, float(n_bins), out=pos)
    k = np.minimum(pos.astype(np.int64), n_bins - 1)
    frac = pos - k
    rest = 1.0 - frac
    for a in (k, frac, rest):
        a.setflags(write=False)
    return k, frac, rest


def _median_db(values: np.ndarray) -> float:
    """``median(10 log10(values))`` without converting every value: the logarithm is monotonic,
    so the middle value(s) of the linear values are the middle value(s) of their logarithms."""
    n = values.size
    mid = np.partition(values, [(n - 1) // 2, n // 2])[[(n - 1) // 2, n // 2]]
    return float(np.mean(ratio_to_db(mid)))


def _check_in_usable(freqs_hz: np.ndarray, center_hz: float, settings: SweepSettings,
                     sample_rate_hz: float) -> None:
    off = freqs_hz - center_hz
    lo = off - settings.channel_bw_hz / 2.0
    hi = off + settings.channel_bw_hz / 2.0
    edge = settings.usable_fraction * sample_rate_hz / 2.0 + 1e-3
    guard = settings.dc_guard_hz - 1e-3
    bad = (lo < -edge) | (hi > edge) | ((lo < guard) & (hi > -guard))
    if np.any(bad):
        f = float(freqs_hz[np.argmax(bad)])
        raise PlanError(
            f"channel {f / 1e6:.3f} MHz is not wholly inside the usable spectrum of the hop at "
            f"{center_hz / 1e6:.3f} MHz (usable fraction {settings.usable_fraction}, DC guard "
            f"{settings.dc_guard_hz:.0f} Hz); plan the hops with the same settings as the sweep"
        )


def _with_rds(emissions: list[EmissionReading], samples: np.ndarray, sample_rate_hz: float,
              center_hz: float) -> list[EmissionReading]:
    """The hop's emissions with the RDS fields of its FM emissions filled in (IEC 62106).

    :func:`survey.rds.columns.decode_hop_emissions` decodes those at C/N >= 10 dB whose channel
    lies wholly inside the hop (one FFT of the hop shared); the others keep empty fields.
    """
    fm = [k for k, e in enumerate(emissions) if e.kind == "fm"]
    if not fm:
        return emissions
    results = decode_hop_emissions(samples, sample_rate_hz, center_hz, [emissions[k].freq_hz for k in fm],
                                   [None if not np.isfinite(emissions[k].cn_db) else emissions[k].cn_db for k in fm])
    out = list(emissions)
    for k, r in zip(fm, results):
        if r is not None:
            out[k] = replace(out[k], **stored_columns(r))
    return out


def measure_hop(
    block: IQBlock,
    channels_hz: Sequence[int],
    settings: SweepSettings,
    hop_index: int,
    keep_psd: bool = False,
    emissions_out: list | None = None,
    floor_out: list | None = None,
    floor_given: np.ndarray | None = None,
) -> tuple[HopReading, list[ChannelReading]]:
    """Measure one hop: clipping, PSD, local noise floor and each channel's P, N and C/N.

    Per channel of bandwidth ``B`` (``settings.channel_bw_hz``): ``P`` is the PSD integrated
    over the band (dBFS); ``N`` the local floor density integrated over the same band, i.e.
    ``N0 B`` with ``N0`` the band-averaged floor (``noise_dbfs``, ``noise_density_dbfs_hz``);
    ``C/N = 10 log10((P - N)/N)`` dB. A channel is received when ``C/N`` is at least
    ``settings.received_margin_db``; otherwise ``cn_db`` is None (never a large negative number).

    Parameters
    ----------
    block : IQBlock
        Raw samples of the hop; its own ``sample_rate_hz`` and ``center_hz`` are used.
    channels_hz : sequence of int
        Raster frequencies measured in this hop, Hz.
    settings : SweepSettings
        FFT size, usable fraction, DC guard, channel bandwidth and detection margin.
    hop_index : int
        Stored with the readings.
    keep_psd : bool
        Attach absolute bin frequencies (Hz, float64) and the PSD (dBFS/Hz, float32).
    emissions_out : list, optional
        When given, the hop's emissions (:func:`survey.emissions.find_emissions`, from the
        same PSD and floor) are appended to it as :class:`~survey.records.EmissionReading`,
        with their RDS read from the hop's IQ unless ``settings.decode_rds`` is False.
    floor_out : list, optional
        When given, ``(absolute bin frequencies Hz, floor dBFS/Hz, usable mask, groups)`` is
        appended (``groups`` a :class:`survey.noise_floor.HopGroups`, for a sweep-wide floor).
    floor_given : numpy.ndarray, optional
        Floor density per bin (FS^2/Hz) to use instead of fitting one, e.g. this hop's part of
        :func:`survey.noise_floor.sweep_floors`.

    Raises
    ------
    PlanError
        A channel is not wholly inside the usable spectrum, or the block is shorter than one FFT.
    RecordingError
        Unsupported or inconsistent datatype.
    """
    fs = float(block.sample_rate_hz)
    center = float(block.center_hz)
    n_samples = _native(block.raw, block.datatype).size // 2
    clipped = clip_fraction(block.raw, block.datatype)
    offsets, psd = raw_averaged_psd(block.raw, block.datatype, fs, settings.fft_size)
    usable = usable_bins(offsets, fs, settings.usable_fraction, settings.dc_guard_hz)
    k_eff = welch_effective_averages(n_samples, settings.fft_size)
    groups: list = []
    if floor_given is not None:
        floor = np.array(floor_given, dtype=np.float64)
    else:
        floor = local_noise_floor(offsets, psd, usable, effective_averages=k_eff,
                                  groups_out=groups if floor_out is not None else None)
    floor_db = _median_db(floor[usable])
    if floor_out is not None:
        floor_out.append((center + offsets, np.asarray(ratio_to_db(floor)), usable, groups[0] if groups else None))
    if emissions_out is not None:
        samples = to_complex64(block.raw, block.datatype)
        found = find_emissions(
            offsets, psd, floor, usable, center_hz=center, hop_index=int(hop_index),
            channels_hz=channels_hz, channel_bw_hz=float(settings.channel_bw_hz),
            effective_averages=k_eff, samples=samples, sample_rate_hz=fs,
        )
        if settings.decode_rds:
            found = _with_rds(found, samples, fs, center)
        emissions_out.extend(found)

    freqs = np.asarray(list(channels_hz), dtype=np.float64)
    readings: list[ChannelReading] = []
    if freqs.size:
        _check_in_usable(freqs, center, settings, fs)
        bw = float(settings.channel_bw_hz)
        densities = np.empty((2, psd.size))
        densities[0] = psd
        np.nan_to_num(floor, copy=False, nan=0.0)  # outside the usable span: no noise counted
        densities[1] = floor
        p, n = _band_integrals(offsets, densities, freqs - center, bw)
        with np.errstate(divide="ignore", invalid="ignore"):
            levels = np.stack([p, n, n / bw, (p - n) / n])
        p_db, n_db, n0_db, cn = np.asarray(ratio_to_db(levels)).reshape(4, -1)
        received = (np.isfinite(cn) & (cn >= settings.received_margin_db)).tolist()
        for f, ok, pw, nz, n0, c in zip(channels_hz, received, p_db.tolist(), n_db.tolist(),
                                        n0_db.tolist(), cn.tolist()):
            readings.append(ChannelReading(
                freq_hz=int(f), hop_index=int(hop_index), power_dbfs=pw, noise_dbfs=nz,
                noise_density_dbfs_hz=n0, cn_db=c if ok else None, received=ok,
            ))
    hop = HopReading(
        index=int(hop_index), center_hz=center, sample_rate_hz=fs, n_samples=int(n_samples),
        clip_fraction=clipped, floor_dbfs_hz=floor_db, started_utc=block.started_utc,
        psd_freqs_hz=(center + offsets) if keep_psd else None,
        psd_dbfs_hz=psd_to_dbfs_hz(psd) if keep_psd else None,
    )
    return hop, readings


def block_end_utc(block: IQBlock) -> str:
    """UTC time just after the block's last sample: start + n_samples / sample_rate.

    Same ISO 8601 format as :func:`survey.store.utc_now` (microseconds, ``Z`` suffix); a start
    time without a zone is taken as UTC.
    """
    text = block.started_utc.strip()
    try:
        start = datetime.fromisoformat(text[:-1] + "+00:00" if text.endswith("Z") else text)
    except ValueError as exc:
        raise RecordingError(
            f"block start time '{block.started_utc}' is not ISO 8601; give core:datetime as e.g. "
            "2025-01-01T00:00:00.000000Z"
        ) from exc
    if start.tzinfo is None:
        start = start.replace(tzinfo=timezone.utc)
    end = start.astimezone(timezone.utc) + timedelta(seconds=block.n_samples / float(block.sample_rate_hz))
    return end.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
