"""The checks behind :func:`analysis.diagnose.core.diagnose`: clipping, intermodulation, IQ images, lines.

Every check returns ``(findings, checked, notes)``: the findings, one line per check saying
what was looked at with its numbers, and caveats.

Methods
-------
* **Clipping**: per hop, the largest fraction of 8-bit samples at the rails over the sweeps
  (``hops.clip_fraction``) against a threshold (default ``1e-4``, common practice, no source).
  The gain reduction to try assumes each rail is Gaussian with standard deviation ``sigma``
  (a sum of many carriers): the clip fraction is ``p = erfc(a / (sqrt(2) sigma))`` with the rail
  at ``a = 127 / 127.5`` of full scale; the reduction brings the worst hop to a tenth of the
  threshold, ``20 log10(sigma_now / sigma_target)``, rounded up, at least 3 dB.
* **Unexplained rise**: a channel received with the preamp whose signal-only power ``S = P - N``
  rose by more than the preamp's gain ``G(f)`` plus 3 dB. Where the base did not receive it, the
  base signal is bounded above by ``max(P - N, 0) + 0.1 N`` (the floor's uncertainty), which
  gives a lower bound on the rise; a weak station lifted by the gain is therefore explained.
* **IQ image**: the receiver's IQ imbalance mirrors a strong signal about the hop centre
  ``fc`` to ``2 fc - f``, at the image-rejection ratio below it. A channel is an image when
  the channel at its mirror in the same hop is at least 15 dB stronger and the same ratio holds
  in the base (present there too), or the base image would have been below its floor.
* **Intermodulation**: an unexplained channel within half a raster step of ``2 f1 - f2`` of two
  strong carriers (third-order intercept law ``P_IM3 = 2 P1 + P2 - 2 IIP3``, so ``3 P - 2 IIP3``
  for equal tones). Through a known attenuator of ``X`` dB ahead of the preamp a carrier drops
  by ``X`` and a third-order product by ``3X``.
* **Narrow lines** (:mod:`analysis.diagnose.lines`): kept spectra are searched for lines that
  hold nearly all their channel's excess power in a few bins.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from analysis.findings import Finding
from analysis.diagnose.data import ChannelSummary, GainModel, raster_step_hz
from survey.store import HopRow
from survey.units import ratio_to_db

#: A channel is unexplained when it rose by more than the gain plus this, dB.
RISE_MARGIN_DB = 3.0
#: The mirror of an image is at least this much stronger, dB.
IMAGE_MIN_DB = 15.0
#: Image ratio in test and base agree within this, dB.
IMAGE_MATCH_DB = 3.0
#: An image the base could not have shown is accepted only this far below its mirror, dB
#: (receivers of this class reject their image by roughly 25-40 dB; from memory).
IMAGE_UNSEEN_MIN_DB = 20.0
#: An unexplained channel must stand at least this far above its floor (C/N, dB): the local
#: floor can be a couple of dB low at a hop edge on a steep passband slope (common practice,
#: no source).
CANDIDATE_MIN_CN_DB = 6.0
#: Strong carriers: received with at least this C/N in the test configuration, dB.
CARRIER_MIN_CN_DB = 10.0
#: Rail of ``cu8`` in full-scale units: bytes 0 and 255 are ``|x| >= 127/127.5``.
RAIL_FS = 127.0 / 127.5


def _db(x) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.asarray(ratio_to_db(np.asarray(x, dtype=np.float64)))


# ------------------------------------------------------------------------------------ clipping
def gaussian_rail_sigma(clip_fraction: float) -> float:
    """Rail standard deviation (full scale) that clips ``clip_fraction`` of samples (Gaussian model)."""
    import scipy.special
    p = min(max(float(clip_fraction), 1e-12), 0.999)
    return RAIL_FS / (math.sqrt(2.0) * float(scipy.special.erfcinv(p)))


def suggested_gain_reduction_db(max_fraction: float, threshold: float) -> float:
    """Gain reduction (dB, whole, >= 3) bringing ``max_fraction`` to a tenth of ``threshold``."""
    need = 20.0 * math.log10(gaussian_rail_sigma(max_fraction) / gaussian_rail_sigma(threshold / 10.0))
    return float(max(3.0, math.ceil(need)))


def _worst_per_hop(hops: list[tuple[HopRow, str]]) -> dict[tuple[str, float], float]:
    worst: dict[tuple[str, float], float] = {}
    for h, input_label in hops:
        cf = h.clip_fraction
        if cf is None:
            continue
        key = (input_label, float(h.center_hz))
        worst[key] = max(worst.get(key, 0.0), float(cf))
    return worst


def check_clipping(test_hops: list[tuple[HopRow, str]], base_hops: list[tuple[HopRow, str]], threshold: float,
                   test: str, base: str):
    """Hops of ``test`` whose clip fraction exceeds ``threshold`` (see the module docstring)."""
    findings, checked, notes = [], [], []
    worst = _worst_per_hop(test_hops)
    if not worst:
        return findings, [f"clipping: not checked ('{test}' hops carry no clip fraction: not 8-bit samples)"], notes
    above = {k: v for k, v in worst.items() if v > threshold}
    (w_inp, w_fc), w_val = max(worst.items(), key=lambda kv: kv[1])
    worst_txt = (f"largest fraction {w_val:.3g} at {w_fc / 1e6:.3f} MHz" if w_val > 0 else "no sample at the rails")
    checked.append(f"clipping: {len(above)} of {len(worst)} hops of '{test}' above {threshold:g} ({worst_txt})")
    b_worst = _worst_per_hop(base_hops)
    b_max = max(b_worst.values()) if b_worst else float("nan")
    if b_worst and b_max > threshold:
        notes.append(f"the base configuration '{base}' clips too (largest fraction {b_max:.3g}): the receiver "
                     "gain is too high even without the preamp, so lower it before comparing")
    if above:
        cut = suggested_gain_reduction_db(w_val, threshold)
        findings.append(Finding(
            kind="clipping", freq_hz=w_fc, severity="problem",
            evidence={"max_clip_fraction": w_val, "threshold_fraction": threshold,
                      "hops_above_count": len(above), "hops_count": len(worst),
                      "worst_hop_center_hz": w_fc, "base_max_clip_fraction": b_max,
                      "suggested_gain_reduction_db": cut},
            advice=(f"The receiver's 8-bit converter clips in {len(above)} of {len(worst)} hops with '{test}': "
                    f"lower the receiver gain or add an attenuator by about {cut:.0f} dB (estimated from the worst "
                    "hop on a Gaussian signal model to reach a tenth of the threshold) and survey again."),
        ))
    return findings, checked, notes


# ------------------------------------------------------------------------------- IQ images
@dataclass(frozen=True)
class ImageMatch:
    """A channel explained as the IQ image of a stronger channel mirrored about its hop centre."""

    freq_hz: int
    mirror_hz: int
    center_hz: float
    rejection_db: float
    base_rejection_db: float | None
    present_in_base: bool


def find_images(base: ChannelSummary, test: ChannelSummary) -> list[ImageMatch]:
    """Channels of ``test`` that are IQ images (see the module docstring)."""
    half = raster_step_hz(test.freqs_hz) / 2.0
    s_t, s_b = test.signal_lin, base.signal_lin
    out = []
    jb_all = base.at(test.freqs_hz, 1.0)
    for j in np.flatnonzero(test.received):
        fc = test.hop_center_hz[j]
        if not np.isfinite(fc):
            continue
        k = int(test.at([2.0 * fc - test.freqs_hz[j]], half)[0])
        if k < 0 or k == j or not test.received[k] or not (s_t[k] > 0 and s_t[j] > 0):
            continue
        rej = float(_db(s_t[j] / s_t[k]))
        if rej > -IMAGE_MIN_DB:
            continue
        jb, kb = int(jb_all[j]), int(base.at([test.freqs_hz[k]], 1.0)[0])
        if jb < 0 or kb < 0:
            continue
        base_rej = float(_db(s_b[jb] / s_b[kb])) if (s_b[jb] > 0 and s_b[kb] > 0) else None
        present = bool(base.received[jb]) and base_rej is not None and abs(base_rej - rej) <= IMAGE_MATCH_DB
        unseen = (s_b[kb] > 0 and s_b[kb] * 10 ** (rej / 10.0) <= base.signal_upper_lin[jb]
                  and rej <= -IMAGE_UNSEEN_MIN_DB)
        if present or unseen:
            out.append(ImageMatch(int(test.freqs_hz[j]), int(test.freqs_hz[k]), float(fc), rej, base_rej, present))
    return out


# -------------------------------------------------------------------- intermodulation
@dataclass(frozen=True)
class RiseGroup:
    """Adjacent channels that rose more than the gain explains; ``peak`` indexes the strongest."""

    indices: tuple[int, ...]
    peak: int
    freq_hz: float
    rise_min_db: float
    expected_db: float


def _aligned(base: ChannelSummary, test: ChannelSummary):
    jb = base.at(test.freqs_hz, 1.0)
    ok = jb >= 0
    s_b = np.where(ok, base.signal_lin[np.maximum(jb, 0)], np.nan)
    up_b = np.where(ok, base.signal_upper_lin[np.maximum(jb, 0)], np.nan)
    rec_b = np.where(ok, base.received[np.maximum(jb, 0)], False)
    return s_b, up_b, rec_b


def expected_gain_db(test: ChannelSummary, base: ChannelSummary, gain: GainModel | None) -> np.ndarray:
    """Gain expected per test channel: the gain model, else the largest station gain measured."""
    f = test.freqs_hz.astype(np.float64)
    if gain is not None:
        return gain.gain_db(f)
    s_b, _, rec_b = _aligned(base, test)
    both = test.received & rec_b & (s_b > 0) & (test.signal_lin > 0)
    if both.any():
        return np.full(f.size, float(np.max(_db(test.signal_lin[both] / s_b[both]))))
    return np.full(f.size, np.nan)


def rise_groups(base: ChannelSummary, test: ChannelSummary, expected_db: np.ndarray,
                skip_hz: set[int]) -> list[RiseGroup]:
    """Groups of adjacent test channels whose rise exceeds the expected gain by 3 dB."""
    s_t = test.signal_lin
    s_b, up_b, rec_b = _aligned(base, test)
    with np.errstate(invalid="ignore", divide="ignore"):
        rise_lb = np.where(s_t > 0, _db(s_t / up_b), np.nan)
        cn_t = _db(s_t / test.noise_lin)
    exp = np.where(np.isfinite(expected_db), expected_db, -np.inf)
    flag = test.received & np.isfinite(rise_lb) & (rise_lb > exp + RISE_MARGIN_DB) & (cn_t >= CANDIDATE_MIN_CN_DB)
    flag &= ~np.isin(test.freqs_hz, list(skip_hz))
    if not np.any(np.isfinite(expected_db)):
        flag = test.received & ~rec_b & ~np.isin(test.freqs_hz, list(skip_hz)) & (cn_t >= CANDIDATE_MIN_CN_DB)
    raster = raster_step_hz(test.freqs_hz)
    groups: list[list[int]] = []
    for j in np.flatnonzero(flag):
        if groups and test.freqs_hz[j] - test.freqs_hz[groups[-1][-1]] <= raster * 1.01:
            groups[-1].append(int(j))
        else:
            groups.append([int(j)])
    out = []
    for g in groups:
        peak = max(g, key=lambda i: s_t[i])
        out.append(RiseGroup(tuple(g), peak, float(test.freqs_hz[peak]), float(rise_lb[peak]), float(expected_db[peak])))
    return out


def strong_carriers(test: ChannelSummary, exclude: set[int]) -> np.ndarray:
    """Indices of test channels that are strong carriers: received, C/N >= 10 dB, local maxima."""
    s = test.signal_lin
    with np.errstate(invalid="ignore", divide="ignore"):
        cn = _db(s / test.noise_lin)
    raster = raster_step_hz(test.freqs_hz)
    out = []
    for j in np.flatnonzero(test.received & (cn >= CARRIER_MIN_CN_DB)):
        if j in exclude:
            continue
        near = np.abs(test.freqs_hz - test.freqs_hz[j]) <= 2.01 * raster
        if s[j] >= np.nanmax(s[near]):
            out.append(int(j))
    return np.asarray(out, dtype=np.int64)


def _drop_db(test: ChannelSummary, att: ChannelSummary, j: int) -> tuple[float | None, bool]:
    """Drop of channel ``j``'s signal through the attenuator, dB, and whether it is a lower bound."""
    k = int(att.at([test.freqs_hz[j]], 1.0)[0])
    s_t = test.signal_lin[j]
    if k < 0 or not s_t > 0:
        return None, False
    if att.received[k] and att.signal_lin[k] > 0:
        return float(_db(s_t / att.signal_lin[k])), False
    return float(_db(s_t / att.signal_upper_lin[k])), True


def attenuator_law(drop_db: float | None, lower_bound: bool, attenuation_db: float) -> str:
    """``"third-order"`` (drop near 3X), ``"linear"`` (near X), ``"internal"`` (near 0) or ``"undetermined"``."""
    if drop_db is None:
        return "undetermined"
    x = attenuation_db
    if lower_bound:
        return "third-order" if drop_db > 2.0 * x else "undetermined"
    targets = {"internal": 0.0, "linear": x, "third-order": 3.0 * x}
    return min(targets, key=lambda k: abs(drop_db - targets[k]))


def check_intermodulation(base: ChannelSummary, test: ChannelSummary, gain: GainModel | None,
                          images: list[ImageMatch], *, att: ChannelSummary | None = None,
                          attenuation_db: float | None = None, lines=()):
    """Unexplained channels at ``2 f1 - f2`` of strong carriers; returns findings, checked, notes, leftovers.

    Leftovers are unexplained groups that are neither products, images nor at a spectral line
    (the channel-level evidence for an oscillation).
    """
    findings, notes = [], []
    half = raster_step_hz(test.freqs_hz) / 2.0
    image_hz = {m.freq_hz for m in images}
    for m in images:
        where = "present in base too" if m.present_in_base else "too weak to show in base"
        notes.append(f"{m.freq_hz / 1e6:.3f} MHz is the IQ image of {m.mirror_hz / 1e6:.3f} MHz about the hop centre "
                     f"{m.center_hz / 1e6:.3f} MHz ({m.rejection_db:.1f} dB below it, {where}): not intermodulation")
    exp_db = expected_gain_db(test, base, gain)
    groups = rise_groups(base, test, exp_db, image_hz)
    grouped = {i for g in groups for i in g.indices}
    image_idx = {int(i) for i in np.flatnonzero(np.isin(test.freqs_hz, list(image_hz)))}
    carriers = strong_carriers(test, grouped | image_idx)
    s_t = test.signal_lin
    s_b, _, rec_b = _aligned(base, test)
    bw = test.channel_bw_hz
    leftover: list[RiseGroup] = []
    n_im = 0
    station_drop = None
    if att is not None:
        drops = [d for d, lb in (_drop_db(test, att, int(j)) for j in carriers) if d is not None and not lb]
        station_drop = float(np.median(drops)) if drops else None
    for g in groups:
        if any(abs(ln.freq_hz - test.freqs_hz[i]) <= bw / 2.0 for ln in lines for i in g.indices):
            continue  # a narrow line from the spectra explains it (oscillation check)
        best = None
        for i in carriers:
            for j in carriers:
                if i == j:
                    continue
                f_im = 2.0 * test.freqs_hz[i] - test.freqs_hz[j]
                if abs(f_im - g.freq_hz) <= half:
                    strength = 2.0 * _db(s_t[i]) + _db(s_t[j])
                    if best is None or strength > best[0]:
                        best = (float(strength), int(i), int(j), float(f_im))
        p = g.peak
        if best is None or not s_t[p] < max(s_t[best[1]], s_t[best[2]]):
            leftover.append(g)
            continue
        _, i, j, f_im = best
        ev = {"carrier1_freq_hz": float(test.freqs_hz[i]), "carrier2_freq_hz": float(test.freqs_hz[j]),
              "carrier1_power_dbfs": float(_db(s_t[i])), "carrier2_power_dbfs": float(_db(s_t[j])),
              "product_power_dbfs": float(_db(s_t[p])), "channel_freq_hz": float(test.freqs_hz[p])}
        if rec_b[p] and s_b[p] > 0:
            ev["rise_db"] = float(_db(s_t[p] / s_b[p]))
        else:
            ev["rise_min_db"] = g.rise_min_db
        if np.isfinite(g.expected_db):
            ev["expected_linear_rise_db"] = g.expected_db
        if gain is not None:
            ev["expected_third_order_rise_db"] = float(2.0 * gain.gain_db([test.freqs_hz[i]])[0]
                                                       + gain.gain_db([test.freqs_hz[j]])[0])
        severity = "warning"
        law = "undetermined"
        if att is not None and attenuation_db is not None:
            d, lb = _drop_db(test, att, p)
            law = attenuator_law(d, lb, attenuation_db)
            ev["attenuation_db"] = float(attenuation_db)
            if d is not None:
                ev["product_drop_min_db" if lb else "product_drop_db"] = d
            if station_drop is not None:
                ev["carrier_drop_db"] = station_drop
            if law == "linear":
                notes.append(f"{g.freq_hz / 1e6:.3f} MHz rose more than the gain but drops by {d:.1f} dB through the "
                             f"{attenuation_db:g} dB attenuator like a real station: not a product")
                continue
            if law == "third-order":
                severity = "problem"
        n_im += 1
        confirm = (" The attenuator run confirms it: the product dropped about three times the attenuation."
                   if law == "third-order" else
                   " Confirm with a run through a known attenuator: a real station drops by the attenuation, "
                   "a third-order product by three times it.")
        findings.append(Finding(
            kind="intermodulation", freq_hz=f_im, severity=severity, evidence=ev,
            advice=(f"The strong carriers at {test.freqs_hz[i] / 1e6:.1f} and {test.freqs_hz[j] / 1e6:.1f} MHz mix into a "
                    f"third-order product at {f_im / 1e6:.1f} MHz: use less gain, a preamp with a higher IIP3, or a "
                    "filter that attenuates the strongest carrier." + confirm),
        ))
    checked = [f"intermodulation: {len(groups)} channel group(s) of '{test.configuration}' rose more than the preamp "
               f"gain + {RISE_MARGIN_DB:g} dB; {n_im} lie at 2f1-f2 of {len(carriers)} strong carriers; "
               f"{len(images)} IQ image(s) set aside"]
    return findings, checked, notes, leftover
