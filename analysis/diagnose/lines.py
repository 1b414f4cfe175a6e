"""Narrow lines in kept spectra, and the oscillation finding built from them.

A preamp that oscillates adds an unmodulated carrier: in an averaged periodogram (Hann window,
Welch 1967) it holds nearly all of its channel's excess power within the window's main lobe
(+-2 bins), whereas an FM broadcast station spreads its power over 150-250 kHz (Carson's rule,
``2 (75 + 53) kHz`` for full stereo). For each hop the local noise floor comes from the sweep
engine's own estimator (:func:`survey.dsp.local_noise_floor`); a *line* is a local maximum at
least 15 dB above that floor in one bin whose +-3 bins hold at least half of the excess power
in the channel bandwidth around it. Its frequency is the power-weighted centroid of +-2 bins
(bin ``fs / fft_size``, about 1.2 kHz at 2.4 MS/s and 2048 bins).

A line is an oscillation of the test chain when it is absent from the base configuration's
spectra of the same input, is not the IQ image of a stronger line in its hop, does not sit on a
station the base receives, and is not ``2 f1 - f2`` of two other narrow lines. Where no spectra
were kept, an unexplained channel rise that no product or image explains is reported with low
confidence and the channel raster's resolution.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.findings import Finding
from analysis.diagnose.data import ChannelSummary, raster_step_hz
from analysis.selection import Survey
from survey.store import HopSpectrum
from survey.units import db_to_ratio, ratio_to_db

#: A line's peak bin is at least this far above the local floor, dB.
LINE_MIN_DB = 15.0
#: Fraction of the channel's excess power that the +-3 bins around a line must hold.
LINE_CONCENTRATION = 0.5
#: Half-width of the line's power integral, bins (the Hann main lobe is +-2 bins).
LINE_HALF_BINS = 3
#: Lines closer than this are one line (across hops and sweeps), Hz.
SAME_LINE_HZ = 10_000.0
_INPUTS = ("antenna", "terminated", "noise-cold", "noise-hot")


@dataclass(frozen=True)
class Line:
    """A narrow line found in one hop's spectrum."""

    freq_hz: float
    level_dbfs: float
    above_noise_db: float
    concentration: float
    width_hz: float
    center_hz: float
    sweep_id: int
    input: str


@dataclass(frozen=True)
class LineCluster:
    """One line seen in one or more hops and sweeps of the test configuration."""

    freq_hz: float
    level_dbfs: float
    above_noise_db: float
    concentration: float
    width_hz: float
    n_sweeps: int
    inputs: tuple[str, ...]
    in_base: bool | None
    on_station: bool


@dataclass(frozen=True)
class SpectralSearch:
    """What the search of kept spectra found and covered."""

    lines: tuple[LineCluster, ...]
    n_sweeps: int
    inputs: tuple[str, ...]
    rejected: tuple[str, ...] = ()


def _hop_floor(hop: dict, sweep) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    from survey import dsp  # the engine's estimator, imported only when spectra were kept
    f = np.asarray(hop.freqs_hz, dtype=np.float64)
    off = f - hop.center_hz
    lin = np.asarray(db_to_ratio(hop.psd_dbfs_hz))
    usable = dsp.usable_bins(off, hop.sample_rate_hz, sweep.usable_fraction, sweep.dc_guard_hz)
    k_eff = dsp.welch_effective_averages(max(int(hop.n_samples), sweep.fft_size), sweep.fft_size)
    floor = dsp.local_noise_floor(off, lin, usable, effective_averages=k_eff)
    return f, lin, np.nan_to_num(floor, nan=np.inf), usable


def _line_at(f, lin, floor, usable, k: int, channel_bw_hz: float) -> tuple[float, float, float, float, float]:
    """Power (FS^2), centroid (Hz), concentration, width (Hz) and channel noise (FS^2) at bin ``k``."""
    bin_hz = float(f[1] - f[0])
    excess = np.where(usable, lin - floor, 0.0)
    lo, hi = max(k - LINE_HALF_BINS, 0), min(k + LINE_HALF_BINS + 1, f.size)
    p_line = float(np.sum(excess[lo:hi])) * bin_hz
    c_lo, c_hi = max(k - 2, 0), min(k + 3, f.size)
    w = np.maximum(excess[c_lo:c_hi], 0.0)
    centroid = float(np.sum(w * f[c_lo:c_hi]) / np.sum(w)) if np.sum(w) > 0 else float(f[k])
    half = int(round(channel_bw_hz / 2.0 / bin_hz))
    ch = slice(max(k - half, 0), min(k + half + 1, f.size))
    p_chan = float(np.sum(excess[ch])) * bin_hz
    conc = p_line / p_chan if p_chan > 0 else 0.0
    above = lin[max(k - 10, 0):k + 11] >= lin[k] / 4.0
    width = float(np.count_nonzero(above)) * bin_hz
    fin = np.isfinite(floor[ch]) & usable[ch]
    noise = float(np.mean(floor[ch][fin])) * channel_bw_hz if fin.any() else float("nan")
    return p_line, centroid, conc, width, noise


def lines_in_hop(hop: dict, sweep, channel_bw_hz: float) -> list[Line]:
    """Narrow lines of one kept hop spectrum (see the module docstring)."""
    f, lin, floor, usable = _hop_floor(hop, sweep)
    if f.size < 8:
        return []
    ratio = np.where(usable, lin / floor, 0.0)
    peak = np.zeros(f.size, bool)
    peak[1:-1] = (lin[1:-1] >= lin[:-2]) & (lin[1:-1] > lin[2:])
    cand = np.flatnonzero(peak & usable & (ratio >= 10 ** (LINE_MIN_DB / 10.0)))
    out = []
    for k in cand:
        p_line, centroid, conc, width, noise = _line_at(f, lin, floor, usable, int(k), channel_bw_hz)
        if conc < LINE_CONCENTRATION or not p_line > 0:
            continue
        out.append(Line(centroid, float(ratio_to_db(p_line)), float(ratio_to_db(p_line / noise)), conc, width,
                        float(hop.center_hz), int(sweep.id), sweep.input))
    # IQ images: a line whose mirror about the hop centre holds a line at least 15 dB stronger
    keep = []
    for ln in out:
        mirror = 2.0 * ln.center_hz - ln.freq_hz
        if any(abs(o.freq_hz - mirror) <= 2.0 * (f[1] - f[0]) and o.level_dbfs >= ln.level_dbfs + 15.0 for o in out):
            continue
        keep.append(ln)
    return keep


def _line_in_spectra(freq_hz: float, spectra: list[tuple[dict, object]], channel_bw_hz: float) -> bool:
    """True when some spectrum (usable part) shows a line within 10 kHz of ``freq_hz``."""
    for hop, sweep in spectra:
        f = np.asarray(hop.freqs_hz, dtype=np.float64)
        d = abs(freq_hz - hop.center_hz)
        if not (sweep.dc_guard_hz <= d <= sweep.usable_fraction * hop.sample_rate_hz / 2.0):
            continue
        f, lin, floor, usable = _hop_floor(hop, sweep)
        near = np.flatnonzero(np.abs(f - freq_hz) <= SAME_LINE_HZ)
        if near.size == 0:
            continue
        k = int(near[np.argmax(lin[near])])
        p_line, _, conc, _, _ = _line_at(f, lin, floor, usable, k, channel_bw_hz)
        if lin[k] >= floor[k] * 10 ** ((LINE_MIN_DB - 5.0) / 10.0) and conc >= 0.3 and p_line > 0:
            return True
    return False


def _cluster(lines: list[Line]) -> list[list[Line]]:
    groups: list[list[Line]] = []
    for ln in sorted(lines, key=lambda x: x.freq_hz):
        if groups and ln.freq_hz - groups[-1][-1].freq_hz <= SAME_LINE_HZ:
            groups[-1].append(ln)
        else:
            groups.append([ln])
    return groups


def spectral_lines(survey: Survey, base: str, test: str, base_antenna: ChannelSummary | None) -> SpectralSearch:
    """Search the kept spectra of ``test`` for narrow lines absent from ``base``."""
    found: list[Line] = []
    n_sweeps = 0
    inputs = []
    base_spectra: dict[str, list] = {}
    kept = survey.sweeps_with_spectra()  # only these sweeps have spectra to look at
    for inp in _INPUTS:
        t_rows = survey.find_sweeps(test, inp)
        t_spec = [(h, sw) for sw in t_rows if sw.id in kept for h in survey.hop_spectra(sw.id)]
        if not t_spec:
            continue
        b_rows = survey.find_sweeps(base, inp)
        base_spectra[inp] = [(h, sw) for sw in b_rows if sw.id in kept for h in survey.hop_spectra(sw.id)]
        inputs.append(inp)
        n_sweeps += len({sw.id for _, sw in t_spec})
        for h, sw in t_spec:
            found += lines_in_hop(h, sw, sw.channel_bw_hz)
    clusters = []
    rejected = []
    groups = _cluster(found)
    centres = [float(np.median([x.freq_hz for x in g])) for g in groups]
    for g, fc in zip(groups, centres):
        best = max(g, key=lambda x: x.level_dbfs)
        bw = best.width_hz
        in_base = None
        for inp in sorted({x.input for x in g}):
            if base_spectra.get(inp):
                hit = _line_in_spectra(fc, base_spectra[inp], base_spectra[inp][0][1].channel_bw_hz)
                in_base = bool(in_base) or hit
        on_station = False
        if base_antenna is not None:
            half = base_antenna.channel_bw_hz / 2.0
            near = np.abs(base_antenna.freqs_hz - fc) <= half * 0.5
            on_station = bool(np.any(base_antenna.received[near]))
        # a product of two other narrow lines (unmodulated carriers mixing)
        product = any(abs(2.0 * a - b - fc) <= 2.5e3 for a in centres for b in centres if a != fc and b != fc and a != b)
        if product:
            rejected.append(f"narrow line at {fc / 1e6:.3f} MHz is 2f1-f2 of two other narrow lines: a product")
            continue
        clusters.append(LineCluster(fc, best.level_dbfs, best.above_noise_db, best.concentration, bw,
                                    len({x.sweep_id for x in g}), tuple(sorted({x.input for x in g})),
                                    in_base, on_station))
    return SpectralSearch(tuple(clusters), n_sweeps, tuple(inputs), tuple(rejected))


def _drop(test_sum: ChannelSummary | None, att: ChannelSummary | None, freq_hz: float) -> float | None:
    if test_sum is None or att is None:
        return None
    j = int(test_sum.at([freq_hz], raster_step_hz(test_sum.freqs_hz) / 2.0)[0])
    k = int(att.at([freq_hz], raster_step_hz(att.freqs_hz) / 2.0)[0])
    if j < 0 or k < 0 or not (test_sum.signal_lin[j] > 0 and att.signal_lin[k] > 0):
        return None
    return float(ratio_to_db(test_sum.signal_lin[j] / att.signal_lin[k]))


def oscillation_findings(search: SpectralSearch, leftover, *, test: str, test_sum: ChannelSummary | None,
                         att: ChannelSummary | None = None, attenuation_db: float | None = None):
    """Oscillation findings from spectral lines, else from unexplained channels (low confidence)."""
    findings, notes = [], list(search.rejected)
    n_test_only = 0
    for ln in search.lines:
        if ln.in_base:
            notes.append(f"narrow line at {ln.freq_hz / 1e6:.3f} MHz is present in both configurations: a receiver "
                         "spur or an unmodulated carrier, not the preamp")
            continue
        if ln.on_station:
            notes.append(f"narrow line at {ln.freq_hz / 1e6:.3f} MHz sits on a station the base receives: not "
                         "called an oscillation")
            continue
        n_test_only += 1
        ev = {"line_freq_hz": ln.freq_hz, "level_dbfs": ln.level_dbfs, "above_channel_noise_db": ln.above_noise_db,
              "power_in_line_fraction": ln.concentration, "width_6db_hz": ln.width_hz,
              "freq_uncertainty_hz": 10_000.0, "sweeps_seen_count": ln.n_sweeps}
        d = _drop(test_sum, att, ln.freq_hz)
        if d is not None and attenuation_db is not None:
            ev["drop_through_attenuator_db"] = d
            ev["attenuation_db"] = float(attenuation_db)
        base_note = "" if ln.in_base is False else " (the base kept no spectra of this input to compare)"
        findings.append(Finding(
            kind="oscillation", freq_hz=float(round(ln.freq_hz)), severity="problem" if ln.in_base is False else "warning",
            evidence=ev,
            advice=(f"An unmodulated line at {ln.freq_hz / 1e6:.3f} MHz appears only with '{test}'{base_note}: the preamp "
                    "is probably oscillating; check its input and output terminations, screening and supply decoupling, "
                    "or reduce its gain."),
        ))
    if search.n_sweeps:
        checked = [f"oscillation: kept spectra of {search.n_sweeps} sweep(s) ({', '.join(search.inputs)}) searched for "
                   f"narrow lines >= {LINE_MIN_DB:g} dB above the floor; {len(search.lines)} line(s), "
                   f"{n_test_only} only with '{test}'"]
    else:
        checked = ["oscillation: no kept spectra of the test configuration; channel-level evidence only"]
    searched_antenna = "antenna" in search.inputs
    for g in leftover:
        if searched_antenna:
            notes.append(f"{g.freq_hz / 1e6:.3f} MHz rose {g.rise_min_db:.1f} dB or more (gain {g.expected_db:.1f} dB) "
                         "but is neither a product, an image nor a narrow line")
            continue
        ev = {"channel_freq_hz": g.freq_hz, "rise_min_db": g.rise_min_db, "expected_rise_db": g.expected_db,
              "freq_uncertainty_hz": raster_step_hz(test_sum.freqs_hz) / 2.0 if test_sum is not None else 50_000.0,
              "channels_count": len(g.indices)}
        if test_sum is not None:
            f_group = test_sum.freqs_hz[list(g.indices)].astype(np.float64)
            w = np.maximum(test_sum.signal_lin[list(g.indices)], 0.0)
            est = float(np.sum(w * f_group) / np.sum(w)) if np.sum(w) > 0 else g.freq_hz
            ev["level_dbfs"] = float(ratio_to_db(test_sum.signal_lin[g.peak]))
        else:
            est = g.freq_hz
        d = _drop(test_sum, att, g.freq_hz)
        if d is not None and attenuation_db is not None:
            ev["drop_through_attenuator_db"] = d
        findings.append(Finding(
            kind="oscillation", freq_hz=float(round(est)), severity="warning", evidence=ev,
            advice=(f"Power near {est / 1e6:.2f} MHz rose more than the preamp's gain explains and is no product or "
                    "image: possibly an oscillation (low confidence, channel-level only). Keep spectra in the next "
                    "survey to pin the line down to 10 kHz."),
        ))
    return findings, checked, notes
