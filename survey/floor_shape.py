"""The shape of the noise floor behind a tuned preamp: a low-parameter model to bridge long gaps.

Behind a preamp the noise density at the receiver input is (Friis, [1]_)

    N(f) = N_rx + k (T_ant(f) + T_pre) G(f),

the receiver's own noise (flat across the FM band) plus the antenna and preamp noise amplified
by the preamp's power response ``G(f)``. For ``n`` tuned circuits ``G`` is a product of
universal resonance curves [2]_, ``|H|^2 = 1 / (1 + Q^2 (f/f0 - f0/f)^2)``; the outside noise
falls as a power of frequency over the band (ITU-R P.372 [3]_: ``Fa = c - d log10 f``). So

    N(f) = 10^(flat/10) + 10^(peak/10) (f/f0)^p |H(f)|^(2n)

with a few parameters (``peak``, ``f0``, ``Q``, ``p``, the integer ``n``, and ``flat`` once per
hop: an 8-bit receiver adds quantisation noise whose level, like the converter's effective gain,
depends on each hop's total power) describes a floor over several MHz where a smoother, bridging
a peak from its tails, comes out low. Staggered circuits are not in the model;
:func:`fit_floor_shape` then finds no acceptable fit and says so (``None``), and the caller keeps
its smoother.

References
----------
.. [1] H. T. Friis, "Noise figures of radio receivers," Proc. IRE, vol. 32, no. 7,
   pp. 419-422, 1944.
.. [2] F. E. Terman, Radio Engineers' Handbook, McGraw-Hill, 1943 (universal resonance
   curve of a single tuned circuit).
.. [3] ITU-R Recommendation P.372, "Radio noise" (external noise figure ``Fa`` versus
   frequency for man-made and galactic noise).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.special

_LN10_10 = np.log(10.0) / 10.0  # dB to neper-of-power


@dataclass(frozen=True)
class FloorShape:
    """A fitted floor model: ``10^(flat/10) + 10^(peak/10) (f/f0)^tilt |H(f)|^(2 circuits)``.

    ``flat_db`` (one per hop: an 8-bit receiver's quantisation noise and the converter's
    effective gain depend on each hop's total power) and ``peak_db`` in dB of the caller's
    density unit (e.g. dB FS^2/Hz), ``f0_hz`` the common resonance (Hz), ``q`` the loaded Q of
    each circuit, ``tilt`` the power-law exponent of the amplified term; ``worst_db`` the
    largest excess of a window's mean residual over its acceptance limit (<= 0: accepted),
    ``cost`` the robust cost per point.
    """

    circuits: int
    f0_hz: float
    q: float
    peak_db: float
    flat_db: tuple[float, ...]
    tilt: float
    worst_db: float
    cost: float

    def db(self, freq_hz: np.ndarray, hop: int | None = None) -> np.ndarray:
        """The floor in dB at absolute frequencies ``freq_hz`` (Hz) for ``hop`` (None: the mean
        flat term)."""
        flat = float(np.mean(self.flat_db)) if hop is None else self.flat_db[hop]
        return _model_db(np.asarray(freq_hz, dtype=np.float64), self.circuits,
                         np.array([self.f0_hz / 1e6, np.log(self.q), self.peak_db, self.tilt]), flat)


def resonance_power(freq_hz: np.ndarray, f0_hz: float, q: float) -> np.ndarray:
    """Universal resonance curve, power: ``1 / (1 + Q^2 (f/f0 - f0/f)^2)`` (Terman [2]_)."""
    x = freq_hz / f0_hz - f0_hz / freq_hz
    return 1.0 / (1.0 + (q * x) ** 2)


def _model_db(freq_hz: np.ndarray, circuits: int, p: np.ndarray, flat_db) -> np.ndarray:
    f0 = p[0] * 1e6
    amplified = _LN10_10 * p[2] + p[3] * np.log(freq_hz / f0) + circuits * np.log(resonance_power(freq_hz, f0, np.exp(p[1])))
    return np.logaddexp(amplified, _LN10_10 * flat_db) / _LN10_10


def _model_jacobian(freq_hz: np.ndarray, circuits: int, p: np.ndarray, flat_db: np.ndarray, hop: np.ndarray,
                    hops: int) -> np.ndarray:
    """d(model dB)/d(f0 MHz, ln Q, peak dB, tilt, flat dB of each hop), one row per point."""
    f0 = p[0] * 1e6
    q = np.exp(p[1])
    amplified = _LN10_10 * p[2] + p[3] * np.log(freq_hz / f0) + circuits * np.log(resonance_power(freq_hz, f0, q))
    share = scipy.special.expit(amplified - _LN10_10 * flat_db)  # amplified / total
    x = freq_hz / f0 - f0 / freq_hz
    qx2 = (q * x) ** 2
    d_amp_dx = -circuits * 2.0 * q * q * x / (1.0 + qx2)
    d_amp_df0 = (-p[3] / f0 + d_amp_dx * (-freq_hz / f0**2 - 1.0 / freq_hz)) * 1e6
    d_amp_dlnq = -circuits * 2.0 * qx2 / (1.0 + qx2)
    out = np.zeros((freq_hz.size, 4 + hops))
    to_db = share / _LN10_10
    out[:, 0] = to_db * d_amp_df0
    out[:, 1] = to_db * d_amp_dlnq
    out[:, 2] = share
    out[:, 3] = to_db * np.log(freq_hz / f0)
    out[np.arange(freq_hz.size), 4 + hop] = 1.0 - share
    return out


def fit_floor_shape(freq_hz: list[np.ndarray], floor_db: list[np.ndarray], sigma_db: list[np.ndarray],
                    upper_db: list[np.ndarray], guide_hz: np.ndarray, guide_db: np.ndarray, *,
                    window_hz: float = 200_000.0, tolerance_db: float = 0.6, max_tilt: float = 4.0,
                    flat_spread_db: float = 0.5, start: FloorShape | None = None) -> FloorShape | None:
    """Robust fit of :class:`FloorShape` to free-floor estimates and upper bounds; None if none fits.

    Parameters
    ----------
    freq_hz, floor_db, sigma_db, upper_db : list of numpy.ndarray
        Per hop: absolute frequencies (Hz) of its groups; the floor estimate (dB, unbiased)
        where the group is free, NaN elsewhere; the estimate's standard deviation (dB); the
        observed level (dB) where the group holds signal, NaN elsewhere. The floor cannot
        exceed the observed level (signals only add power): the model is penalised only where
        it lies more than two standard deviations above one. Free estimates are fitted with a
        soft-L1 loss (outliers: skirts taken for free floor).
    guide_hz, guide_db : numpy.ndarray
        A first estimate of the floor (e.g. a smoother's), for the starting point.
    window_hz, tolerance_db : float
        Acceptance: over every window of ``window_hz`` holding free estimates, the mean residual
        must lie within ``tolerance_db`` + 3 standard errors (skirts of stations raise free
        groups by up to about half a dB: measured on tests/test_sweep_floor.py's bands), and
        the model may not exceed the upper bounds by more than that. Otherwise None.
    max_tilt : float
        Bound on the power-law exponent of the amplified term (outside noise falls as about
        ``f^-2.8`` over VHF in ITU-R P.372's curves [3]_).
    flat_spread_db : float
        Soft prior tying each hop's flat term to their mean (a hop without free groups).
    start : FloorShape, optional
        A previous fit to the same hops (e.g. before the groups were classified again): only
        its number of circuits is fitted, starting from its parameters.

    Returns
    -------
    FloorShape or None
        The best of 1, 2 and 3 identical circuits by robust cost that passes the acceptance.
    """
    hops = len(freq_hz)
    hop_of = np.concatenate([np.full(a.size, k) for k, a in enumerate(freq_hz)])
    f = np.concatenate(freq_hz)
    y = np.concatenate(floor_db)
    s = np.concatenate(sigma_db)
    u = np.concatenate(upper_db)
    free = np.isfinite(y)
    bound = np.isfinite(u)
    if free.sum() < 12 or guide_hz.size < 8:
        return None
    ff, yf, sf, hf = f[free], y[free], s[free], hop_of[free]
    fu, yu, su, hu = f[bound], u[bound], s[bound], hop_of[bound]
    k = int(np.argmax(guide_db))
    span = (guide_hz[0] / 1e6, guide_hz[-1] / 1e6)
    flat_start = float(np.percentile(yf, 5))
    peak_start = float(guide_db[k])
    width = span[1] - span[0]
    import scipy.optimize  # here: importing the floor module stays light

    best = None
    for circuits in (1, 2, 3) if start is None else (start.circuits,):
        if start is None:
            x0 = np.concatenate([[guide_hz[k] / 1e6, np.log(20.0 * np.sqrt(circuits / 3.0)), peak_start, 0.0],
                                 np.full(hops, flat_start)])
        else:
            x0 = np.concatenate([[start.f0_hz / 1e6, np.log(start.q), start.peak_db, start.tilt], start.flat_db])
        lo = np.concatenate([[span[0] - 0.2 * width, 0.0, peak_start - 30.0, -max_tilt], np.full(hops, flat_start - 30.0)])
        hi = np.concatenate([[span[1] + 0.2 * width, np.log(300.0), peak_start + 30.0, max_tilt], np.full(hops, flat_start + 30.0)])

        def residuals(p, circuits=circuits):
            flats = p[4:]
            r_free = (yf - _model_db(ff, circuits, p, flats[hf])) / sf
            r_up = np.maximum(_model_db(fu, circuits, p, flats[hu]) - yu - 2.0 * su, 0.0) / su
            return np.concatenate([r_free, r_up, (flats - np.mean(flats)) / flat_spread_db])

        def jacobian(p, circuits=circuits):
            flats = p[4:]
            j_free = -_model_jacobian(ff, circuits, p, flats[hf], hf, hops) / sf[:, None]
            m_up = _model_db(fu, circuits, p, flats[hu])
            active = (m_up - yu - 2.0 * su) > 0.0
            j_up = _model_jacobian(fu, circuits, p, flats[hu], hu, hops) * (active / su)[:, None]
            j_prior = np.zeros((hops, p.size))
            j_prior[:, 4:] = (np.eye(hops) - 1.0 / hops) / flat_spread_db
            return np.vstack([j_free, j_up, j_prior])

        try:
            sol = scipy.optimize.least_squares(residuals, np.clip(x0, lo + 1e-9, hi - 1e-9), jac=jacobian,
                                               bounds=(lo, hi), loss="soft_l1", f_scale=2.0, x_scale="jac", tr_solver="lsmr",
                                               max_nfev=100)
        except (ValueError, np.linalg.LinAlgError):
            continue
        cost = float(sol.cost) / ff.size
        if best is None or cost < best[0]:
            best = (cost, circuits, sol.x)
    if best is None:
        return None
    cost, circuits, p = best
    flats = p[4:]
    worst = _worst_window(ff, yf - _model_db(ff, circuits, p, flats[hf]), sf, window_hz)
    over = _worst_window(fu, yu - _model_db(fu, circuits, p, flats[hu]), su, window_hz, one_sided=True)
    excess = max(worst, over) - tolerance_db
    if excess > 0.0:
        return None
    return FloorShape(circuits, float(p[0] * 1e6), float(np.exp(p[1])), float(p[2]), tuple(float(v) for v in flats),
                      float(p[3]), float(excess), cost)


def _worst_window(freq_hz: np.ndarray, resid_db: np.ndarray, sigma_db: np.ndarray, window_hz: float,
                  one_sided: bool = False) -> float:
    """Largest excess of a window's mean residual over 3 standard errors (dB; <= 0: none).

    ``one_sided``: only means below zero count (the model above an upper bound).
    """
    if freq_hz.size == 0:
        return 0.0
    w = 1.0 / sigma_db**2
    bins = np.floor((freq_hz - freq_hz.min()) / window_hz).astype(np.int64)
    sw = np.bincount(bins, w)
    has = sw > 0
    mean = np.bincount(bins, w * resid_db)[has] / sw[has]
    err = 1.0 / np.sqrt(sw[has])
    excess = (-mean if one_sided else np.abs(mean)) - 3.0 * err
    return float(np.max(excess))
