"""Noise-figure workflows on a survey database: Y-factor, terminated input, outside noise.

Given the label of the receiver-alone configuration (``receiver``, e.g. ``bare``) and of the
preamp-plus-receiver configuration (``system``), :func:`analyse_noise` uses whichever sweep
inputs exist (``noise-hot``/``noise-cold``, ``terminated``, ``antenna``) and returns, per
channel, the receiver and system noise figures, the preamp gain and noise figure with their
uncertainty, the antenna (outside) noise temperature and ``Fa`` beside ITU-R P.372, and the
assumptions every number rests on, each with the run that would remove it.

Noise estimates: for noise-only inputs (terminated, hot, cold) the channel power ``P`` (all
noise in the channel bandwidth); for antenna sweeps the local floor ``N``. Repeated sweeps are
averaged in linear power; the standard error comes from their spread (three or more sweeps)
or else from the radiometer equation ``1/sqrt(B tau)`` (Dicke 1946).

Physics (Friis 1944; Y-factor method, IEEE Std 161 definitions), with the receiver's unknown
conversion factor cancelling in every ratio taken at one receiver gain setting:
antenna ``N ~ Ta + Tr``; through the preamp ``N ~ G (Ta + Tp) + Tr``; terminated at ``Tamb``
likewise. ``Tamb`` (the termination and the noise source when off) is ``cold_k``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
from numpy.typing import ArrayLike

from analysis.errors import BadParameterError, MissingInputError
import analysis.noise.arithmetic as nz
import analysis.noise.outside as p372
from analysis.noise.groups import check_same_setting, read_input_groups
from analysis.selection import Survey
from survey.units import T0_K, db_to_ratio, k_to_nf_db, nf_db_to_k, ratio_to_db

#: Summary medians are taken over channels whose gain is within this of the passband peak, dB.
PEAK_REGION_DB = 1.0
#: Fraction of 8-bit samples at the rails above which a run's noise powers are flagged as compressed.
CLIP_WARN_FRACTION = 1e-3
Values = dict[str, np.ndarray]


def _median(x: np.ndarray, mask: np.ndarray | None = None) -> float | None:
    x = np.asarray(x, dtype=np.float64)
    if mask is not None:
        x = x[mask]
    x = x[np.isfinite(x)]
    return float(np.median(x)) if x.size else None


def _running_median(x: np.ndarray, width: int = 5) -> np.ndarray:
    out = np.full(x.shape, np.nan)
    half = width // 2
    for i in range(x.size):
        w = x[max(0, i - half): i + half + 1]
        w = w[np.isfinite(w)]
        if w.size and np.isfinite(x[i]):
            out[i] = np.median(w)
    return out


@dataclass(frozen=True)
class NoiseResult:
    """Per-channel noise results of one receiver / system pair.

    ``columns`` maps each point key (see :data:`POINT_KEYS`) to an array on ``freqs_hz``
    (NaN where a workflow could not fill it); ``summary`` holds medians near the passband
    peak and site-level conclusions; ``assumptions`` the assumptions with their remedies;
    ``workflows`` the workflows that produced numbers.
    """

    receiver: str
    system: str | None
    freqs_hz: np.ndarray
    columns: dict[str, np.ndarray] = field(repr=False)
    summary: dict = field(default_factory=dict)
    assumptions: tuple[str, ...] = ()
    workflows: tuple[str, ...] = ()

    def column(self, key: str) -> np.ndarray:
        """One per-channel column (see :data:`POINT_KEYS`)."""
        return self.columns[key]

    def to_dict(self) -> dict:
        """JSON-ready dict: receiver, system, points, summary, assumptions, workflows (NaN -> None)."""

        def val(key: str, i: int):
            v = self.columns[key][i]
            if key == "occupied":
                return None if not np.isfinite(v) else bool(v)
            return float(v) if np.isfinite(v) else None

        points = [
            {"freq_hz": int(f), **{k: val(k, i) for k in POINT_KEYS[1:]}} for i, f in enumerate(self.freqs_hz)
        ]
        return {
            "receiver": self.receiver,
            "system": self.system,
            "points": points,
            "summary": dict(self.summary),
            "assumptions": list(self.assumptions),
            "workflows": list(self.workflows),
        }


#: Keys of every point of :meth:`NoiseResult.to_dict` (units in the names).
POINT_KEYS = (
    "freq_hz", "enr_db",
    "receiver_nf_db", "receiver_nf_uncertainty_db", "receiver_temp_k",
    "system_nf_db", "system_temp_k",
    "preamp_gain_db", "preamp_gain_uncertainty_db", "preamp_gain_stations_db",
    "preamp_nf_db", "preamp_nf_uncertainty_db", "preamp_temp_k",
    "preamp_nf_y_factor_db", "preamp_nf_terminated_db", "preamp_nf_terminated_uncertainty_db",
    "antenna_temp_k", "outside_fa_db", "outside_fa_uncertainty_db", "antenna_temp_via_system_k",
    "occupied", "max_improvement_db", "predicted_benefit_db", "projected_benefit_db",
)


def analyse_noise(
    source: "Survey | str | Path",
    receiver: str,
    system: str | None = None,
    *,
    enr_db: float | None = None,
    enr_table: nz.EnrTable | None = None,
    enr_uncertainty_db: float = 0.2,
    cold_k: float = 290.0,
    receiver_nf_db: float | None = None,
    for_receiver_nf_db: float | None = None,
) -> NoiseResult:
    """Run every noise workflow the database supports for ``receiver`` and ``system``.

    Parameters
    ----------
    source : Survey or path
        The survey (or its database file).
    receiver, system : str
        Configuration labels of the receiver alone and of preamp + receiver (``system`` may
        be None for receiver-only workflows).
    enr_db, enr_table
        Noise source ENR (dB): flat, or an :class:`~analysis.noise.arithmetic.EnrTable` (not both);
        needed when noise-hot/noise-cold sweeps are used.
    enr_uncertainty_db : float
        Standard uncertainty of the ENR, dB (fully correlated across the band).
    cold_k : float
        Physical temperature of the noise source when off and of the termination, K.
    receiver_nf_db : float, optional
        Assumed receiver noise figure, dB, used only where it is not measured.
    for_receiver_nf_db : float, optional
        Noise figure of another receiver to project the preamp's benefit onto, dB.

    Raises
    ------
    NoDataError, MissingInputError, MismatchError, BadParameterError
        With the missing run or the remedy named.

    References
    ----------
    Friis (1944); Y-factor method, IEEE Std 161 definitions; ITU-R P.372; Dicke (1946).
    """
    if enr_db is not None and enr_table is not None:
        raise BadParameterError("give the ENR either flat (--enr-db) or as a table (--enr-table), not both")
    if not (cold_k > 0):
        raise BadParameterError(f"cold temperature must be positive kelvin, got {cold_k}")
    if enr_uncertainty_db < 0:
        raise BadParameterError("ENR uncertainty must be zero or positive (dB)")
    if system is not None and system == receiver:
        raise BadParameterError(
            f"receiver and system are both '{receiver}'; give the label of the preamp configuration as the system"
        )
    labels = [receiver] + ([system] if system else [])
    freqs, groups = read_input_groups(source, labels)
    m = freqs.size
    nan = np.full(m, np.nan)
    g = {(("rx" if c == receiver else "sys"), i): grp for (c, i), grp in groups.items()}
    assumptions: list[str] = []
    workflows: list[str] = []
    vals: Values = {}
    sigs: Values = {}
    names = {"antenna": "ant", "terminated": "term", "noise-hot": "hot", "noise-cold": "cold"}
    for (who, inp), grp in g.items():
        key = f"n_{who}_{names[inp]}"
        vals[key], sigs[key] = grp.mean_lin, grp.sigma_rel * grp.mean_lin

    # -- Y-factor inputs ---------------------------------------------------------------------
    y_ok = {}
    for who, label in (("rx", receiver), ("sys", system)):
        hot, cold = g.get((who, "noise-hot")), g.get((who, "noise-cold"))
        if (hot is None) != (cold is None):
            have, lack = ("noise-hot", "noise-cold") if cold is None else ("noise-cold", "noise-hot")
            raise MissingInputError(
                f"configuration '{label}' has {have} sweeps but no {lack} sweeps; a Y-factor needs both: "
                f"record {lack} sweeps of '{label}' at the same receiver gain"
            )
        if hot is not None:
            check_same_setting(hot, cold, "a Y-factor")
            y_ok[who] = True
    if y_ok and enr_db is None and enr_table is None:
        # partial inputs give what they can: the terminated and outside-noise parts go on
        assumptions.append(
            "noise-hot/noise-cold sweeps are present but the noise source's excess noise ratio was not given, so "
            "the Y-factor parts were skipped: give --enr-db (flat) or --enr-table (CSV freq_mhz,enr_db)"
        )
        y_ok = {}
        g = {k: v for k, v in g.items() if k[1] not in ("noise-hot", "noise-cold")}
    if y_ok:
        vals["enr"] = np.full(m, float(enr_db)) if enr_table is None else enr_table.at(freqs)
        sigs["enr"] = np.full(m, float(enr_uncertainty_db))
        src = f"flat {enr_db:g} dB" if enr_table is None else f"table {enr_table.source}"
        assumptions.append(
            f"noise source ENR from the {src}, standard uncertainty {enr_uncertainty_db:g} dB (the user's "
            "figure); off state and termination at the physical temperature "
            f"{cold_k:g} K: measure that temperature and pass --cold-k"
        )
    if len(y_ok) == 2:
        check_same_setting(g[("rx", "noise-hot")], g[("sys", "noise-hot")], "the hot-minus-cold gain")
    for grp in g.values():
        if grp.gain_db is None:
            assumptions.append(
                f"receiver gain of {grp.name} not recorded: assumed fixed and equal across runs; "
                "scan with a fixed --gain so that this can be checked"
            )
            break
    for grp in g.values():
        if grp.max_clip_fraction is not None and grp.max_clip_fraction > CLIP_WARN_FRACTION:
            assumptions.append(
                f"{grp.name} clipped ({100 * grp.max_clip_fraction:.2g} % of samples at the rails in its worst "
                "hop): its noise powers are compressed and the numbers using it are biased; repeat it at a lower "
                "receiver gain (and repeat its paired runs at the same gain)"
            )
    if len(g) > 1:
        assumptions.append(
            "the receiver's conversion gain stayed the same across the runs that are divided (same gain "
            "setting, warmed up, steady temperature): interleave the runs and repeat the first at the end to "
            "see any drift"
        )
    if g and not all(grp.empirical for grp in g.values()):
        assumptions.append(
            "runs with fewer than three sweeps: their statistical uncertainty comes from the radiometer "
            "equation 1/sqrt(B tau) (Dicke 1946), which excludes drift; record three or more sweeps of each input"
        )

    def t_hot(v: Values) -> np.ndarray:
        return np.asarray(nz.enr_db_to_hot_k(v["enr"]))

    def y_temp(who: str) -> Callable[[Values], np.ndarray]:
        return lambda v: np.asarray(
            nz.y_factor_temperature_k(v[f"n_{who}_hot"] / v[f"n_{who}_cold"], t_hot(v), cold_k)
        )

    # -- receiver temperature: measured or assumed -------------------------------------------
    rx_temp: Callable[[Values], np.ndarray] | None = None
    rx_method = None
    if "rx" in y_ok:
        rx_temp, rx_method = y_temp("rx"), "y-factor"
        workflows.append("y-factor receiver")
        if receiver_nf_db is not None:
            assumptions.append(
                f"receiver NF measured by Y-factor; the given --receiver-nf-db {receiver_nf_db:g} was not used"
            )
    elif receiver_nf_db is not None:
        tr_assumed = float(nf_db_to_k(receiver_nf_db))
        rx_temp, rx_method = (lambda v: np.full(m, tr_assumed)), "assumed"
        assumptions.append(
            f"receiver NF {receiver_nf_db:g} dB assumed (--receiver-nf-db), flat across the band, its error "
            f"not in the uncertainties: record noise-hot and noise-cold sweeps of '{receiver}' to measure it"
        )
    sys_temp = y_temp("sys") if "sys" in y_ok else None
    if sys_temp is not None:
        workflows.append("y-factor system")

    # -- preamp gain: hot-minus-cold, or stations --------------------------------------------
    gain: Callable[[Values], np.ndarray] | None = None
    gain_method = None
    gain_stations = nan.copy()
    ant_rx, ant_sys = g.get(("rx", "antenna")), g.get(("sys", "antenna"))
    if ant_rx is not None and ant_sys is not None:
        check_same_setting(ant_rx, ant_sys, "the gain from stations")
        with np.errstate(invalid="ignore", divide="ignore"):
            gs = ant_sys.signal_lin / ant_rx.signal_lin
            gs_sig = np.sqrt(ant_sys.signal_sigma_rel**2 + ant_rx.signal_sigma_rel**2)
        good = np.isfinite(gs) & (gs > 0) & np.isfinite(gs_sig)
        gain_stations = np.where(good, ratio_to_db(np.where(good, gs, 1.0)), np.nan)
        if np.count_nonzero(good) >= 2 and len(y_ok) < 2:
            st_f = freqs[good].astype(float)
            inside = (freqs >= st_f[0]) & (freqs <= st_f[-1])
            if np.count_nonzero(good) >= 4:  # smooth passband: shape-preserving cubic in dB
                from scipy.interpolate import PchipInterpolator  # imported only here
                g_i = PchipInterpolator(st_f, gain_stations[good], extrapolate=False)(freqs.astype(float))
            else:
                g_i = np.interp(freqs, st_f, gain_stations[good])
            vals["g_st"] = np.where(inside, db_to_ratio(g_i), np.nan)
            sigs["g_st"] = np.where(inside, np.interp(freqs, st_f, gs_sig[good]), np.nan) * vals["g_st"]
            gain, gain_method = (lambda v: v["g_st"]), "stations"
            workflows.append("station gain")
            assumptions.append(
                f"preamp gain from {np.count_nonzero(good)} stations received in both configurations "
                "(ratio of P - N), interpolated between them (monotone cubic in dB) and undefined beyond "
                "the outermost; assumes the stations' levels did not change between the runs: record "
                "noise-hot/noise-cold sweeps of both configurations for a gain at every channel"
            )
    if len(y_ok) == 2:
        def gain(v: Values) -> np.ndarray:
            return np.asarray(nz.gain_from_hot_cold(v["n_sys_hot"], v["n_sys_cold"], v["n_rx_hot"], v["n_rx_cold"]))

        gain_method = "y-factor"
        workflows.append("hot-minus-cold gain")

    # -- preamp temperature: second-stage correction and terminated ratio --------------------
    tp_y = None
    if sys_temp is not None and rx_temp is not None and gain is not None:
        tp_y = lambda v: np.asarray(nz.second_stage_correction_k(sys_temp(v), rx_temp(v), gain(v)))  # noqa: E731
        workflows.append("second-stage correction")
    tp_term = None
    term_rx, term_sys = g.get(("rx", "terminated")), g.get(("sys", "terminated"))
    if term_rx is not None and term_sys is not None and system:
        check_same_setting(term_rx, term_sys, "the terminated-input ratio")
        if gain is not None and rx_temp is not None:
            tp_term = lambda v: np.asarray(nz.preamp_temp_from_terminated_k(  # noqa: E731
                v["n_sys_term"] / v["n_rx_term"], gain(v), cold_k, rx_temp(v)))
            workflows.append("terminated")
            assumptions.append(
                f"terminated runs: the load at {cold_k:g} K (--cold-k) and matched like the antenna; "
                "preamp NF from N_sys/N_rx = (G (Tamb + Tp) + Tr)/(Tamb + Tr)"
            )
        else:
            lack = [w for w, ok in (("the preamp gain (noise-hot/noise-cold sweeps of both configurations, "
                                     "or antenna sweeps with stations in both)", gain is not None),
                                    ("the receiver NF (noise-hot/noise-cold sweeps of "
                                     f"'{receiver}', or --receiver-nf-db)", rx_temp is not None)) if not ok]
            assumptions.append("terminated runs present but the preamp NF from them needs " + " and ".join(lack))
    if system and tp_y is None and tp_term is None:
        assumptions.append(
            f"no preamp NF: record noise-hot and noise-cold sweeps of '{receiver}' and '{system}' "
            "(Y-factor), or terminated sweeps of both plus a gain and receiver NF"
        )
    tp = tp_y or tp_term
    nf_method = "y-factor" if tp_y is not None else ("terminated" if tp_term is not None else None)

    # -- outside noise -------------------------------------------------------------------------
    ta = None
    if ant_rx is not None and term_rx is not None:
        check_same_setting(ant_rx, term_rx, "the antenna-to-terminated ratio")
        if rx_temp is not None:
            def ta(v: Values) -> np.ndarray:
                return np.asarray(nz.antenna_temp_from_ratio_k(v["n_rx_ant"] / v["n_rx_term"], cold_k, rx_temp(v)))

            workflows.append("outside noise")
            assumptions.append(
                "antenna noise from the local floor (N) of antenna sweeps against the channel power of "
                "terminated sweeps; the floor estimator's bias enters Ta directly (see "
                "floor_vs_power_offset_db); summary values use channels no station occupies"
            )
        else:
            assumptions.append(
                f"no outside noise: Ta needs the receiver NF: record noise-hot/noise-cold sweeps of '{receiver}' "
                "or give --receiver-nf-db"
            )
    elif ant_rx is not None or term_rx is not None:
        lack = "terminated" if term_rx is None else "antenna"
        assumptions.append(f"no outside noise: record {lack} sweeps of '{receiver}' beside its "
                           f"{'antenna' if lack == 'terminated' else 'terminated'} sweeps")
    ta_sys = None
    term_sys_g = g.get(("sys", "terminated"))
    if ta is not None and ant_sys is not None and term_sys_g is not None and tp is not None and gain is not None:
        check_same_setting(ant_sys, term_sys_g, "the antenna-to-terminated ratio")
        ta_sys = lambda v: np.asarray(nz.antenna_temp_through_preamp_k(  # noqa: E731
            v["n_sys_ant"] / v["n_sys_term"], gain(v), tp(v), cold_k, rx_temp(v)))
        workflows.append("outside noise via system")

    if not workflows:
        present = sorted(f"'{c}' {i}" for c, i in groups)
        raise MissingInputError(
            f"nothing to compute from {', '.join(present)}: the noise analysis needs noise-hot + noise-cold "
            f"sweeps (Y-factor), terminated sweeps of '{receiver}' and the system plus a gain and receiver NF, "
            f"or antenna + terminated sweeps of '{receiver}' with a receiver NF (measured or --receiver-nf-db)"
        )

    # -- evaluate and propagate ---------------------------------------------------------------
    clean_sigs = {k: np.nan_to_num(v) for k, v in sigs.items()}

    def ev(fn: Callable[[Values], np.ndarray] | None, unit: str = "k") -> tuple[np.ndarray, np.ndarray]:
        """Value and standard uncertainty of ``fn`` (K), or of its NF (``"nf"``) or dB (``"db"``)."""
        if fn is None:
            return nan.copy(), nan.copy()
        convert = {"k": np.asarray, "nf": k_to_nf_db, "db": ratio_to_db}[unit]
        model = lambda v: np.asarray(convert(fn(v)), dtype=np.float64)  # noqa: E731
        with np.errstate(invalid="ignore", divide="ignore"):
            value = model(vals)
            unc = nz.propagate_linear(model, vals, clean_sigs)
        return value, np.where(np.isfinite(value), unc, np.nan)

    with np.errstate(invalid="ignore", divide="ignore"):
        col: dict[str, np.ndarray] = {"enr_db": vals.get("enr", nan.copy())}
        col["receiver_temp_k"] = ev(rx_temp)[0]
        col["receiver_nf_db"], col["receiver_nf_uncertainty_db"] = ev(rx_temp, "nf")
        if rx_method == "assumed":
            col["receiver_nf_uncertainty_db"] = nan.copy()
        col["system_temp_k"] = ev(sys_temp)[0]
        col["system_nf_db"] = ev(sys_temp, "nf")[0]
        col["preamp_gain_db"], col["preamp_gain_uncertainty_db"] = ev(gain, "db")
        col["preamp_gain_stations_db"] = gain_stations
        col["preamp_temp_k"] = ev(tp)[0]
        col["preamp_nf_db"], col["preamp_nf_uncertainty_db"] = ev(tp, "nf")
        col["preamp_nf_y_factor_db"] = ev(tp_y, "nf")[0]
        col["preamp_nf_terminated_db"], col["preamp_nf_terminated_uncertainty_db"] = ev(tp_term, "nf")
        col["antenna_temp_k"] = ev(ta)[0]
        # Fa = 10 log10(Ta / T0), ITU-R P.372 §2
        fa_model = None if ta is None else (lambda v: np.asarray(ta(v)) / T0_K)
        col["outside_fa_db"], col["outside_fa_uncertainty_db"] = ev(fa_model, "db")
        col["antenna_temp_via_system_k"] = ev(ta_sys)[0]
        col["occupied"] = (
            (ant_rx.occupied | (ant_sys.occupied if ant_sys is not None else False)).astype(float)
            if ant_rx is not None else (ant_sys.occupied.astype(float) if ant_sys is not None else nan.copy())
        )
        t_a, t_r, t_p, g_db = col["antenna_temp_k"], col["receiver_temp_k"], col["preamp_temp_k"], col["preamp_gain_db"]
        col["max_improvement_db"] = np.asarray(p372.max_preamp_improvement_db(t_a, t_r))
        col["predicted_benefit_db"] = np.asarray(nz.preamp_benefit_db(t_a, t_p, g_db, t_r))
        col["projected_benefit_db"] = (
            np.asarray(nz.projected_benefit_db(t_a, t_p, g_db, for_receiver_nf_db))
            if for_receiver_nf_db is not None else nan.copy()
        )
    summary = _summarise(freqs, col, g, rx_method, gain_method, nf_method, for_receiver_nf_db, assumptions)
    return NoiseResult(receiver, system, freqs, col, summary, tuple(dict.fromkeys(assumptions)), tuple(workflows))


def _noise_after_gain(tp_k: np.ndarray, gain_db: np.ndarray, tp_unc_db: np.ndarray) -> dict:
    """Split the measured preamp temperature into input noise and noise added after the gain.

    Noise ``Ts`` entering after the preamp's gain (a noisy supply, a second stage, an
    oscillation) appears in the second-stage-corrected preamp temperature as ``Tp + Ts/G(f)``
    (Friis 1944). A straight-line fit of the measured ``Tp`` against ``1/G`` across the
    passband gives ``Ts`` (slope, referred to the receiver input) and ``Tp`` (intercept),
    weighted by each channel's standard uncertainty. Needs at least 6 dB of gain variation; an
    error in the receiver temperature shows up the same way.
    """
    # standard uncertainty in K from the one in dB: dT = (T0 + Tp) ln(10)/10 dNF
    u_k = (T0_K + tp_k) * np.log(10.0) / 10.0 * tp_unc_db
    ok = np.isfinite(tp_k) & np.isfinite(gain_db) & np.isfinite(u_k) & (u_k > 0)
    empty = {"noise_after_gain_k": None, "noise_after_gain_uncertainty_k": None, "preamp_nf_at_input_db": None}
    if np.count_nonzero(ok) < 8:
        return empty
    x = 1.0 / np.asarray(db_to_ratio(gain_db[ok]))
    if x.max() < 4.0 * x.min():
        return empty
    coef, cov = np.polyfit(x, tp_k[ok], 1, w=1.0 / u_k[ok], cov=True)
    return {"noise_after_gain_k": float(coef[0]), "noise_after_gain_uncertainty_k": float(np.sqrt(cov[0, 0])),
            "preamp_nf_at_input_db": float(k_to_nf_db(coef[1])) if coef[1] >= 0 else None}


def _summarise(freqs, col, g, rx_method, gain_method, nf_method, for_nf_db, assumptions) -> dict:
    gain = col["preamp_gain_db"]
    smooth = _running_median(gain)
    if np.any(np.isfinite(smooth)):
        i_pk = int(np.nanargmax(smooth))
        region = np.isfinite(smooth) & (smooth >= smooth[i_pk] - PEAK_REGION_DB)
        peak = {"passband_peak_freq_hz": int(freqs[i_pk]), "passband_peak_gain_db": float(smooth[i_pk]),
                "summary_region_hz": [int(freqs[region].min()), int(freqs[region].max())],
                "summary_region": f"channels within {PEAK_REGION_DB:g} dB of the passband peak"}
    else:
        region = np.ones(freqs.size, bool)
        peak = {"passband_peak_freq_hz": None, "passband_peak_gain_db": None,
                "summary_region_hz": [int(freqs.min()), int(freqs.max())] if freqs.size else None,
                "summary_region": "all channels (no preamp gain measured)"}
    s: dict = {**peak, "receiver_nf_method": rx_method, "preamp_gain_method": gain_method,
               "preamp_nf_method": nf_method}
    for key in ("receiver_nf_db", "receiver_nf_uncertainty_db", "system_nf_db", "preamp_gain_db",
                "preamp_gain_uncertainty_db", "preamp_nf_db", "preamp_nf_uncertainty_db",
                "preamp_nf_terminated_db", "predicted_benefit_db", "projected_benefit_db"):
        s[key] = _median(col[key], region)
    s["for_receiver_nf_db"] = for_nf_db
    # the 1/G split of the preamp temperature stays a cross-check in the summary; the added noise
    # the commands state is the chain diagnosis's one estimate (analysis.workflows.added_noise_for)
    s.update(_noise_after_gain(col["preamp_temp_k"], gain, col["preamp_nf_uncertainty_db"]))
    # cross-check: station gains against the hot-minus-cold gain (compression, AGC, fading show here)
    s["station_minus_hot_cold_gain_db"] = (
        _median(col["preamp_gain_stations_db"] - gain) if gain_method == "y-factor" else None
    )
    occ = col["occupied"]
    free = np.isfinite(col["antenna_temp_k"]) & (occ == 0)
    if not np.any(free):
        free = np.isfinite(col["antenna_temp_k"])
    s["unoccupied_channels"] = int(np.count_nonzero(free & (occ == 0)))
    s["antenna_temp_k"] = _median(col["antenna_temp_k"], free)
    s["outside_fa_db"] = _median(col["outside_fa_db"], free)
    s["antenna_temp_via_system_k"] = _median(col["antenna_temp_via_system_k"], free)
    s["max_possible_improvement_db"] = _median(col["max_improvement_db"], free)
    if for_nf_db is not None and s["antenna_temp_k"] is not None:
        s["max_possible_improvement_for_receiver_db"] = _median(
            p372.max_preamp_improvement_db(col["antenna_temp_k"], nf_db_to_k(for_nf_db)), free)
    usable = free & np.isfinite(col["outside_fa_db"])
    if np.any(usable):
        s["closest_environment"] = p372.closest_environment(freqs[usable], col["outside_fa_db"][usable])
        s["environment_rms_db"] = p372.environment_distances_db(freqs[usable], col["outside_fa_db"][usable])
        tr_k = _median(col["receiver_temp_k"], free)
        if tr_k is not None and s["antenna_temp_k"] is not None and s["antenna_temp_k"] < tr_k / 3:
            assumptions.append(
                "outside noise is below a third of the receiver's own noise, so Ta from the receiver alone is "
                "poorly determined; see antenna_temp_via_system_k (measured through the preamp) or record "
                "longer dwells"
            )
    else:
        s["closest_environment"] = None
        s["environment_rms_db"] = None
    ant = g.get(("rx", "antenna"))
    s["floor_vs_power_offset_db"] = None if ant is None else _median(ant.floor_offset_db)
    return s


def predicted_noise_rise_db(
    result: NoiseResult, freqs_hz: ArrayLike, antenna_temp_k: ArrayLike | None = None
) -> np.ndarray:
    r"""Noise rise on an antenna input that the measured preamp predicts (Friis 1944).

    .. math:: N_{sys}/N_{rx} = \frac{G (T_a + T_p) + T_r}{T_a + T_r}

    ``G``, ``Tp``, ``Tr`` (and ``Ta`` unless ``antenna_temp_k`` is given, K) are interpolated
    linearly from ``result``'s channels to ``freqs_hz``; NaN beyond its measured range. A
    measured rise well above this points at noise the preamp's own NF does not explain
    (a supply, oscillation, interference).

    Raises
    ------
    MissingInputError
        When ``result`` has no preamp gain / NF / receiver NF, or no antenna temperature and
        none is given.
    """
    f = np.atleast_1d(np.asarray(freqs_hz, dtype=np.float64))

    def interp(key: str) -> np.ndarray:
        y = result.columns[key]
        ok = np.isfinite(y)
        if not np.any(ok):
            raise MissingInputError(
                f"the noise result has no {key.replace('_', ' ')}; the predicted noise rise needs the preamp "
                "gain and NF and the receiver NF (noise-hot/noise-cold sweeps of both configurations)"
                if key != "antenna_temp_k" else
                "the noise result has no antenna temperature: record antenna and terminated sweeps of the "
                "receiver alone, or pass antenna_temp_k"
            )
        x = result.freqs_hz[ok].astype(float)
        return np.where((f >= x[0]) & (f <= x[-1]), np.interp(f, x, y[ok]), np.nan)

    g_db, t_p, t_r = interp("preamp_gain_db"), interp("preamp_temp_k"), interp("receiver_temp_k")
    t_a = interp("antenna_temp_k") if antenna_temp_k is None else np.broadcast_to(
        np.asarray(antenna_temp_k, dtype=np.float64), f.shape)
    return np.asarray(nz.noise_rise_db(t_a, t_p, g_db, t_r), dtype=np.float64)
