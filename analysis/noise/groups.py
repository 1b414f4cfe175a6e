"""Read helpers for the analysis side: per-channel averages of sweep groups, with their errors.

A *group* is every complete sweep of one (configuration, input). :func:`read_input_groups`
reads them through :mod:`survey.store`'s read helpers and averages in linear power:

* the noise estimate is the channel power ``P`` for noise-only inputs (terminated, noise-hot,
  noise-cold: all power in the channel is noise) and the local floor ``N`` for antenna sweeps;
* its relative standard error is the spread across sweeps (three or more; variances pooled
  over five neighbouring channels) or else the radiometer equation ``1/sqrt(B tau)`` per
  sweep (Dicke 1946);
* for antenna sweeps also the station signal ``P - N`` where received, and which channels a
  station occupies.

Every group holds one receiver gain and channel bandwidth, or :class:`MismatchError` says so.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

import analysis.noise.arithmetic as nz
from analysis.errors import MismatchError, NoDataError
from analysis.selection import Survey, as_survey
from survey.store import SweepRow
from survey.units import db_to_ratio, ratio_to_db

#: Inputs whose sweeps carry noise measurements.
NOISE_INPUTS = ("antenna", "terminated", "noise-hot", "noise-cold")


@dataclass(frozen=True)
class InputGroup:
    """Averaged noise readings of one (configuration, input) on the common frequency axis."""

    configuration: str
    input: str
    sweeps: tuple[SweepRow, ...]
    mean_lin: np.ndarray  # the noise estimate (P or N, see module docstring), linear full scale
    sigma_rel: np.ndarray  # relative standard error of mean_lin
    signal_lin: np.ndarray  # mean of P - N over sweeps where received (antenna only), else NaN
    signal_sigma_rel: np.ndarray
    occupied: np.ndarray  # received in at least half of the sweeps
    empirical: bool
    floor_offset_db: np.ndarray  # antenna: 10 log10(mean P / mean N) on unoccupied channels
    max_clip_fraction: float | None = None

    @property
    def name(self) -> str:
        """Label and input, for messages."""
        return f"'{self.configuration}' {self.input}"

    @property
    def gain_db(self) -> float | None:
        """Receiver gain setting of the group's sweeps, dB (None: not recorded)."""
        return self.sweeps[0].gain_db

    @property
    def channel_bw_hz(self) -> float:
        """Channel integration bandwidth of the group's sweeps, Hz."""
        return self.sweeps[0].channel_bw_hz


def _fmt_gain(g: float | None) -> str:
    return "automatic/unrecorded" if g is None else f"{g:g} dB"


def pooled_sigma(sigma: np.ndarray, width: int = 5) -> np.ndarray:
    """Pool relative standard errors over ``width`` neighbouring channels (RMS, NaN skipped).

    With a handful of sweeps one channel's spread is itself uncertain (3 sweeps: 2 degrees of
    freedom); neighbouring channels share the same radiometer statistics, so pooling their
    variances gives ``width`` times the degrees of freedom. NaN where no neighbour is finite.
    """
    s2 = np.where(np.isfinite(sigma), np.asarray(sigma, dtype=np.float64) ** 2, 0.0)
    ok = np.isfinite(sigma).astype(np.float64)
    kernel = np.ones(width)
    num = np.convolve(s2, kernel, mode="same")
    den = np.convolve(ok, kernel, mode="same")
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, np.sqrt(num / np.maximum(den, 1e-300)), np.nan)


def _make_group(cfg: str, inp: str, sweeps: list[SweepRow], power_dbfs: np.ndarray, noise_dbfs: np.ndarray,
                received: np.ndarray) -> InputGroup:
    gains = {s.gain_db for s in sweeps}
    bws = {s.channel_bw_hz for s in sweeps}
    if len(gains) > 1 or len(bws) > 1:
        raise MismatchError(
            f"sweeps of '{cfg}' {inp} were taken at receiver gains {sorted(map(_fmt_gain, gains))} and channel "
            f"bandwidths {sorted(bws)} Hz; noise ratios need one setting: keep one gain and bandwidth per "
            "configuration (relabel or remove the other sweeps)"
        )
    p = db_to_ratio(power_dbfs.astype(np.float64))
    n = db_to_ratio(noise_dbfs.astype(np.float64))
    est = n if inp == "antenna" else p
    mean, emp = nz.mean_and_sigma_rel(est, axis=0)
    count = np.sum(np.isfinite(est), axis=0)
    rad = nz.radiometer_sigma_rel(sweeps[0].channel_bw_hz, sweeps[0].dwell_s)
    empirical = len(sweeps) >= 3
    sigma = pooled_sigma(emp) if empirical else rad / np.sqrt(np.maximum(count, 1))
    sig_mean = np.full(mean.shape, np.nan)
    sig_sigma = np.full(mean.shape, np.nan)
    occupied = np.zeros(mean.shape, bool)
    floor_offset = np.full(mean.shape, np.nan)
    if inp == "antenna":
        occupied = received.mean(axis=0) >= 0.5
        sig = np.where(received, p - n, np.nan)
        sig_mean, sig_emp = nz.mean_and_sigma_rel(sig, axis=0)
        k = np.sum(np.isfinite(sig), axis=0)
        # radiometer error of P - N: independent errors of P and N, each 1/sqrt(B tau) relative
        pn2, _ = nz.mean_and_sigma_rel(np.where(received, p**2 + n**2, np.nan), axis=0)
        sig_rad = rad * np.sqrt(pn2) / sig_mean / np.sqrt(np.maximum(k, 1))
        sig_sigma = np.where(k >= 3, sig_emp, sig_rad)
        sig_mean = np.where(occupied, sig_mean, np.nan)
        p_mean, _ = nz.mean_and_sigma_rel(p, axis=0)
        floor_offset = np.where(occupied, np.nan, ratio_to_db(p_mean / mean))
    return InputGroup(cfg, inp, tuple(sweeps), mean, sigma, sig_mean, sig_sigma, occupied, empirical, floor_offset)


def read_input_groups(
    source: Survey | str | Path, labels: list[str], inputs: tuple[str, ...] = NOISE_INPUTS
) -> tuple[np.ndarray, dict[tuple[str, str], InputGroup]]:
    """Average every complete sweep of each (label, input) present, on one frequency axis.

    Returns ``(freqs_hz, groups)`` with ``groups[(label, input)]`` an :class:`InputGroup`.
    Raises :class:`NoDataError` (naming the labels present) when a label has no such sweeps,
    :class:`MismatchError` when one group mixes receiver gains or channel bandwidths, and
    ``StoreError`` when the database cannot be read.
    """
    survey, opened = as_survey(source)
    try:
        found: dict[tuple[str, str], list[SweepRow]] = {}
        for cfg in labels:
            for inp in inputs:
                rows = survey.find_sweeps(cfg, inp)
                if rows:
                    found[(cfg, inp)] = list(rows)
        missing = [cfg for cfg in labels if not any(k[0] == cfg for k in found)]
        if missing:
            raise NoDataError(
                f"no complete antenna, terminated or noise-source sweeps of configuration "
                f"{', '.join(repr(m) for m in missing)} in {survey.db_path}; it holds: {survey.present()}"
            )
        every = [s for rows in found.values() for s in rows]
        matrix = survey.channel_matrix(every)
        clip: dict[int, float] = {}
        for h in survey.hops([s.id for s in every]):
            if h.clip_fraction is not None:
                clip[h.sweep_id] = max(clip.get(h.sweep_id, 0.0), float(h.clip_fraction))
    finally:
        if opened:
            survey.close()
    groups, row = {}, 0
    with np.errstate(invalid="ignore", divide="ignore"):
        for key, rows in found.items():
            sl = slice(row, row + len(rows))
            grp = _make_group(*key, rows, matrix.power_dbfs[sl], matrix.noise_dbfs[sl], matrix.received[sl])
            clips = [clip[s.id] for s in rows if s.id in clip]
            groups[key] = replace(grp, max_clip_fraction=max(clips) if clips else None)
            row += len(rows)
    return matrix.freqs_hz.astype(np.int64), groups


def check_same_setting(a: InputGroup, b: InputGroup, why: str) -> None:
    """Refuse to divide readings of two groups taken at another bandwidth or receiver gain.

    ``why`` names the ratio that needs them equal; :class:`MismatchError` names the remedy.
    """
    if a.channel_bw_hz != b.channel_bw_hz:
        raise MismatchError(
            f"{a.name} used a {a.channel_bw_hz:g} Hz channel bandwidth but {b.name} {b.channel_bw_hz:g} Hz; "
            f"{why} needs the same bandwidth: re-measure one of them with the other's bandwidth"
        )
    if a.gain_db != b.gain_db:
        raise MismatchError(
            f"{a.name} used receiver gain {_fmt_gain(a.gain_db)} but {b.name} {_fmt_gain(b.gain_db)}; "
            f"{why} needs the same fixed receiver gain: repeat one run at the other's gain"
        )
