"""Channels inside the DC guard of a single-capture recording, measured from a notched spectrum.

A recording with one capture cannot be re-tuned to move a station away from the converter's DC
spike (a constant offset of I and Q plus low-frequency noise, at the capture's centre). Instead
of dropping the station (the hop planner keeps every channel on one side of the guard), its
power is taken from the hop's averaged PSD with the bins within
``notch_hz`` of the centre replaced by a straight line (in linear power) between the flanks
just outside the notch on either side, then integrated over the channel as everywhere else
(:func:`survey.dsp.channel_power`). Exact for a spectrum that is flat or linear across the notch
(broadcast FM around its carrier, noise); the reading is marked in the sweep's notes.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from survey.dsp import channel_power
from survey.records import ChannelReading, SweepResult


def notched_psd(offsets_hz: np.ndarray, psd: np.ndarray, notch_hz: float, flank_bins: int = 4) -> np.ndarray:
    """``psd`` (linear) with the bins at ``|offset| <= notch_hz`` replaced by a straight line.

    The line joins the mean of up to ``flank_bins`` bins just outside the notch on each side
    (at their mean offset): one averaged-periodogram bin scatters by ``1/sqrt(K)``, so a flank of
    ``m`` bins pins each end ``sqrt(m)`` times better than a single bin would.
    """
    out = np.array(psd, dtype=np.float64)
    inside = np.abs(offsets_hz) <= notch_hz
    if not inside.any() or inside.all():
        return out
    first, last = int(np.argmax(inside)), int(inside.size - 1 - np.argmax(inside[::-1]))
    left = slice(max(first - flank_bins, 0), first) if first > 0 else slice(last + 1, last + 2)
    right = slice(last + 1, min(last + 1 + flank_bins, out.size)) if last + 1 < out.size else left
    xs = [float(np.mean(offsets_hz[left])), float(np.mean(offsets_hz[right]))]
    ys = [float(np.mean(out[left])), float(np.mean(out[right]))]
    if xs[0] == xs[1]:
        out[first:last + 1] = ys[0]
    else:
        out[first:last + 1] = np.interp(offsets_hz[first:last + 1], xs, ys)
    return out


def measure_inside_guard(result: SweepResult, notch_hz: float, channels_hz, received_margin_db: float) -> SweepResult:
    """Add readings for ``channels_hz``, channels the hop plan left out because they overlap the
    DC guard of a single-capture recording.

    Needs the hop's PSD (``keep_psd``). P is the notched PSD integrated over the channel; N is
    the hop's median local floor density times the bandwidth (the floor inside the guard cannot
    be seen, so the hop's own typical floor stands in for it); C/N and ``received`` follow.
    Returns the result with the readings added in frequency order and a note naming them.
    """
    wanted = [int(f) for f in channels_hz]
    if notch_hz <= 0 or not wanted or len(result.hops) != 1:
        return result
    hop = result.hops[0]
    if hop.psd_freqs_hz is None or hop.psd_dbfs_hz is None or not math.isfinite(hop.floor_dbfs_hz):
        return result
    bw = float(result.settings.channel_bw_hz)
    offsets = np.asarray(hop.psd_freqs_hz, dtype=np.float64) - hop.center_hz
    psd = notched_psd(offsets, 10.0 ** (np.asarray(hop.psd_dbfs_hz, dtype=np.float64) / 10.0), notch_hz)
    half_span = (offsets[-1] - offsets[0]) / 2.0
    n0_db = float(hop.floor_dbfs_hz)
    n = 10.0 ** (n0_db / 10.0) * bw
    added, names = [], []
    for f in wanted:
        offset = f - hop.center_hz
        if abs(offset) + bw / 2.0 > half_span:
            continue
        p = float(channel_power(offsets, psd, np.array([offset]), bw)[0])
        cn = 10.0 * math.log10((p - n) / n) if p > n else None
        ok = cn is not None and cn >= received_margin_db
        added.append(ChannelReading(freq_hz=f, hop_index=hop.index, power_dbfs=10.0 * math.log10(max(p, 1e-30)),
                                    noise_dbfs=10.0 * math.log10(n), noise_density_dbfs_hz=n0_db,
                                    cn_db=cn if ok else None, received=ok))
        names.append(f"{f / 1e6:.2f}")
    if not added:
        return result
    channels = tuple(sorted(result.channels + tuple(added), key=lambda c: c.freq_hz))
    note = (f"channel(s) {', '.join(names)} MHz inside the DC guard measured from a DC-notched spectrum "
            f"(interpolated across +-{notch_hz / 1e3:g} kHz; N from the capture's median floor)")
    return replace(result, channels=channels, notes="; ".join(x for x in (result.notes, note) if x))


__all__ = ["measure_inside_guard", "notched_psd"]
