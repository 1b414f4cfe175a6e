"""Per-hop signal processing: raw IQ to channel power, local noise floor and carrier-to-noise.

The conversion and the averaged periodogram live in :mod:`survey.psd` (re-exported here);
accumulations that subtract nearly equal numbers (cumulative channel integrals) run in double
precision.

Levels are in dBFS: a complex exponential of amplitude 1.0 is 0 dBFS (the datatypes' scaling
is tabulated in :mod:`survey.psd`).

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

from dataclasses import dataclass, replace
from datetime import datetime, timedelta, timezone
from functools import lru_cache
from typing import Sequence

import numpy as np

from survey.errors import PlanError, RecordingError
from survey.records import ChannelReading, EmissionReading, HopReading, IQBlock, SweepSettings
from survey.noise_floor import local_noise_floor, log_average_bias_db  # noqa: F401 (re-exported: public API)
from survey.psd import (  # noqa: F401 (re-exported: the conversion and PSD steps of the pipeline)
    DEFAULT_OVERLAP, SUPPORTED_DATATYPES, _native, averaged_psd, clip_fraction, psd_to_dbfs_hz, raw_averaged_psd,
    to_complex64, usable_bins, welch_effective_averages,
)
from survey.emissions import find_emissions
from survey.rds.columns import decode_hop_emissions, stored_columns
from survey.units import ratio_to_db

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
    at = _first_outside(np.ascontiguousarray(freqs_hz, dtype=np.float64).tobytes(), float(center_hz),
                        float(settings.channel_bw_hz), float(settings.usable_fraction), float(settings.dc_guard_hz),
                        float(sample_rate_hz))
    if at >= 0:
        f = float(freqs_hz[at])
        raise PlanError(
            f"channel {f / 1e6:.3f} MHz is not wholly inside the usable spectrum of the hop at "
            f"{center_hz / 1e6:.3f} MHz (usable fraction {settings.usable_fraction}, DC guard "
            f"{settings.dc_guard_hz:.0f} Hz); plan the hops with the same settings as the sweep"
        )


@lru_cache(maxsize=256)
def _first_outside(freqs_bytes: bytes, center_hz: float, channel_bw_hz: float, usable_fraction: float,
                   dc_guard_hz: float, sample_rate_hz: float) -> int:
    """Index of the first channel not wholly inside the usable spectrum of the hop, -1 if none."""
    off = np.frombuffer(freqs_bytes, dtype=np.float64) - center_hz
    lo = off - channel_bw_hz / 2.0
    hi = off + channel_bw_hz / 2.0
    edge = usable_fraction * sample_rate_hz / 2.0 + 1e-3
    guard = dc_guard_hz - 1e-3
    bad = (lo < -edge) | (hi > edge) | ((lo < guard) & (hi > -guard))
    return int(np.argmax(bad)) if np.any(bad) else -1


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


@dataclass(frozen=True)
class HopSpectrum:
    """A hop's averaged PSD (offsets Hz from the hop centre, FS^2/Hz), its usable bins and
    ``K_eff``: what the floor fit of a sweep's first pass needs (:func:`hop_spectrum`)."""

    offsets_hz: np.ndarray
    psd: np.ndarray
    usable: np.ndarray
    effective_averages: float


def hop_spectrum(block: IQBlock, settings: SweepSettings) -> HopSpectrum:
    """Steps 2 and 3 of :func:`measure_hop` for ``block`` (arrays of its own, not work buffers)."""
    fs = float(block.sample_rate_hz)
    offsets, psd = raw_averaged_psd(block.raw, block.datatype, fs, settings.fft_size)
    usable = usable_bins(offsets, fs, settings.usable_fraction, settings.dc_guard_hz)
    k_eff = welch_effective_averages(_native(block.raw, block.datatype).size // 2, settings.fft_size)
    return HopSpectrum(np.array(offsets), np.array(psd), usable, k_eff)


def floor_level_dbfs_hz(floor: np.ndarray, usable: np.ndarray) -> float:
    """A hop's floor in one number: the median over its usable bins of the floor density, dBFS/Hz
    (as :attr:`survey.records.HopReading.floor_dbfs_hz`)."""
    return _median_db(np.asarray(floor)[usable])


def measure_hop(
    block: IQBlock,
    channels_hz: Sequence[int],
    settings: SweepSettings,
    hop_index: int,
    keep_psd: bool = False,
    emissions_out: list | None = None,
    floor_out: list | None = None,
    floor_given: np.ndarray | None = None,
    psd_out: list | None = None,
    psd_given: tuple[np.ndarray, np.ndarray] | None = None,
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
    psd_out : list, optional
        When given, ``(offsets Hz, PSD FS^2/Hz, floor FS^2/Hz)`` of this hop is appended (copies),
        so that a second pass over the same block need not compute them again.
    psd_given : tuple of numpy.ndarray, optional
        ``(offsets Hz, PSD FS^2/Hz)`` of this very block from an earlier pass (``psd_out``).

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
    if psd_given is not None:
        offsets, psd = psd_given
    else:
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
    if psd_out is not None:
        psd_out.append((np.array(offsets), np.array(psd), np.array(floor)))
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
        levels = np.empty((4, p.size))
        with np.errstate(divide="ignore", invalid="ignore"):  # as ratio_to_db: 0 gives -inf, negative NaN
            np.copyto(levels[0], p)
            np.copyto(levels[1], n)
            np.divide(n, bw, out=levels[2])
            np.divide(p - n, n, out=levels[3])
            p_db, n_db, n0_db, cn = 10.0 * np.log10(levels)
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
