"""Physics checks between analyses: the C/N ceiling set by outside noise, the predicted noise rise,
and the noise-temperature split, applied to a comparison.

With antenna temperature ``Ta``, receiver noise temperature ``Tr`` and a preamp of gain ``G``
and noise temperature ``Tp`` (Friis 1944, cascade form):

* the C/N change a preamp gives is ``(Ta + Tr) / (Ta + Tp + Tr / G)``;
* no preamp (``Tp = 0``, ``G -> inf``) can do better than ``(Ta + Tr) / Ta``: the ceiling set
  by the outside noise.

A measured change whose whole interval lies above the ceiling is physically impossible: it is
a measurement problem (the floor under a strong station mis-measured, a configuration's label
swapped, overload changing with time), reported as a ``measurement`` finding.
"""

from __future__ import annotations

import numpy as np

from analysis.findings import Finding
from analysis.noise.workflow import NoiseResult, predicted_noise_rise_db
from analysis.errors import AnalysisError
from survey.units import ratio_to_db


def _interp(result: NoiseResult, key: str, f: np.ndarray) -> np.ndarray:
    y = result.column(key)
    ok = np.isfinite(y)
    if not ok.any():
        return np.full(f.size, np.nan)
    x = result.freqs_hz[ok].astype(np.float64)
    return np.interp(f, x, y[ok])


def ceiling_db(antenna_temp_k, receiver_temp_k) -> np.ndarray:
    """Largest C/N change any preamp can give, ``10 log10((Ta + Tr) / Ta)`` dB."""
    ta = np.asarray(antenna_temp_k, np.float64)
    tr = np.asarray(receiver_temp_k, np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.asarray(ratio_to_db((ta + tr) / ta))


def expected_change_db(antenna_temp_k, receiver_temp_k, preamp_temp_k, gain_db) -> np.ndarray:
    """C/N change of a preamp, ``10 log10((Ta + Tr) / (Ta + Tp + Tr / G))`` dB (DESIGN.md, Friis)."""
    ta, tr, tp = (np.asarray(v, np.float64) for v in (antenna_temp_k, receiver_temp_k, preamp_temp_k))
    g = np.power(10.0, np.asarray(gain_db, np.float64) / 10.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.asarray(ratio_to_db((ta + tr) / (ta + tp + tr / g)))


def ceiling_checks(result, noise: NoiseResult | None) -> tuple[dict, list[Finding]]:
    """The ceiling per compared item and a finding for each change above it by more than its interval.

    Returns ``(ceiling, findings)``; ``ceiling`` is ``{"available": False, "reason": ...}``
    without a measured receiver and antenna temperature.
    """
    if noise is None:
        return {"available": False, "reason": "no noise-figure runs"}, []
    ta_med = noise.summary.get("antenna_temp_k")
    f = np.asarray([c.freq_hz for c in result.items], np.float64)
    tr = _interp(noise, "receiver_temp_k", f)
    if ta_med is None or not np.isfinite(tr).any():
        return {"available": False, "reason": "the antenna or receiver noise temperature was not measured "
                "(needs antenna and terminated sweeps of the receiver alone, and a noise source or NF)"}, []
    ta = np.full(f.size, float(ta_med))
    ceil = ceiling_db(ta, tr)
    expected = expected_change_db(ta, tr, _interp(noise, "preamp_temp_k", f), _interp(noise, "preamp_gain_db", f))
    findings = []
    for c, cap in zip(result.items, ceil):
        if c.ci_low_db is not None and np.isfinite(cap) and c.ci_low_db > cap:
            findings.append(Finding(
                kind="measurement", freq_hz=float(c.freq_hz), severity="problem",
                evidence={"delta_cn_db": c.delta_cn_db, "ci_low_db": c.ci_low_db, "ceiling_db": float(cap)},
                advice=(f"a C/N gain of {c.delta_cn_db:+.1f} dB (interval from {c.ci_low_db:+.1f} dB) exceeds the "
                        f"{cap:.1f} dB the outside noise allows any preamp here: a measurement problem (floor "
                        "under a strong station, swapped labels, overload); check it before believing it"),
            ))
    finite = np.isfinite(ceil)
    return {
        "available": True,
        "antenna_temp_k": float(ta_med),
        "receiver_temp_k": float(np.nanmedian(tr)),
        "any_preamp_max_db": float(np.median(ceil[finite])) if finite.any() else None,
        "this_preamp_expected_db": (float(np.nanmedian(expected)) if np.isfinite(expected).any() else None),
        "per_item": [{"freq_hz": int(fq), "ceiling_db": float(cp) if np.isfinite(cp) else None,
                      "expected_db": float(ex) if np.isfinite(ex) else None}
                     for fq, cp, ex in zip(f, ceil, expected)],
        "formula": "ceiling (Ta + Tr) / Ta; this preamp (Ta + Tr) / (Ta + Tp + Tr / G) (Friis 1944)",
    }, findings


def predicted_noise_rise_note(noise: NoiseResult, result) -> dict | str:
    """Noise rise the measured preamp predicts beside the measured one, on items neither detected
    (raster channels) or on every item compared. A measured rise more than 1 dB (common
    practice, no source) above the prediction points at noise the preamp's own NF does not
    explain."""
    freqs = np.asarray([c.freq_hz for c in result.items], np.float64)
    try:
        predicted = np.asarray(predicted_noise_rise_db(noise, freqs), np.float64)
    except AnalysisError as exc:
        return f"not available: {exc}"
    measured = np.asarray([np.nan if c.noise_rise_db is None else c.noise_rise_db for c in result.items])
    ok = np.isfinite(predicted) & np.isfinite(measured)
    if not ok.any():
        return "not available: the noise-figure runs cover none of the items compared"
    pred, meas = float(np.median(predicted[ok])), float(np.median(measured[ok]))
    excess = meas - pred
    if excess > 1.0:
        note = (f"the floor rose {excess:.1f} dB more than the preamp's measured noise figure predicts: noise "
                "from outside the preamp's own noise (supply, oscillation, interference or overload)")
    elif excess < -1.0:
        note = (f"the floor rose {-excess:.1f} dB less than predicted: check the noise-figure runs "
                "(ENR, gain setting) and the antenna temperature assumed")
    else:
        note = "the measured noise rise agrees with the preamp's own noise within 1 dB"
    return {"median_predicted_db": pred, "median_measured_db": meas, "excess_db": excess,
            "items": int(ok.sum()), "note": note}


def noise_split_note(noise: NoiseResult | None, ceiling: dict | None = None) -> str:
    """Which noise dominates at this site, from the measured temperatures (empty without them).

    With ``ceiling`` (from :func:`ceiling_checks`) the receiver temperature is its median at the
    items compared, so that this note and the ceiling headline state the same numbers.
    """
    if noise is None:
        return ""
    s = noise.summary
    ta, tr = s.get("antenna_temp_k"), None
    tr_col = noise.column("receiver_temp_k")
    if ceiling and ceiling.get("available") and np.isfinite(ceiling.get("receiver_temp_k", np.nan)):
        ta, tr = ceiling["antenna_temp_k"], float(ceiling["receiver_temp_k"])
    elif np.isfinite(tr_col).any():
        tr = float(np.nanmedian(tr_col))
    if ta is None or tr is None:
        return ""
    share = ta / (ta + tr)
    cap = float(ratio_to_db((ta + tr) / ta))
    if ceiling and ceiling.get("available") and ceiling.get("any_preamp_max_db") is not None:
        cap = float(ceiling["any_preamp_max_db"])  # the same figure as the ceiling headline
    if share >= 0.5:
        return (f"outside noise {ta:.0f} K against the receiver's {tr:.0f} K: outside noise is "
                f"{100 * share:.0f} % of the total, so a preamp can add at most {cap:.1f} dB of C/N here")
    return (f"outside noise {ta:.0f} K against the receiver's {tr:.0f} K: the receiver's own noise dominates "
            f"({100 * (1 - share):.0f} %), so a good preamp can add up to {cap:.1f} dB")
