r"""Added noise: noise in the test configuration that does not follow the preamp's gain curve.

Model (Friis 1944; the chain of :mod:`survey.scene`): with the preamp of gain ``G(f)`` and
noise temperature ``Tp``, noise ``Ts`` injected after its tuned circuits (a noisy supply), and
the receiver's ``Tr``, the channel noise powers of the base and test configurations on the same
input ``Tin`` are, with ``c`` the receiver's conversion (FS^2 per kelvin per hertz) and ``B``
the channel bandwidth,

.. math::

    N_b = c B (T_{in} + T_r), \qquad
    N_t = c B [G (T_{in} + T_p) + T_s + T_r] = G N_b + a G + \beta,

with :math:`a = c B (T_p - T_r)` and :math:`\beta = c B (T_s + T_r)` the part of the floor that
the tuned circuits do not shape. ``G N_b`` carries the input's own frequency dependence (the
outside noise of an antenna falls with frequency, ITU-R P.372), so only ``a`` and ``beta`` are
fitted, by non-negative least squares (:func:`scipy.optimize.nnls`, Lawson & Hanson 1974) on
the columns ``[G, -G, 1]`` with relative weights ``1/N_t``, over channels received in neither
configuration. The uncertainty of ``beta`` is the standard deviation of a seeded bootstrap over
channels (Efron & Tibshirani 1993), which includes any misfit of the gain curve.

The receiver alone contributes ``c B Tr`` to ``beta``. That is known exactly when the base
configuration has terminated sweeps (``N_bt = c B (Tamb + Tr)``) and the receiver's noise
temperature is known (given, or from the noise workflow's Y-factor), and is otherwise bounded
above by the base's whole floor (terminated if present, else antenna). Noise is being added
after the preamp when ``beta`` exceeds that by more than 1 dB and two standard deviations.
Then, with ``r = beta / N_bt``, ``Ts = r Tamb + Tr (r - 1)`` (exact) or ``Ts >= r Tamb``
(``Tr`` unknown), and the C/N lost on a channel of test floor ``N_t`` is
``10 log10(N_t / (N_t - (beta - c B Tr)))`` (a lower bound where ``c B Tr`` is only bounded).
"""

from __future__ import annotations

import numpy as np

from analysis.findings import Finding
from analysis.diagnose.data import ChannelSummary, GainModel, summarise_channels
from analysis.noise.workflow import NoiseResult
from analysis.selection import Survey
from survey.units import T0_K, nf_db_to_k, ratio_to_db

#: One 8-bit converter step in full-scale units (cu8 samples: 255 steps over -1..+1).
LSB_FS = 1.0 / 127.5

#: Excess of the unshaped floor over the receiver's bound to call added noise, dB.
MIN_EXCESS_DB = 1.0
#: ... and in standard deviations of the bootstrap.
MIN_EXCESS_SIGMA = 2.0
#: Bootstrap replicates.
N_BOOT = 300
#: Fewest channels the fit needs.
MIN_CHANNELS = 8
#: Severity "problem" from this much lost C/N (median over the band), dB.
PROBLEM_LOSS_DB = 1.0


def fit_unshaped_floor(gain_lin: np.ndarray, base_noise: np.ndarray, test_noise: np.ndarray,
                       n_boot: int = N_BOOT, seed: int = 0) -> dict:
    """Fit ``N_t = G N_b + a G + beta`` (see the module docstring); all arrays linear, same length.

    Returns ``{"a", "beta", "beta_boot", "beta_sigma_ls", "rms_rel"}``: ``beta_boot`` the
    bootstrap replicates, ``beta_sigma_ls`` the standard error of ``beta`` from the covariance
    of the unconstrained weighted fit (large when the gain is nearly flat and ``a G`` and
    ``beta`` cannot be told apart), ``rms_rel`` the weighted residual RMS as a fraction of ``N_t``.
    """
    g = np.asarray(gain_lin, dtype=np.float64)
    nb = np.asarray(base_noise, dtype=np.float64)
    nt = np.asarray(test_noise, dtype=np.float64)
    y = nt - g * nb
    w = 1.0 / nt
    a_mat = np.column_stack([g, -g, np.ones_like(g)]) * w[:, None]
    yw = y * w

    def solve(rows: np.ndarray) -> np.ndarray:
        import scipy.optimize  # imported when the fit runs
        x, _ = scipy.optimize.nnls(a_mat[rows], yw[rows])
        return x

    x = solve(np.arange(g.size))
    resid = a_mat @ x - yw
    rng = np.random.default_rng(seed)
    boot = np.array([solve(rng.integers(0, g.size, g.size))[2] for _ in range(n_boot)])
    # unconstrained weighted least squares on [G, 1]: its covariance shows a flat gain's degeneracy
    a2 = np.column_stack([a_mat[:, 0], a_mat[:, 2]])
    x2, *_ = np.linalg.lstsq(a2, yw, rcond=None)
    r2 = a2 @ x2 - yw
    dof = max(g.size - 2, 1)
    m = a2.T @ a2
    cov = (float(np.sum(r2 ** 2) / dof) * np.linalg.inv(m) if np.linalg.cond(m) < 1e12
           else np.full((2, 2), np.inf))
    return {"a": float(x[0] - x[1]), "beta": float(x[2]), "beta_boot": boot,
            "beta_sigma_ls": float(np.sqrt(max(cov[1, 1], 0.0))),
            "rms_rel": float(np.sqrt(np.mean(resid ** 2)))}


def _receiver_temp_k(receiver_nf_db: float | None, receiver_noise: NoiseResult | None, why_none: str,
                     notes: list[str]) -> tuple[float | None, str]:
    if receiver_nf_db is not None:
        return float(nf_db_to_k(receiver_nf_db)), f"receiver NF {receiver_nf_db:g} dB (given)"
    if receiver_noise is None:
        if why_none:
            notes.append(f"the receiver's noise temperature could not be measured ({why_none})")
        return None, ""
    tr = receiver_noise.column("receiver_temp_k")
    tr = tr[np.isfinite(tr)]
    if tr.size == 0:
        notes.append("the noise workflow gave no receiver noise temperature (needs noise-hot/noise-cold sweeps of the base)")
        return None, ""
    return float(np.median(tr)), "receiver noise temperature from the noise workflow (Y-factor)"


def _receiver_temp_sigma_k(receiver_nf_db: float | None, receiver_noise: NoiseResult | None,
                           tr_k: float) -> float:
    """Standard uncertainty of the receiver noise temperature, K: from the noise workflow's NF
    uncertainty (``dT = (T0 + T) ln(10)/10 dNF``); 0 for a figure the user gave."""
    if receiver_nf_db is not None or receiver_noise is None:
        return 0.0
    u = receiver_noise.column("receiver_nf_uncertainty_db")
    u = u[np.isfinite(u)]
    return float((T0_K + tr_k) * np.log(10.0) / 10.0 * np.median(u)) if u.size else 0.0


def quantisation_noise_lin(survey: Survey, summary: ChannelSummary, channel_bw_hz: float) -> float:
    """Uniform quantisation noise of 8-bit samples in one channel, FS^2 (0 for wider samples).

    ``2 (LSB^2 / 12) B / fs`` with ``LSB = 1/127.5`` (Widrow's uniform model, valid when each
    rail's RMS is at least half a step); it is part of every floor and of ``beta``, and is set
    aside before a floor is read as ``c B T``. 8-bit sweeps are those whose hops carry a clip
    fraction.
    """
    hops = survey.hops([summary.sweeps[0].id])
    if not hops or hops[0].clip_fraction is None:
        return 0.0
    return float(2.0 * (LSB_FS**2 / 12.0) / float(summary.sweeps[0].sample_rate_hz) * channel_bw_hz)


def _align(a: ChannelSummary, b: ChannelSummary) -> tuple[np.ndarray, np.ndarray]:
    """Indices into ``a`` and ``b`` of their common channels."""
    common, ia, ib = np.intersect1d(a.freqs_hz, b.freqs_hz, return_indices=True)
    return ia, ib


def check_added_noise(survey: Survey, base: str, test: str, gain: GainModel | None, *,
                      receiver_nf_db: float | None = None, receiver_noise: NoiseResult | None = None,
                      receiver_noise_note: str = "", ambient_k: float = 290.0, seed: int = 0):
    """The added-noise check (module docstring); returns ``(findings, checked, notes)``."""
    notes: list[str] = []
    if gain is None:
        return [], ["added-noise: not checked (needs the preamp gain from stations or a noise source)"], notes
    sums = {(c, i): summarise_channels(survey, c, i) for c in (base, test) for i in ("terminated", "antenna")}
    inp = next((i for i in ("terminated", "antenna") if sums[(base, i)] is not None and sums[(test, i)] is not None), None)
    if inp is None:
        return [], ["added-noise: not checked (needs terminated or antenna sweeps of both configurations)"], notes
    b, t = sums[(base, inp)], sums[(test, inp)]
    ib, it = _align(b, t)
    f = t.freqs_hz[it].astype(np.float64)
    g = gain.gain_lin(f)
    use = ~b.received[ib] & ~t.received[it] & np.isfinite(g) & (b.noise_lin[ib] > 0) & (t.noise_lin[it] > 0)
    if use.sum() < MIN_CHANNELS:
        return [], [f"added-noise: not checked (only {int(use.sum())} unoccupied channels on the {inp} input)"], notes
    nb, nt, g = b.noise_lin[ib][use], t.noise_lin[it][use], g[use]
    fit = fit_unshaped_floor(g, nb, nt, seed=seed)
    beta, boot = fit["beta"], fit["beta_boot"]
    span_db = float(ratio_to_db(g.max() / g.min()))
    if span_db < 3.0:
        notes.append(f"the gain varies by only {span_db:.1f} dB over the fitted channels: shaped and unshaped noise "
                     "are hard to tell apart, as the uncertainty shows")
    tr_k, tr_how = _receiver_temp_k(receiver_nf_db, receiver_noise, receiver_noise_note, notes)
    b_term = sums[(base, "terminated")]
    ev: dict = {}
    q = quantisation_noise_lin(survey, b, t.channel_bw_hz)
    thermal_ok = False
    if b_term is not None:
        nbt = nb if inp == "terminated" else np.interp(f[use], b_term.freqs_hz, b_term.noise_lin)
        nbt_med = float(np.median(nbt)) - q  # thermal part: c B (Tamb + Tr)
        thermal_ok = nbt_med > q
        if not thermal_ok:
            notes.append("the base terminated floor lies within 3 dB of the converter's quantisation noise, so it "
                         "cannot be read as kelvin: raise the receiver gain for the terminated runs")
    if tr_k is not None and b_term is not None and thermal_ok:
        rx = q + nbt_med * tr_k / (ambient_k + tr_k)
        bound_how = f"known exactly ({tr_how}, base terminated floor = Tamb + Tr)"
    elif b_term is not None:
        rx = nbt_med + q
        if not thermal_ok:
            tr_k = None
        bound_how = "bounded by the base terminated floor (Tamb + Tr)"
    else:
        rx = float(np.median(nb))
        bound_how = f"bounded by the base {inp} floor"
    sigma_beta = max(float(np.std(boot, ddof=1)), fit["beta_sigma_ls"])
    excess_db = float(ratio_to_db(beta / rx)) if beta > 0 else float("-inf")
    with np.errstate(divide="ignore", invalid="ignore"):
        sigma_db = float(ratio_to_db((max(beta, 0.0) + sigma_beta) / max(beta, 1e-300)))
    checked = [f"added-noise: fitted N = G N_base + a G + beta on {int(use.sum())} unoccupied channels of the {inp} "
               f"input; unshaped part beta {float(ratio_to_db(max(beta, 1e-300))):.1f} dBFS is "
               f"{excess_db:+.1f} +- {sigma_db:.1f} dB against the receiver's own floor ({bound_how})"]
    if not (excess_db >= MIN_EXCESS_DB and beta - rx > MIN_EXCESS_SIGMA * sigma_beta):
        if excess_db >= MIN_EXCESS_DB:
            checked[-1] += ": not significant (under two standard deviations)"
        return [], checked, notes
    ev.update({"unshaped_noise_dbfs": float(ratio_to_db(beta)), "receiver_floor_dbfs": float(ratio_to_db(rx)),
               "excess_db": excess_db, "excess_uncertainty_db": sigma_db, "fit_channels_count": int(use.sum()),
               "gain_span_db": span_db, "fit_residual_rms_fraction": fit["rms_rel"],
               "quantisation_noise_dbfs": float(ratio_to_db(q)) if q > 0 else float("-inf")})
    kelvin = ""
    if b_term is not None and thermal_ok:
        r = (beta - q) / nbt_med
        if tr_k is not None:
            # a receiver temperature measured by Y-factor includes the converter's quantisation noise, set
            # aside here as q: its thermal part solves Tr = Tr_th + q (Tamb + Tr_th) / N_bt,thermal
            # (a noise figure the user gives is taken as the thermal one)
            tr_th = tr_k if receiver_nf_db is not None else (tr_k * nbt_med - q * ambient_k) / (nbt_med + q)
            ts = r * ambient_k + tr_th * (r - 1.0)
            sigma_tr = _receiver_temp_sigma_k(receiver_nf_db, receiver_noise, tr_k)
            ev["added_noise_k"] = float(ts)
            ev["added_noise_uncertainty_k"] = float(np.hypot((ambient_k + tr_th) * sigma_beta / nbt_med,
                                                             (r - 1.0) * sigma_tr))
            ev["receiver_noise_k"] = tr_k
            kelvin = f"about {ts:.0f} K at the receiver input"
        else:
            ev["added_noise_min_k"] = float(r * ambient_k)
            kelvin = f"at least {r * ambient_k:.0f} K at the receiver input"
    # lost C/N on the antenna floor of the test configuration
    t_ant = sums[(test, "antenna")] or t
    added = beta - rx
    n_all = t_ant.noise_lin
    ok = np.isfinite(n_all) & (n_all > added)
    if ok.any():
        loss = np.asarray(ratio_to_db(n_all[ok] / (n_all[ok] - added)))
        g_all = gain.gain_lin(t_ant.freqs_hz[ok].astype(np.float64))
        ev["lost_cn_median_db"] = float(np.median(loss))
        ev["lost_cn_at_peak_db"] = float(loss[int(np.nanargmax(g_all))])
    bound = "" if (tr_k is not None and b_term is not None) else "at least "
    loss_txt = (f"{bound}{ev['lost_cn_median_db']:.1f} dB of C/N lost across the band (median) and "
                f"{bound}{ev['lost_cn_at_peak_db']:.1f} dB at the passband peak" if "lost_cn_median_db" in ev else "")
    severity = "problem" if ev.get("lost_cn_median_db", 0.0) >= PROBLEM_LOSS_DB else "warning"
    what = ", ".join(x for x in (f"{excess_db:.1f} dB above the receiver's own floor", kelvin, loss_txt) if x)
    return [Finding(
        kind="added-noise", freq_hz=None, severity=severity, evidence=ev,
        advice=(f"Noise that the tuned circuits do not shape enters after the preamp ({what}). Power the preamp from "
                "a battery to test the supply, then filter the supply and screen the preamp and its leads."),
    )], checked, notes
