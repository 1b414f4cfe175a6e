"""Raw IQ to an averaged power spectral density: conversion, clipping, Welch periodogram.

Everything runs vectorised in single precision with work buffers reused from hop to hop (the
conversion is written straight into the windowed FFT input, the full-scale scale folded into the
window, all segments transformed in one call).

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

References
----------
.. [1] P. D. Welch, "The use of fast Fourier transform for the estimation of power spectra: a
   method based on time averaging over short, modified periodograms," IEEE Trans. Audio
   Electroacoust., vol. AU-15, no. 2, pp. 70-73, 1967.
"""

from __future__ import annotations

import threading
from functools import lru_cache
from typing import Callable

import numpy as np
import scipy.fft

from survey.errors import PlanError, RecordingError
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
