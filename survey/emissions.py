"""Emissions of one hop: every transmitter above the local floor, measured on its own.

A raster channel is a place on the band plan; an emission is a transmitter. One FM station fills
the 100 kHz raster points either side of its carrier with its sidebands, and a strong station's
skirt spills into its neighbours' channels. This module finds the emissions in the PSD and the
local floor that :func:`survey.dsp.measure_hop` already computes, and measures each one alone.

Method (all arrays over the hop's bins, vectorised)
---------------------------------------------------
1. Excess density ``E = PSD - N0`` (FS^2/Hz), smoothed over ``smooth_hz``; bins outside the
   usable span (and the DC guard) are unknown (NaN), never zero.
2. Detection: the mean excess over ``detect_hz`` windows (and over ``line_hz`` windows, the
   Hann main lobe of a carrier) against its standard deviation. For an
   averaged periodogram of ``K_eff`` averages each bin is ``S chi2(2K)/(2K)`` (Welch 1967), so the
   mean of ``M`` Hann-correlated bins has relative standard deviation ``sqrt(v(M) / K_eff)``
   (``v`` from :func:`survey.noise_floor.group_variance_factor`); a model term ``model_error``
   of the local density is added in quadrature (a strong station's programme spectrum is not
   exactly symmetric). A window ``detect_sigma`` deviations above zero holds an emission.
3. Strongest first ("mirror subtraction"): at the strongest remaining window the carrier is the
   frequency about which the residual is most symmetric (``sum_d w(d) min(R(c+d), R(c-d))``
   largest, with the triangular taper ``w(d) = 1 - d / symmetry_reach_hz`` so that power near
   the carrier counts most and two separate lines are not taken for one emission's sidebands;
   searched within ``carrier_search_hz``, parabolic sub-bin refinement). The emission's own
   spectrum is taken as that mirror minimum, made non-increasing outward (a skirt falls with
   distance from its carrier) and clipped at zero, out to ``skirt_reach_hz``; it is subtracted
   from the residual, and the next strongest window is examined. Power on one side of a carrier
   that has no mirror on the other side belongs to someone else. Beyond the emission's core
   (the offset holding 99.9 % of its mirror power within ``symmetry_reach_hz``) the mirror is
   bounded by a non-increasing envelope of itself smoothed over ``envelope_hz``: a skirt falls
   with distance, so stations on both sides of it are not taken for its skirt.
   A window whose carrier would lie closer to a stronger emission's carrier than ``sideband_hz``
   or half that emission's 99 % bandwidth is that emission's own sideband or programme
   asymmetry: never a station. A window whose carrier lies within ``image_hz`` of the mirror
   (about the hop centre) of an emission whose excess density (over ``detect_hz``) is over
   ``1 / image_below`` times larger is that emission's image from the receiver's I/Q imbalance (typically 25-45 dB down;
   common practice, no source): never a station in this hop.
4. Per emission, over its channel ``carrier +- B/2`` (``B`` the channel bandwidth):
   ``I`` = the other emissions' estimated spectra (the neighbours' skirts), ``C`` = excess minus
   ``I`` (its own power), ``N`` = floor integral; ``C/N = 10 log10(C/N)``, ``C/I = 10 log10(C/I)``
   (None when no neighbour power is estimated in the channel). ``power_dbfs`` is ``C + N``
   (signal plus noise in the channel, neighbour removed), as channel rows store ``P``.
   ``separable`` is False when ``C/I`` is below ``separable_ci_db``: a neighbour's skirt
   estimated to 10 % (the mirror's accuracy, measured on the simulated and synthetic pairs in
   tests/test_emissions.py) would then move C by more than about 1.5 dB.
5. Occupied bandwidth: the 99 % power bandwidth of the emission's own (mirror) spectrum, 0.5 %
   of the power beyond each limit (ITU-R SM.328, ITU-R SM.443), linear interpolation inside a bin;
   bins of the mirror spectrum below two standard deviations of the smoothed floor are left out
   (the clipped mirror of noise would otherwise widen a weak emission).
6. Kind: ``narrow`` when the occupied bandwidth is below ``narrow_below_hz`` (25 kHz: an
   unmodulated carrier, a spur or a supply line occupies a few bins of the window's main lobe),
   otherwise ``fm``. An FM broadcast station occupies about 2 (75 + 15) = 180 kHz mono and
   2 (75 + 53) = 256 kHz stereo by Carson's rule (Carson 1922; FS-1037C "Carson bandwidth
   rule"); an FM station silent and mono for a whole dwell would read ``narrow`` (a limit).
7. Stereo: FM emissions at C/N >= ``pilot_min_cn_db`` are cut out of one FFT of the hop's
   samples (the first ``pilot_samples``; ``+- pilot_band_hz``), decimated, frequency-discriminated, and the multiplex spectrum
   is examined at 19 kHz (ITU-R BS.450-3 pilot-tone system): stereo when the pilot bin stands
   ``pilot_ratio_db`` above the median of the 15-23 kHz gap around it (empty in the multiplex).

References
----------
ITU-R SM.328-11 "Spectra and bandwidth of emissions" (occupied bandwidth, beta/2 = 0.5 %);
ITU-R SM.443-4 "Bandwidth measurement at monitoring stations";
J. R. Carson, "Notes on the theory of modulation", Proc. IRE 10, 57-64, 1922;
ITU-R BS.450-3 "Transmission standards for FM sound broadcasting at VHF" (19 kHz pilot);
P. D. Welch, IEEE Trans. Audio Electroacoust. AU-15, 70-73, 1967.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import Sequence

import numpy as np
import scipy.fft

from survey.floor_rows import window_ends
from survey.noise_floor import group_variance_factor
from survey.records import EmissionReading
from survey.units import ratio_to_db

PILOT_HZ = 19_000.0


@dataclass(frozen=True)
class EmissionTuning:
    """Thresholds of :func:`find_emissions` (keep them fixed for sweeps that are compared)."""

    smooth_hz: float = 5_000.0
    envelope_hz: float = 25_000.0
    detect_hz: float = 25_000.0
    detect_sigma: float = 6.0
    line_hz: float = 3_500.0
    model_error: float = 0.05
    carrier_search_hz: float = 60_000.0
    symmetry_reach_hz: float = 100_000.0
    skirt_reach_hz: float = 300_000.0
    sideband_hz: float = 80_000.0
    separable_ci_db: float = -6.0
    narrow_below_hz: float = 25_000.0
    max_emissions: int = 60
    image_hz: float = 20_000.0
    image_below: float = 0.01
    pilot_band_hz: float = 110_000.0
    pilot_min_cn_db: float = 6.0
    pilot_ratio_db: float = 10.0
    pilot_samples: int = 1 << 16


DEFAULT_TUNING = EmissionTuning()


def _boxcar(x: np.ndarray, width: int) -> np.ndarray:
    """Running mean over ``width`` bins (odd), NaN-aware: the mean of the known bins, NaN if none."""
    if width <= 1:
        return x.copy()
    known = np.isfinite(x)
    return _RunningMean(known, width).of(np.where(known, x, 0.0))


@lru_cache(maxsize=64)
def _window_counts(known_bytes: bytes, width: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Window ends and the count of known bins per window (NaN where none), read-only."""
    known = np.frombuffer(known_bytes, dtype=bool)
    upper, lower = window_ends(known.size, width // 2)
    c = np.zeros(known.size + 1, dtype=np.int64)
    np.cumsum(known, out=c[1:])
    count = (c[upper] - c[lower]).astype(np.float64)
    count[count == 0] = np.nan
    count.setflags(write=False)
    return upper, lower, count


class _RunningMean:
    """Running mean over ``width`` bins (odd) of arrays known on the same bins ``known``.

    The count of known bins in each window is fixed, so each mean costs one cumulative sum
    (double precision; the windows' sums are differences of it) instead of a convolution.
    """

    def __init__(self, known: np.ndarray, width: int) -> None:
        self.upper, self.lower, self.count = _window_counts(np.ascontiguousarray(known, dtype=bool).tobytes(), width)
        self._cum = np.zeros(known.size + 1)

    def of(self, values: np.ndarray) -> np.ndarray:
        """Running mean of ``values`` (zero on the unknown bins), NaN where a window holds none."""
        np.add.accumulate(values, out=self._cum[1:])  # np.cumsum without its wrapper
        out = self._cum[self.upper]
        out -= self._cum[self.lower]
        out /= self.count
        return out


def _odd(n: float) -> int:
    k = max(1, int(round(n)))
    return k if k % 2 else k + 1


class _Mirror:
    """``min(r[c+d], r[c-d])`` for ``d = 0..reach`` about centres ``c`` of a residual ``r``; one
    side alone where the other is unknown (NaN).

    ``padded`` holds ``r`` with at least ``reach`` NaN on each side (``r`` is a view of it, so
    the residual may change in place); both sides are read as windows of it (views, no copies).
    """

    def __init__(self, padded: np.ndarray, pad: int, reach: int) -> None:
        self.pad, self.size = pad, padded.size
        windows = padded.size - reach
        step = padded.strides[0]
        self.forward = np.lib.stride_tricks.as_strided(padded, (windows, reach + 1), (step, step), writeable=False)
        backwards = padded[::-1]
        self.backward = np.lib.stride_tricks.as_strided(backwards, (windows, reach + 1), (-step, -step), writeable=False)

    def about(self, first: int, count: int) -> np.ndarray:
        """Rows for the ``count`` centres ``first, first + 1, ...``."""
        plus = self.forward[self.pad + first : self.pad + first + count]
        end = self.size - 1 - self.pad - first  # the first centre's lower side, in the reversed array
        return np.fmin(plus, self.backward[end - count + 1 : end + 1][::-1])


def _add_mirrored(padded: np.ndarray, pad: int, at: int, one_sided: np.ndarray) -> None:
    """Add ``one_sided[d]`` at bins ``at + d`` and ``at - d`` (``d = 0`` once) of the array held
    in ``padded`` with ``pad >= one_sided.size - 1`` spare elements on each side."""
    reach = one_sided.size - 1
    padded[pad + at : pad + at + reach + 1] += one_sided
    padded[pad + at - reach : pad + at][::-1] += one_sided[1:]


def _core_reach(one_sided: np.ndarray, reach: int) -> int:
    """Offset (bins) within which 99.9 % of a one-sided mirror spectrum's power lies (up to ``reach``)."""
    part = one_sided[: reach + 1]
    total = float(part.sum())
    if total <= 0.0:
        return 0
    return int(np.searchsorted(np.cumsum(part), 0.999 * total))


def occupied_bandwidth(freqs_hz: np.ndarray, density: np.ndarray, fraction: float = 0.99) -> tuple[float, float]:
    """Limits (Hz) below and above which ``(1 - fraction)/2`` of the power lies (ITU-R SM.328).

    ``density`` is a non-negative power density on the ascending, uniform grid ``freqs_hz``;
    the cumulative power is interpolated linearly inside a bin.
    """
    p = np.clip(np.nan_to_num(np.asarray(density, dtype=np.float64)), 0.0, None)
    total = float(p.sum())
    if total <= 0.0:
        c = float(freqs_hz[p.size // 2])
        return c, c
    step = float(freqs_hz[1] - freqs_hz[0])
    cum = np.concatenate([[0.0], np.cumsum(p)]) / total
    edges = np.concatenate([[freqs_hz[0] - step / 2.0], freqs_hz + step / 2.0])
    tail = (1.0 - fraction) / 2.0
    return float(np.interp(tail, cum, edges)), float(np.interp(1.0 - tail, cum, edges))


def _band_sum(cum: np.ndarray, edges: np.ndarray, lo_hz: np.ndarray, hi_hz: np.ndarray) -> np.ndarray:
    """Integral between ``lo`` and ``hi`` from a cumulative integral sampled at bin edges."""
    return np.interp(hi_hz, edges, cum) - np.interp(lo_hz, edges, cum)


@lru_cache(maxsize=8)
def _taper(reach: int) -> np.ndarray:
    """Triangular weight ``1 - d / (reach + 1)`` for ``d = 0..reach`` (read-only)."""
    out = 1.0 - np.arange(reach + 1) / (reach + 1.0)
    out.setflags(write=False)
    return out


@lru_cache(maxsize=8)
def _fft_freqs(length: int, rate: float) -> np.ndarray:
    out = scipy.fft.fftfreq(length, 1.0 / rate)
    out.setflags(write=False)
    return out


@lru_cache(maxsize=8)
def _hann_real(length: int) -> np.ndarray:
    n = np.arange(length, dtype=np.float64)
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * n / length)  # periodic Hann (Harris 1978), as scipy.signal.get_window


def _stereo_pilot(spectrum: np.ndarray, n: int, sample_rate_hz: float, offset_hz: float,
                  tuning: EmissionTuning) -> bool:
    """Whether the emission at ``offset_hz`` carries a 19 kHz pilot (see the module notes)."""
    band = tuning.pilot_band_hz
    length = scipy.fft.next_fast_len(int(n * 4.0 * band / sample_rate_hz))
    out_rate = length * sample_rate_hz / n  # about 4 band: the discriminator needs no alias guard
    if length < 256:
        return False
    keep, kept_freqs = _pilot_cut(length, out_rate, band)
    src = np.rint((offset_hz + kept_freqs) * n / sample_rate_hz).astype(np.int64) % n
    cut = np.zeros(length, dtype=np.complex64)
    cut[keep] = spectrum[src]
    z = scipy.fft.ifft(cut)
    inst = np.angle(z[1:] * np.conj(z[:-1]))
    seg = min(1024, inst.size)
    rows = inst[: (inst.size // seg) * seg].reshape(-1, seg)
    rows = (rows - rows.mean(axis=1, keepdims=True)) * _hann_real(seg)
    pxx = np.mean(np.abs(scipy.fft.rfft(rows, axis=1)) ** 2, axis=0)  # averaged periodogram
    gap, near = _pilot_bins(seg, out_rate)
    if not gap.any() or not near.any():
        return False
    return bool(np.max(pxx[near]) >= np.median(pxx[gap]) * 10.0 ** (tuning.pilot_ratio_db / 10.0))


@lru_cache(maxsize=16)
def _pilot_cut(length: int, out_rate: float, band: float) -> tuple[np.ndarray, np.ndarray]:
    """Bins of a ``length``-point FFT at ``out_rate`` within ``+- band`` and their frequencies."""
    freqs = _fft_freqs(length, out_rate)
    keep = np.abs(freqs) <= band
    kept = freqs[keep]
    for a in (keep, kept):
        a.setflags(write=False)
    return keep, kept


@lru_cache(maxsize=16)
def _pilot_bins(seg: int, out_rate: float) -> tuple[np.ndarray, np.ndarray]:
    """Multiplex-spectrum bins of the 15.5-18 and 20-22.5 kHz gap and those next to 19 kHz."""
    f = scipy.fft.rfftfreq(seg, 1.0 / out_rate)
    gap = ((f > 15_500.0) & (f < 18_000.0)) | ((f > 20_000.0) & (f < 22_500.0))
    near = np.abs(f - PILOT_HZ) <= 1.5 * (f[1] - f[0])
    for a in (gap, near):
        a.setflags(write=False)
    return gap, near


def find_emissions(
    offsets_hz: np.ndarray,
    psd: np.ndarray,
    floor: np.ndarray,
    usable: np.ndarray,
    *,
    center_hz: float,
    hop_index: int,
    channels_hz: Sequence[int],
    channel_bw_hz: float,
    effective_averages: float,
    samples: np.ndarray | None = None,
    sample_rate_hz: float | None = None,
    tuning: EmissionTuning = DEFAULT_TUNING,
) -> list[EmissionReading]:
    """Emissions of one hop, each measured alone (method in the module notes).

    Parameters
    ----------
    offsets_hz, psd : numpy.ndarray
        :func:`survey.dsp.averaged_psd` output (Hz from the hop centre; FS^2/Hz).
    floor : numpy.ndarray
        :func:`survey.noise_floor.local_noise_floor` (FS^2/Hz; NaN outside the usable span).
    usable : numpy.ndarray
        Usable bins (:func:`survey.dsp.usable_bins`).
    center_hz : float
        Hop centre, Hz (carriers are reported absolute).
    channels_hz : sequence of int
        Raster channels this hop measures. An emission is reported by the hop whose channel is
        nearest its carrier (within half the raster step), so a sweep reports it once.
    channel_bw_hz : float
        Channel bandwidth ``B`` for C, N and I, Hz.
    effective_averages : float
        ``K_eff`` of the PSD.
    samples : numpy.ndarray, optional
        The hop's complex samples, for the stereo pilot (without them ``stereo`` is False).

    Returns
    -------
    list of EmissionReading
        Ascending in frequency.
    """
    chans = np.asarray(sorted(int(c) for c in channels_hz), dtype=np.float64)
    if chans.size == 0:
        return []
    floor_usable = np.asarray(floor, dtype=np.float64)[np.asarray(usable, dtype=bool)]
    if not np.any(np.isfinite(floor_usable) & (floor_usable > 0.0)):
        return []  # no floor to stand out from: constant or all-zero samples (no signal)
    offsets = np.asarray(offsets_hz, dtype=np.float64)
    step = float(offsets[1] - offsets[0])
    psd64 = np.asarray(psd, dtype=np.float64)
    n0 = np.asarray(floor, dtype=np.float64)
    known = np.asarray(usable, dtype=bool) & np.isfinite(n0)
    if not known.any():
        return []
    raw_excess = np.where(known, psd64 - n0, 0.0)
    search = int(round(tuning.carrier_search_hz / step))
    sym_reach = int(round(tuning.symmetry_reach_hz / step))
    skirt_reach = int(round(tuning.skirt_reach_hz / step))
    pad = max(skirt_reach, sym_reach)
    padded = np.full(offsets.size + 2 * pad, np.nan)  # the residual with NaN beyond both ends
    residual = padded[pad : pad + offsets.size]
    residual[:] = _RunningMean(known, _odd(tuning.smooth_hz / step)).of(raw_excess)
    residual[~known] = np.nan
    total = np.where(known, psd64, 0.0)

    detect_w = _odd(tuning.detect_hz / step)
    rel_var = group_variance_factor(offsets.size, detect_w) / float(effective_averages) + tuning.model_error**2
    wide_mean = _RunningMean(known, detect_w)  # the residual's NaN bins are the unknown ones, always
    wide_scale = wide_mean.of(total) * np.sqrt(rel_var)
    line_w = _odd(tuning.line_hz / step)
    line_var = group_variance_factor(offsets.size, line_w) / float(effective_averages) + tuning.model_error**2
    line_mean = _RunningMean(known, line_w)
    line_scale = line_mean.of(total) * np.sqrt(line_var)
    envelope_w = _odd(tuning.envelope_hz / step)
    taper = _taper(sym_reach)

    carriers: list[float] = []
    components: list[tuple[int, np.ndarray]] = []  # (carrier bin, mirror spectrum for d = 0..reach)
    reaches: list[float] = []  # sideband reach of each emission found, Hz
    strengths: list[float] = []  # detection score of each emission found
    open_bins = known.copy()  # known and not yet blocked
    unknown = ~known
    values = np.empty(offsets.size)
    symmetry = _Mirror(padded, pad, sym_reach)
    changed = True  # the residual changed since the windows were scored
    for _ in range(tuning.max_emissions * 3):
        if len(carriers) >= tuning.max_emissions:
            break
        if changed:
            np.copyto(values, residual)
            values[unknown] = 0.0
            wide = wide_mean.of(values)
            narrow = line_mean.of(values)
            with np.errstate(divide="ignore", invalid="ignore"):  # a zero floor (no signal) scores NaN
                score = np.fmax(wide / wide_scale, narrow / line_scale)
            passing = score >= tuning.detect_sigma
            passing &= np.isfinite(score)
            window_mean = np.fmax(wide, narrow)
            changed = False
        significant = passing & open_bins
        if not significant.any():
            break
        peak = int(np.argmax(np.where(significant, window_mean, -np.inf)))  # strongest first
        first = max(peak - search, 0)
        cand = np.arange(first, min(peak + search + 1, offsets.size))
        sym = np.fmax(symmetry.about(first, cand.size), 0.0) @ taper  # unknown on both sides (NaN) counts 0
        best = int(np.argmax(sym))
        frac = 0.0
        if 0 < best < sym.size - 1:
            a, b, c = sym[best - 1], sym[best], sym[best + 1]
            den = a - 2.0 * b + c
            frac = float(np.clip(0.5 * (a - c) / den, -0.5, 0.5)) if den < 0 else 0.0
        at = int(cand[best])
        carrier = float(offsets[at] + frac * step)
        half_block = max(detect_w // 2, 1)
        if any(abs(carrier + c) < tuning.image_hz and window_mean[peak] < s_c * tuning.image_below
               for c, s_c in zip(carriers, strengths)):
            open_bins[max(peak - half_block, 0) : peak + half_block + 1] = False
            continue  # the receiver's IQ-imbalance image of a stronger emission
        if any(abs(carrier - c) < reach for c, reach in zip(carriers, reaches)):
            open_bins[max(peak - half_block, 0) : peak + half_block + 1] = False
            continue  # a sideband or the asymmetry of a stronger emission
        raw_mirror = np.fmin(padded[pad + at : pad + at + skirt_reach + 1],
                             padded[pad + at - skirt_reach : pad + at + 1][::-1])
        own = np.fmax(raw_mirror, 0.0)  # unknown on both sides (NaN) counts 0
        core = _core_reach(own, sym_reach)
        envelope = np.fmax(_boxcar(raw_mirror, envelope_w), 0.0)
        own[core:] = np.minimum(own[core:], np.minimum.accumulate(envelope[core:]))
        if own[: sym_reach + 1].sum() <= 0.0:
            open_bins[max(peak - half_block, 0) : peak + half_block + 1] = False
            continue
        _add_mirrored(padded, pad, at, -own)  # NaN beyond the ends stays NaN
        changed = True
        carriers.append(carrier)
        components.append((at, own))
        reaches.append(max(tuning.sideband_hz, core * step))
        strengths.append(float(np.nan_to_num(window_mean[peak])))

    if not carriers:
        return []
    # per-emission spectra on the bin grid, for the channel integrals
    padded_spectra = np.zeros((len(carriers), offsets.size + 2 * pad))
    for k, (at, own) in enumerate(components):
        _add_mirrored(padded_spectra[k], pad, at, own)
    spectra = padded_spectra[:, pad : pad + offsets.size]
    edges = np.concatenate([[offsets[0] - step / 2.0], offsets + step / 2.0])
    cum_excess = np.concatenate([[0.0], np.cumsum(raw_excess)]) * step
    floor_known = np.isfinite(n0)
    cum_floor = np.concatenate([[0.0], np.cumsum(np.where(floor_known, n0, 0.0))]) * step
    cum_parts = np.concatenate([np.zeros((len(carriers), 1)), np.cumsum(spectra, axis=1)], axis=1) * step
    cum_all = cum_parts.sum(axis=0)
    car = np.asarray(carriers)
    lo, hi = car - channel_bw_hz / 2.0, car + channel_bw_hz / 2.0
    e_chan = _band_sum(cum_excess, edges, lo, hi)
    n_chan = _band_sum(cum_floor, edges, lo, hi)
    all_chan = _band_sum(cum_all, edges, lo, hi)
    self_chan = np.array([_band_sum(cum_parts[k], edges, lo[k : k + 1], hi[k : k + 1])[0]
                          for k in range(len(carriers))])
    interference = np.clip(all_chan - self_chan, 0.0, None)
    own_power = e_chan - interference

    # the mirror of pure noise is clipped at zero, so it leaves a positive trickle: bins below two
    # standard deviations of the smoothed floor do not count towards the occupied bandwidth
    smooth_w = _odd(tuning.smooth_hz / step)
    noise_step = 2.0 * np.where(floor_known, n0, np.inf) * np.sqrt(
        group_variance_factor(offsets.size, smooth_w) / float(effective_averages))
    raster = float(np.min(np.diff(chans))) if chans.size > 1 else float(channel_bw_hz)
    spectrum = None  # FFT of the hop's samples for the pilot test, computed once when first needed
    out: list[EmissionReading] = []
    for k in range(len(carriers)):
        freq = float(center_hz) + carriers[k]
        nearest = int(np.argmin(np.abs(chans - freq)))
        if abs(chans[nearest] - freq) > raster / 2.0 + 1.0:
            continue  # owned by the hop that measures the nearer channel
        f_lo, f_hi = occupied_bandwidth(offsets, np.where(spectra[k] > noise_step, spectra[k], 0.0))
        obw = max(f_hi - f_lo, 0.0)
        kind = "narrow" if obw < tuning.narrow_below_hz else "fm"
        n_k = float(n_chan[k])
        c_k = float(own_power[k])
        cn = float(ratio_to_db(c_k / n_k)) if c_k > 0 and n_k > 0 else float("nan")
        i_k = float(interference[k])
        ci = float(ratio_to_db(c_k / i_k)) if i_k > 1e-12 * max(n_k, 1e-300) and c_k > 0 else None
        separable = ci is None or ci >= tuning.separable_ci_db
        stereo = False
        if kind == "fm" and samples is not None and sample_rate_hz is not None and np.isfinite(cn) \
                and cn >= tuning.pilot_min_cn_db:
            if spectrum is None:
                head = np.asarray(samples, dtype=np.complex64)[: tuning.pilot_samples]
                spectrum = scipy.fft.fft(head)
            stereo = _stereo_pilot(spectrum, int(spectrum.size), float(sample_rate_hz), carriers[k], tuning)
        power = float(ratio_to_db(max(c_k, 0.0) + n_k)) if n_k > 0 else float("nan")
        out.append(EmissionReading(
            freq_hz=freq, hop_index=int(hop_index), kind=kind, occupied_bw_hz=float(obw),
            power_dbfs=power, noise_dbfs=float(ratio_to_db(n_k)) if n_k > 0 else float("nan"),
            cn_db=cn, ci_db=ci, stereo=bool(stereo), channel_freq_hz=int(chans[nearest]),
            separable=bool(separable),
        ))
    out.sort(key=lambda e: e.freq_hz)
    return out


def emissions_from_spectra(spectra, *, channel_bw_hz: float, usable_fraction: float,
                           dc_guard_hz: float) -> list[EmissionReading]:
    """Emissions of a sweep rebuilt from kept spectra (no IQ samples: ``stereo`` is False).

    ``spectra`` holds one ``(hop_index, center_hz, sample_rate_hz, n_samples, absolute bin
    frequencies Hz, PSD dBFS/Hz, channels_hz)`` per hop. The floor is the sweep-wide floor
    of :func:`survey.sweep.run_sweep` (:func:`survey.noise_floor.sweep_floors`), with ``K_eff``
    from the hop's sample count.
    """
    from survey.dsp import usable_bins, welch_effective_averages  # survey.dsp imports this module
    from survey.noise_floor import local_noise_floor, sweep_floors

    prepared = []
    groups = []
    for hop_index, center, fs, n_samples, freqs, psd_db, channels in spectra:
        offsets = np.asarray(freqs, dtype=np.float64) - float(center)
        psd = np.power(10.0, np.asarray(psd_db, dtype=np.float64) / 10.0)
        usable = usable_bins(offsets, float(fs), usable_fraction, dc_guard_hz)
        k_eff = welch_effective_averages(int(n_samples), int(offsets.size))
        local_noise_floor(offsets, psd, usable, effective_averages=k_eff, groups_out=groups)
        prepared.append((hop_index, float(center), offsets, psd, usable, k_eff, channels))
    floors = sweep_floors(groups, [p[1] for p in prepared], [p[2] for p in prepared])
    out: list[EmissionReading] = []
    for (hop_index, center, offsets, psd, usable, k_eff, channels), floor in zip(prepared, floors):
        out.extend(find_emissions(offsets, psd, floor, usable, center_hz=center, hop_index=int(hop_index),
                                  channels_hz=channels, channel_bw_hz=channel_bw_hz, effective_averages=k_eff))
    return sorted(out, key=lambda e: e.freq_hz)
