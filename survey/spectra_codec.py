"""How kept spectra are stored: full resolution for noise inputs, a thinned copy for the antenna.

What each analysis reads from the ``spectra`` table, and so what each input keeps:

* the passband (:mod:`analysis.passband.data`) averages noise-source spectra (``noise-hot``,
  ``noise-cold``) and, for the shape-only fallback, ``terminated`` or ``antenna`` spectra, into
  bins of 100 kHz by default: it needs the linear mean of the density over spans much wider than
  one FFT bin;
* the fault diagnosis (:mod:`analysis.diagnose.lines`) looks for narrow lines (an oscillating
  preamp) in every input's spectra; on ``terminated`` and noise-source inputs no station hides
  a line, so those are the sweeps where one FFT bin of resolution matters;
* a rebuild of per-channel figures from spectra integrates the density over a channel's
  bandwidth (200 kHz), which the mean over a few bins keeps exactly.

So the noise inputs are stored as they were measured (int16 hundredths of a dB per FFT bin,
:data:`FULL`), and ``antenna`` sweeps, which are most of a night's sweeps, as a thinned copy
(:func:`thin`): the usable span of the hop only, each group of :data:`THIN_BINS` adjacent bins
replaced by the linear mean of its density (so band integrals are unchanged), quantised to
:data:`THIN_STEP_DB` steps in one byte above a per-hop offset. A thinned value's uncertainty
is the periodogram's own (about ``4.34 / sqrt(4 K)`` dB for ``K`` averaged segments, 0.97 dB at
the demo's five) plus the rounding (uniform, +-0.25 dB: 0.14 dB RMS, a bias of the linear mean
below 0.001 dB); a narrow line loses 4 to 7 dB of contrast against the floor, because its
power is spread over the group.

Blob formats of ``spectra.psd_centi_dbfs_hz`` (rows carry their own ``f_start_hz``, ``bin_hz``
and ``n_bins``, so a thinned row is simply a coarser spectrum):

* full: ``n_bins`` little-endian int16, hundredths of dBFS/Hz (every database so far);
* thinned: the tag byte ``b"T"``, the group size (uint8), little-endian float32 offset
  (dBFS/Hz) and float32 step (dB), then ``n_bins`` uint8 codes, one per group; value = offset +
  code * step; ``f_start_hz`` and ``bin_hz`` are the first group's centre and the group width.
  Told apart from the full format by its tag and its length (``n_bins + 10`` bytes, never
  ``2 n_bins``: the writer falls back to the full format for a ten-group row).

:func:`decode_row` gives every row back on the FFT bin grid it was measured on: a thinned value
is repeated over the bins of its group (a piecewise-constant density with the same integral),
so the analyses' limits counted in FFT bins keep their meaning in hertz.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

#: Inputs whose kept spectra are thinned; every other input is stored at full resolution.
THINNED_INPUTS: tuple[str, ...] = ("antenna",)
#: Adjacent FFT bins averaged into one thinned value.
THIN_BINS = 4
#: Quantisation step of a thinned value, dB (one byte spans 127.5 dB).
THIN_STEP_DB = 0.5
FULL = "full"
_TAG = b"T"
_HEADER = len(_TAG) + 1 + 8


@dataclass(frozen=True)
class EncodedSpectrum:
    """One ``spectra`` row's payload: first bin centre and bin width (Hz), bin count, blob."""

    f_start_hz: float
    bin_hz: float
    n_bins: int
    blob: bytes


def encode_full(freqs_hz: np.ndarray, psd_dbfs_hz: np.ndarray) -> EncodedSpectrum:
    """Full resolution: int16 hundredths of dBFS/Hz per FFT bin (values clipped to int16)."""
    f = np.asarray(freqs_hz, dtype=np.float64)
    centi = np.clip(np.round(np.asarray(psd_dbfs_hz, np.float64) * 100.0), -32768, 32767)
    return EncodedSpectrum(float(f[0]), float(f[1] - f[0]), int(f.size), centi.astype("<i2").tobytes())


def thin(freqs_hz: np.ndarray, psd_dbfs_hz: np.ndarray, center_hz: float, sample_rate_hz: float,
         usable_fraction: float, dc_guard_hz: float, group: int = THIN_BINS,
         step_db: float = THIN_STEP_DB) -> EncodedSpectrum:
    """Thinned copy: usable span only, linear mean of ``group`` bins, one byte per value.

    Groups are consecutive runs of ``group`` bins; only groups holding at least one usable bin
    (``dc_guard_hz <= |f - center_hz| <= usable_fraction * sample_rate_hz / 2``) are kept, and
    each value is the mean of the group's usable bins (of all its bins when none is usable), so
    no excluded bin (hop edge, DC spike) leaks into a value the analyses keep. The value sits at
    the group's centre frequency. Non-finite densities (no power) become the lowest code.
    """
    f = np.asarray(freqs_hz, dtype=np.float64)
    n_groups = f.size // group
    if n_groups < 2 or f.size < 2 or not 1 <= group <= 255:
        return encode_full(f, np.asarray(psd_dbfs_hz, dtype=np.float64))
    first, last, use_g, n_use = _thin_layout(f.tobytes(), float(center_hz), float(sample_rate_hz),
                                              float(usable_fraction), float(dc_guard_hz), int(group))
    n_keep = last - first
    if n_keep == _HEADER:  # the one length the two formats would share
        return encode_full(freqs_hz, psd_dbfs_hz)
    db = np.asarray(psd_dbfs_hz, dtype=np.float64)[first * group : last * group]
    lin_g = np.power(10.0, db / 10.0).reshape(n_keep, group)
    mean = np.where(n_use > 0, (lin_g * use_g).sum(axis=1) / np.maximum(n_use, 1), lin_g.mean(axis=1))
    with np.errstate(divide="ignore"):
        values = 10.0 * np.log10(mean)
    finite = np.isfinite(values)
    offset = float(np.floor(values[finite].min())) if finite.any() else -300.0
    codes = np.clip(np.round((np.where(finite, values, offset) - offset) / step_db), 0, 255).astype(np.uint8)
    header = _TAG + bytes([group]) + np.asarray([offset, step_db], dtype="<f4").tobytes()
    centre = f[first * group : (first + 1) * group].reshape(1, group).mean(axis=1)[0]  # as a row mean
    return EncodedSpectrum(float(centre), float(f[1] - f[0]) * group,
                           int(n_keep), header + codes.tobytes())


@lru_cache(maxsize=64)
def _thin_layout(freqs_bytes: bytes, center_hz: float, sample_rate_hz: float, usable_fraction: float,
                 dc_guard_hz: float, group: int) -> tuple[int, int, np.ndarray, np.ndarray]:
    """The kept groups ``[first, last)`` of :func:`thin`, their usable bins and usable counts."""
    f = np.frombuffer(freqs_bytes, dtype=np.float64)
    n_groups = f.size // group
    off = np.abs(f[: n_groups * group] - center_hz)
    usable = (off <= usable_fraction * sample_rate_hz / 2.0) & (off >= dc_guard_hz)
    use_g = usable.reshape(n_groups, group)
    n_use = use_g.sum(axis=1)
    keep = np.flatnonzero(n_use > 0)
    if keep.size < 2:
        keep = np.arange(n_groups)
    first, last = int(keep[0]), int(keep[-1]) + 1  # one contiguous run: the row is a uniform grid
    use_g, n_use = use_g[first:last].copy(), n_use[first:last].copy()
    for a in (use_g, n_use):
        a.setflags(write=False)
    return first, last, use_g, n_use


def encode(freqs_hz: np.ndarray, psd_dbfs_hz: np.ndarray, input_kind: str, center_hz: float,
           sample_rate_hz: float, usable_fraction: float, dc_guard_hz: float) -> EncodedSpectrum:
    """The stored form of one hop's spectrum for a sweep of ``input_kind`` (see the module doc)."""
    if input_kind in THINNED_INPUTS:
        return thin(freqs_hz, psd_dbfs_hz, center_hz, sample_rate_hz, usable_fraction, dc_guard_hz)
    return encode_full(freqs_hz, psd_dbfs_hz)


def is_thinned(blob: bytes, n_bins: int) -> bool:
    """True when a stored row is in the thinned format."""
    data = bytes(blob)
    return len(data) == int(n_bins) + _HEADER != 2 * int(n_bins) and data[: len(_TAG)] == _TAG


def decode_row(f_start_hz: float, bin_hz: float, n_bins: int, blob: bytes,
               dtype: type = np.float64) -> tuple[np.ndarray, np.ndarray]:
    """Absolute bin frequencies (Hz, float64) and PSD (dBFS/Hz, ``dtype``) of a stored row.

    Full-resolution rows give ``f_start + bin_hz k`` and ``int16 / 100`` computed in ``dtype``,
    as they always have. Thinned rows are put back on their FFT bin grid: each group's value
    over each of its bins, the bins at ``centre + (j - (G - 1)/2) bin_hz / G``.
    """
    data = bytes(blob)
    n = int(n_bins)
    if not is_thinned(data, n):
        values = np.frombuffer(data, dtype="<i2").astype(dtype) / dtype(100.0)
        return f_start_hz + bin_hz * np.arange(n), values
    group = data[len(_TAG)]
    offset, step = np.frombuffer(data[len(_TAG) + 1:_HEADER], dtype="<f4").astype(np.float64)
    codes = np.frombuffer(data[_HEADER:], dtype=np.uint8)
    values = np.repeat((offset + codes * step).astype(dtype), group)
    centres = np.repeat(f_start_hz + bin_hz * np.arange(n), group)
    within = np.tile(np.arange(group) - (group - 1) / 2.0, n) * (bin_hz / group)
    return centres + within, values
