"""Passband of a tuned preamplifier: cascaded tuned-circuit model, fit, bandwidth and coverage.

Model
-----
A preamp peaked with ``n`` tuned circuits (``n`` = 1..3) is modelled as the product of their
power responses times an overall gain:

.. math::

    G(f) = G_0 \\prod_{k=1}^{n} \\frac{1}{1 + Q_k^2 \\left(f/f_k - f_k/f\\right)^2}

where ``f_k`` is the resonant frequency and ``Q_k`` the loaded Q of circuit ``k``. A single
circuit has ``BW_3dB = f0 / Q`` (standard tuned-circuit result, from memory). Two model shapes
are fitted for every ``n``: *synchronous* (all circuits at one ``f0`` with one ``Q``: 3
parameters) and *general* (each circuit its own ``f_k``, ``Q_k``: ``2n + 1`` parameters). The
synchronous shape lets a handful of hand readings constrain a multi-circuit skirt.

Fit and model choice
--------------------
Weighted least squares on the gain in dB (:func:`scipy.optimize.least_squares`, bounded,
analytic Jacobian, several starts; weights ``1/sigma_dB`` scaled to rms 1; resonances bounded to
the measured span). For a noise-floor rise the model gains a floor term (``floor_offset``).
The model is chosen by the Bayesian information criterion, ``BIC = N ln(RSS_w/N) + k ln N``
on the weighted residuals (G. Schwarz, "Estimating the dimension of a model", Annals of
Statistics 6(2), 461-464, 1978). A model is admissible only with at least two residual degrees
of freedom (``N >= k + 2``); the residual rms is floored at :data:`RMS_FLOOR_DB` so that
noiseless data do not give ``-inf`` and ties go to the fewer parameters. With fewer than five
points only the single circuit is admissible and is used (said in ``criterion``).

Bandwidth
---------
Peak, -3 dB and -6 dB edges are found numerically on the fitted curve: a dense logarithmic grid,
then :func:`scipy.optimize.minimize_scalar` for the peak and :func:`scipy.optimize.brentq` for
each edge. The edges bound the contiguous region around the peak that stays above the level.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Sequence

import numpy as np

from analysis.errors import BadParameterError, FitError

#: Lower bound of the residual rms used in the information criterion, dB (about the
#: resolution of hand readings and of centi-dB spectra).
RMS_FLOOR_DB = 0.01
#: Bounds of the loaded Q in the fit.
Q_MIN = 0.5
Q_MAX = 2000.0
#: Largest number of cascaded circuits fitted.
MAX_CIRCUITS = 3


@dataclass(frozen=True)
class TunedStage:
    """One tuned circuit: resonance ``f0_hz`` and loaded Q; ``bw_hz = f0_hz / q`` (its own -3 dB width)."""

    f0_hz: float
    q: float

    @property
    def bw_hz(self) -> float:
        """-3 dB bandwidth of this circuit alone, Hz."""
        return self.f0_hz / self.q

    def to_dict(self) -> dict:
        """Plain dict with ``f0_hz``, ``q`` and ``bw_hz``."""
        return {"f0_hz": float(self.f0_hz), "q": float(self.q), "bw_hz": float(self.bw_hz)}


def circuit_power_response(freq_hz: np.ndarray | float, f0_hz: float, q: float) -> np.ndarray:
    """Power response of one tuned circuit, ``1 / (1 + Q^2 (f/f0 - f0/f)^2)`` (linear, 1 at f0)."""
    f = np.asarray(freq_hz, dtype=np.float64)
    x = f / f0_hz - f0_hz / f
    return 1.0 / (1.0 + (q * x) ** 2)


def cascade_response_db(
    freq_hz: np.ndarray | float, stages: Sequence[TunedStage], gain_db: float = 0.0
) -> np.ndarray:
    """Gain in dB of cascaded tuned circuits: ``gain_db`` + sum of each circuit's response in dB.

    Summed in dB (``-10 log10(1 + Q^2 x^2)``) so deep skirts do not underflow.
    """
    f = np.asarray(freq_hz, dtype=np.float64)
    out = np.full(f.shape, float(gain_db))
    for s in stages:
        x = f / s.f0_hz - s.f0_hz / f
        out = out - 10.0 * np.log10(1.0 + (s.q * x) ** 2)
    return out


@dataclass(frozen=True)
class CurveFeatures:
    """Peak and level crossings of a response curve (Hz, dB); NaN where a crossing is not found."""

    peak_hz: float
    peak_gain_db: float
    edges_3db_hz: tuple[float, float]
    edges_6db_hz: tuple[float, float]

    @property
    def bw_3db_hz(self) -> float:
        """Width between the -3 dB edges, Hz."""
        return self.edges_3db_hz[1] - self.edges_3db_hz[0]

    @property
    def bw_6db_hz(self) -> float:
        """Width between the -6 dB edges, Hz."""
        return self.edges_6db_hz[1] - self.edges_6db_hz[0]


def curve_features(stages: Sequence[TunedStage], gain_db: float = 0.0) -> CurveFeatures:
    """Peak, -3 dB and -6 dB edges of a cascade, found numerically on the exact response.

    Grid from ``0.2 min(f_k)`` to ``5 max(f_k)`` (enough for ``Q >= 0.5``), peak refined with
    bounded scalar minimisation, edges with Brent's method between grid points. The edges bound
    the contiguous region around the peak above ``peak - level``.
    """
    from scipy.optimize import brentq, minimize_scalar  # imported when a fit runs
    if not stages:
        raise BadParameterError("a passband needs at least one tuned circuit; give one or more stages")
    f0s = np.array([s.f0_hz for s in stages])
    lo, hi = 0.2 * f0s.min(), 5.0 * f0s.max()
    grid = np.geomspace(lo, hi, 60001)
    resp = cascade_response_db(grid, stages, gain_db)
    i = int(np.argmax(resp))
    a, b = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    res = minimize_scalar(
        lambda f: -float(cascade_response_db(f, stages, gain_db)),
        bounds=(a, b), method="bounded", options={"xatol": 1e-3},
    )
    peak_hz = float(res.x) if -res.fun >= resp[i] else float(grid[i])
    peak_db = float(cascade_response_db(peak_hz, stages, gain_db))

    def edges(level_db: float) -> tuple[float, float]:
        thr = peak_db - level_db
        below = resp < thr
        left_idx = np.nonzero(below[:i])[0]
        right_idx = np.nonzero(below[i:])[0]
        g = lambda f: float(cascade_response_db(f, stages, gain_db)) - thr  # noqa: E731
        lo_edge = hi_edge = float("nan")
        if left_idx.size:  # grid[j] below the level, grid[j + 1] not (j is the last one below)
            j = int(left_idx[-1])
            lo_edge = float(brentq(g, grid[j], grid[j + 1], xtol=1e-3))
        if right_idx.size:  # grid[j] below, grid[j - 1] not
            j = int(right_idx[0]) + i
            hi_edge = float(brentq(g, grid[j - 1], grid[j], xtol=1e-3))
        return (lo_edge, hi_edge)

    return CurveFeatures(peak_hz, peak_db, edges(10.0 * np.log10(2.0)), edges(10.0 * np.log10(4.0)))


# --------------------------------------------------------------------------------- fitting


@dataclass(frozen=True)
class ModelScore:
    """One candidate model: its shape, circuit count, parameters, residual rms and criterion."""

    shape: str
    n_circuits: int
    n_params: int
    residual_rms_db: float
    criterion_value: float | None

    def to_dict(self) -> dict:
        """Plain dict."""
        return asdict(self)


@dataclass(frozen=True)
class PassbandFit:
    """A fitted passband.

    ``gain_db`` is the overall gain (dB) of the model; ``peak_gain_db`` is the fitted curve's
    maximum. ``relative`` is True when the data were relative levels (shape only). Edges and
    widths are in Hz from the fitted curve; ``edges_extrapolated`` is True when an edge lies
    outside the measured frequencies.
    """

    shape: str
    n_circuits: int
    stages: tuple[TunedStage, ...]
    gain_db: float
    peak_hz: float
    peak_gain_db: float
    edges_3db_hz: tuple[float, float]
    bw_3db_hz: float
    edges_6db_hz: tuple[float, float]
    bw_6db_hz: float
    residual_rms_db: float
    residual_max_db: float
    n_points: int
    criterion: str
    candidates: tuple[ModelScore, ...]
    measured_span_hz: tuple[float, float]
    relative: bool = False
    edges_extrapolated: bool = False
    notes: tuple[str, ...] = field(default=())
    floor_ratio: float = 0.0

    def response_db(self, freq_hz: np.ndarray | float) -> np.ndarray:
        """Fitted gain in dB at ``freq_hz``."""
        return cascade_response_db(freq_hz, self.stages, self.gain_db)

    def to_dict(self) -> dict:
        """JSON-ready dict (Hz, dB); stages as ``{f0_hz, q, bw_hz}``, tuples as lists."""
        d = asdict(self)
        d["stages"] = [st.to_dict() for st in self.stages]
        d["candidates"] = [c.to_dict() for c in self.candidates]
        for key in ("edges_3db_hz", "edges_6db_hz", "measured_span_hz", "notes"):
            d[key] = list(d[key])
        return d


def _unpack(p: np.ndarray, shape: str, n: int, fref: float) -> tuple[float, list[TunedStage]]:
    if shape == "synchronous":
        return float(p[0]), [TunedStage(fref * np.exp(p[1]), np.exp(p[2]))] * n
    return float(p[0]), [TunedStage(fref * np.exp(p[1 + 2 * k]), np.exp(p[2 + 2 * k])) for k in range(n)]


_DB = 10.0 / np.log(10.0)


def _model_and_jac(p: np.ndarray, f: np.ndarray, shape: str, n: int, fref: float,
                   offset: bool) -> tuple[np.ndarray, np.ndarray]:
    """Model in dB and its analytic Jacobian.

    Parameters ``[g0, (u_k, l_k)..., (rho)]`` with ``f_k = fref e^u``, ``Q_k = e^l`` and, with
    ``offset``, a floor ``r = e^rho`` added to the linear circuit product
    (``g0 + 10 log10(H + r)``, the noise-floor rise model).
    """
    m = 1 if shape == "synchronous" else n
    mult = n if shape == "synchronous" else 1
    n_stage_params = 2 * m
    jac = np.zeros((f.size, p.size))
    h_db = np.zeros(f.size)
    for k in range(m):
        fk = fref * np.exp(p[1 + 2 * k])
        q = np.exp(p[2 + 2 * k])
        x = f / fk - fk / f
        qx2 = (q * x) ** 2
        h_db -= mult * _DB * np.log1p(qx2)
        dx_du = -(f / fk) - fk / f
        jac[:, 1 + 2 * k] = -mult * _DB * 2.0 * q * q * x * dx_du / (1.0 + qx2)
        jac[:, 2 + 2 * k] = -mult * _DB * 2.0 * qx2 / (1.0 + qx2)
    jac[:, 0] = 1.0
    if not offset:
        return p[0] + h_db, jac
    r = np.exp(p[1 + n_stage_params])
    h = np.power(10.0, h_db / 10.0)
    frac = h / (h + r)
    jac[:, 1:1 + n_stage_params] *= frac[:, None]
    jac[:, 1 + n_stage_params] = _DB * r / (h + r)
    return p[0] + _DB * np.log(h + r), jac


def _model_db(p: np.ndarray, f: np.ndarray, shape: str, n: int, fref: float, offset: bool = False) -> np.ndarray:
    return _model_and_jac(p, f, shape, n, fref, offset)[0]


def _data_width_hz(f: np.ndarray, g: np.ndarray) -> float:
    """Rough -3 dB width of the data (for starting values), at least two point spacings."""
    top = g.max()
    inside = f[g >= top - 3.0]
    spacing = np.median(np.diff(f)) if f.size > 1 else f[0] * 0.01
    return float(max(inside.max() - inside.min(), 2.0 * spacing, 1e-4 * f.mean()))


def _starts(shape: str, n: int, f: np.ndarray, g: np.ndarray, fref: float, rng: np.random.Generator,
            sync_best: np.ndarray | None) -> list[np.ndarray]:
    f_pk = float(f[np.argmax(g)])
    width = _data_width_hz(f, g)
    shrink = np.sqrt(2.0 ** (1.0 / n) - 1.0)
    q_sync = np.clip(f_pk * shrink / width, Q_MIN * 1.01, Q_MAX * 0.99)
    g0 = float(g.max())
    out: list[np.ndarray] = []
    if shape == "synchronous":
        for qf, df in ((1.0, 0.0), (0.5, 0.0), (2.0, 0.0), (1.0, -0.25), (1.0, 0.25)):
            out.append(np.array([g0, np.log((f_pk + df * width) / fref), np.log(q_sync * qf)]))
        return out
    # general: Butterworth stagger pattern of the data width, the synchronous best, random spreads
    theta = (2 * np.arange(1, n + 1) - 1) * np.pi / (2 * n)
    for scale in (1.0, 0.6, 1.5):
        b = width * scale
        p = [g0]
        for th in theta:
            fk = f_pk + 0.5 * b * np.cos(th)
            bwk = max(b * np.sin(th), 1e-4 * f_pk)
            p += [np.log(fk / fref), np.log(np.clip(fk / bwk, Q_MIN * 1.01, Q_MAX * 0.99))]
        out.append(np.array(p))
    if sync_best is not None:
        for spread in (0.05, 0.2):
            p = [sync_best[0]]
            for k in range(n):
                off = (k - (n - 1) / 2.0) * spread * width / fref
                p += [sync_best[1] + off, sync_best[2]]
            out.append(np.array(p))
    for _ in range(3):
        p = [g0]
        for _k in range(n):
            fk = f_pk + rng.uniform(-1.0, 1.0) * width
            p += [np.log(fk / fref), np.log(q_sync) + rng.normal(0.0, 0.5)]
        out.append(np.array(p))
    return out


#: Bounds of the floor-to-peak ratio ``r`` of the noise-floor rise model.
FLOOR_RATIO_BOUNDS = (1e-6, 10.0)


def _bounds(shape: str, n: int, f: np.ndarray, fref: float, offset: bool) -> tuple[np.ndarray, np.ndarray]:
    # resonances stay inside the measured span: a circuit outside it would only bend a skirt
    # and could put a spurious peak where nothing was measured
    u_lo = np.log(f.min() / fref)
    u_hi = np.log(f.max() / fref)
    m = 1 if shape == "synchronous" else n
    lo = [-np.inf] + [u_lo, np.log(Q_MIN)] * m + ([np.log(FLOOR_RATIO_BOUNDS[0])] if offset else [])
    hi = [np.inf] + [u_hi, np.log(Q_MAX)] * m + ([np.log(FLOOR_RATIO_BOUNDS[1])] if offset else [])
    return np.array(lo), np.array(hi)


def _fit_one(shape: str, n: int, f: np.ndarray, g: np.ndarray, w: np.ndarray, fref: float,
             rng: np.random.Generator, sync_best: np.ndarray | None, offset: bool) -> tuple[np.ndarray, float]:
    """Best of several bounded least-squares fits: short runs from every start, then a polish."""
    lo, hi = _bounds(shape, n, f, fref, offset)
    finite = np.isfinite(lo) & np.isfinite(hi)

    def fun(p):
        return (_model_and_jac(p, f, shape, n, fref, offset)[0] - g) * w

    def jac(p):
        return _model_and_jac(p, f, shape, n, fref, offset)[1] * w[:, None]

    from scipy.optimize import least_squares  # imported when a fit runs

    starts = _starts(shape, n, f, g, fref, rng, None if sync_best is None else sync_best[:3])
    if offset:
        starts = [np.append(p0, np.log(r0)) for p0 in starts for r0 in (1e-3, 0.1)]
    tried = []
    for p0 in starts:
        p0 = np.where(finite, np.clip(p0, np.where(finite, lo, 0) + 1e-6, np.where(finite, hi, 0) - 1e-6), p0)
        try:
            res = least_squares(fun, p0, jac=jac, bounds=(lo, hi), x_scale="jac", max_nfev=60)
        except (ValueError, FloatingPointError):
            continue
        if np.isfinite(res.cost):
            tried.append((float(res.cost), res.x))
    if not tried:
        raise FitError(f"the {shape} {n}-circuit fit failed from every start; check the data for NaN or spikes")
    tried.sort(key=lambda t: t[0])
    best_p, best_cost = tried[0][1], tried[0][0]
    for _cost, p0 in tried[:2]:
        res = least_squares(fun, p0, jac=jac, bounds=(lo, hi), x_scale="jac", max_nfev=1000)
        if np.isfinite(res.cost) and res.cost < best_cost:
            best_p, best_cost = res.x, float(res.cost)
    return best_p, best_cost


#: Fits already made in this process, by their exact inputs (:func:`fit_passband` is pure and
#: deterministic for a given seed): the report, the passband check and the diagnosis fit the
#: same gain curve, which is then fitted once. A few entries, oldest dropped first.
_FITS: dict[tuple, PassbandFit] = {}
_FITS_KEPT = 16


def fit_passband(
    freqs_hz: Sequence[float],
    gain_db: Sequence[float],
    *,
    max_circuits: int = MAX_CIRCUITS,
    weights: Sequence[float] | None = None,
    relative: bool = False,
    floor_offset: bool = False,
    seed: int = 0,
    circuits: int | None = None,
) -> PassbandFit:
    """Fit cascaded tuned circuits (n = 1..``max_circuits``) to a gain curve; choose n by BIC.

    Pure and cheap enough for a live tuning display (milliseconds for tens of points). The same
    inputs (bit for bit) give the same :class:`PassbandFit`, kept from the first call.

    Parameters
    ----------
    freqs_hz : sequence of float
        Measurement frequencies, Hz (any order; at least 3 distinct finite points).
    gain_db : sequence of float
        Gain (or relative level) at each frequency, dB.
    max_circuits : int
        Largest number of cascaded circuits tried (1..3).
    weights : sequence of float, optional
        Relative weights of the dB residuals (e.g. inverse standard deviation); default equal.
    relative : bool
        Mark the result as shape only (relative levels).
    floor_offset : bool
        Fit ``g0 + 10 log10(H(f) + r)`` instead of ``g0 + 10 log10 H(f)``: the noise-floor rise
        ``(G (T_in + T_p) + T_r)/(T_in + T_r)`` is the gain shape ``H`` plus a constant (the
        receiver's own noise). The result then describes ``H`` alone (``floor_ratio = r``).
    seed : int
        Seed of the random starting points (results are deterministic for a given seed).
    circuits : int, optional
        The number of tuned circuits when it is known (1..3): only that many are fitted.

    Returns
    -------
    PassbandFit

    References
    ----------
    Schwarz, G. (1978), "Estimating the dimension of a model", Ann. Statist. 6(2), 461-464.
    """
    key = (np.asarray(freqs_hz, dtype=np.float64).tobytes(), np.asarray(gain_db, dtype=np.float64).tobytes(),
           None if weights is None else np.asarray(weights, dtype=np.float64).tobytes(),
           np.shape(freqs_hz), np.shape(gain_db), None if weights is None else np.shape(weights),
           max_circuits, bool(relative), bool(floor_offset), seed, circuits)
    if not isinstance(seed, (int, np.integer)):  # a generator's state moves: fit every time
        return _fit_passband(freqs_hz, gain_db, max_circuits=max_circuits, weights=weights, relative=relative,
                             floor_offset=floor_offset, seed=seed, circuits=circuits)
    if key not in _FITS:
        fit = _fit_passband(freqs_hz, gain_db, max_circuits=max_circuits, weights=weights, relative=relative,
                            floor_offset=floor_offset, seed=seed, circuits=circuits)
        while len(_FITS) >= _FITS_KEPT:
            del _FITS[next(iter(_FITS))]
        _FITS[key] = fit
    return _FITS[key]


def _fit_passband(freqs_hz, gain_db, *, max_circuits: int, weights, relative: bool, floor_offset: bool, seed: int,
                  circuits: int | None) -> PassbandFit:
    """:func:`fit_passband` itself (every call fits)."""
    f = np.asarray(freqs_hz, dtype=np.float64).ravel()
    g = np.asarray(gain_db, dtype=np.float64).ravel()
    if f.shape != g.shape:
        raise BadParameterError(f"{f.size} frequencies but {g.size} gains; give one gain per frequency")
    w = np.ones_like(f) if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    if w.shape != f.shape:
        raise BadParameterError("one weight per frequency is needed")
    ok = np.isfinite(f) & np.isfinite(g) & np.isfinite(w) & (f > 0) & (w > 0)
    f, g, w = f[ok], g[ok], w[ok]
    order = np.argsort(f)
    f, g, w = f[order], g[order], w[order]
    if np.unique(f).size < 3:
        raise FitError(
            f"only {np.unique(f).size} usable frequencies; a passband fit needs at least 3 "
            "(measure across the band, including both skirts)"
        )
    if not 1 <= max_circuits <= MAX_CIRCUITS:
        raise BadParameterError(f"max_circuits must be 1..{MAX_CIRCUITS}, got {max_circuits}")
    w = w / np.sqrt(np.mean(w ** 2))
    fref = float(f[np.argmax(g)])
    rng = np.random.default_rng(seed)
    n_pts = f.size
    results = []  # (shape, n, k, params, rms, crit, residuals)
    sync_params: dict[int, np.ndarray] = {}
    if circuits is not None and not 1 <= circuits <= MAX_CIRCUITS:
        raise BadParameterError(f"circuits must be 1..{MAX_CIRCUITS}, got {circuits}")
    counts = range(1, max_circuits + 1) if circuits is None else range(circuits, circuits + 1)
    for n in counts:
        shapes = ["synchronous"] if n == 1 else ["synchronous", "general"]
        for shape in shapes:
            k = (3 if shape == "synchronous" else 2 * n + 1) + int(floor_offset)
            if n_pts < k + 2 and not (n == (circuits or 1)):
                continue
            p, _cost = _fit_one(shape, n, f, g, w, fref, rng, sync_params.get(n), floor_offset)
            if shape == "synchronous":
                sync_params[n] = p
            resid = (_model_db(p, f, shape, n, fref, floor_offset) - g)
            rms = float(np.sqrt(np.mean(resid ** 2)))
            wrms = float(np.sqrt(np.mean((resid * w) ** 2)))  # weighted, weights of rms 1
            crit = None
            if n_pts >= k + 2:
                crit = n_pts * np.log(max(wrms, RMS_FLOOR_DB) ** 2) + k * np.log(n_pts)
            results.append((shape, n, k, p, rms, crit, resid))
    admissible = [r for r in results if r[5] is not None]
    if admissible:
        best = min(admissible, key=lambda r: (round(r[5], 9), r[2], r[1]))
        criterion = "BIC"
    else:
        best = next(r for r in results if r[1] == (circuits or 1))
        need = 3 + int(floor_offset) + 2
        criterion = f"none (only {n_pts} points: single circuit assumed; BIC needs at least {need})"
    shape, n, k, p, rms, _crit, resid = best
    gain0, stages = _unpack(p, shape, n, fref)
    floor_ratio = float(np.exp(p[-1])) if floor_offset else 0.0
    if floor_offset:  # the gain shape passes through the measured peak level
        gain0 = gain0 + 10.0 * np.log10(1.0 + floor_ratio)
    stages = sorted(stages, key=lambda s: s.f0_hz)
    feats = curve_features(stages, gain0)
    notes = []
    extrap = bool(
        not np.all(np.isfinite(feats.edges_3db_hz))
        or feats.edges_3db_hz[0] < f.min() or feats.edges_3db_hz[1] > f.max()
    )
    if extrap:
        notes.append("a -3 dB edge lies outside the measured frequencies: measure further out to confirm it")
    if any(s.q >= Q_MAX * 0.999 or s.q <= Q_MIN * 1.001 for s in stages):
        notes.append("a circuit's Q reached its fit bound: the data do not constrain that circuit well")
    candidates = tuple(
        ModelScore(r[0], r[1], r[2], r[4], None if r[5] is None else float(r[5])) for r in results
    )
    return PassbandFit(
        shape=shape,
        n_circuits=n,
        stages=tuple(stages),
        gain_db=gain0,
        peak_hz=feats.peak_hz,
        peak_gain_db=feats.peak_gain_db,
        edges_3db_hz=feats.edges_3db_hz,
        bw_3db_hz=feats.bw_3db_hz,
        edges_6db_hz=feats.edges_6db_hz,
        bw_6db_hz=feats.bw_6db_hz,
        residual_rms_db=float(np.sqrt(np.mean(resid ** 2))),
        residual_max_db=float(np.max(np.abs(resid))),
        n_points=n_pts,
        criterion=criterion,
        candidates=candidates,
        measured_span_hz=(float(f.min()), float(f.max())),
        relative=relative or floor_offset,
        edges_extrapolated=extrap,
        notes=tuple(notes),
        floor_ratio=floor_ratio,
    )


# ------------------------------------------------------------------------------------ trust
#: Fewest gain points a fit must have before it is headlined.
MIN_TRUSTED_POINTS = 5
#: A fit is trusted while the rms of its residuals, each divided by its point's standard
#: uncertainty, stays under this (a reduced chi-square near 4 already says the model misses the
#: data).
MAX_NORMALISED_RESIDUAL = 2.0
#: Model uncertainty (dB, one standard deviation) added in quadrature to every point's own:
#: real circuits differ from the ideal tuned-circuit model and a floor-rise curve carries the
#: floor estimator's bias near stations (common practice, no source).
MODEL_SIGMA_DB = 0.25


def fit_trust(fit: PassbandFit, freqs_hz, gain_db, sigma_db) -> tuple[bool, str]:
    """Whether a fit may be headlined: ``(trusted, reason when not)``.

    Not trusted with fewer than :data:`MIN_TRUSTED_POINTS` points, with a circuit's Q on a fit
    bound (:data:`Q_MIN`, :data:`Q_MAX`), or with residuals above the stated uncertainty: the
    rms of ``residual / sqrt(sigma^2 + MODEL_SIGMA_DB^2)`` over the points above
    :data:`MAX_NORMALISED_RESIDUAL`. Pure and cheap: a live display may call it on every update.
    """
    if fit.n_points < MIN_TRUSTED_POINTS:
        return False, f"only {fit.n_points} gain points (a fit needs at least {MIN_TRUSTED_POINTS})"
    if any(s.q >= Q_MAX * 0.999 or s.q <= Q_MIN * 1.001 for s in fit.stages):
        return False, "a circuit's Q sits on its fit bound, so the data do not constrain it"
    f = np.asarray(freqs_hz, dtype=np.float64)
    g = np.asarray(gain_db, dtype=np.float64)
    sig = np.hypot(np.asarray(sigma_db, dtype=np.float64), MODEL_SIGMA_DB)
    resid = g - fit.response_db(f)
    ok = np.isfinite(resid) & np.isfinite(sig)
    chi = float(np.sqrt(np.mean((resid[ok] / sig[ok]) ** 2))) if ok.any() else float("inf")
    if chi > MAX_NORMALISED_RESIDUAL:
        return False, (f"residuals are {chi:.1f} times the points' stated uncertainty (rms, dB: "
                       f"{fit.residual_rms_db:.2f}): the model does not describe the data")
    return True, ""


# -------------------------------------------------------------------------------- coverage


@dataclass(frozen=True)
class Coverage:
    """How a fitted passband covers a target band (Hz, dB).

    ``ripple_db`` is max minus min of the fitted gain over the target; ``worst_db`` the lowest
    fitted gain in the target relative to the passband peak; ``target_covered`` is True iff the
    -3 dB passband contains the whole target. Stations are channel frequencies in the target.
    """

    target_hz: tuple[float, float]
    ripple_db: float
    worst_db: float
    target_covered: bool
    stations_in_target_hz: tuple[int, ...]
    covered_stations_hz: tuple[int, ...]
    uncovered_stations_hz: tuple[int, ...]

    def to_dict(self) -> dict:
        """JSON-ready dict."""
        d = asdict(self)
        d["target_hz"] = list(self.target_hz)
        for key in ("stations_in_target_hz", "covered_stations_hz", "uncovered_stations_hz"):
            d[key] = [int(v) for v in d[key]]
        return d


def check_target(lo_hz: float, hi_hz: float) -> tuple[float, float]:
    """Validate a target band in Hz; raises :class:`BadParameterError`."""
    if not (np.isfinite(lo_hz) and np.isfinite(hi_hz) and 0 < lo_hz < hi_hz):
        raise BadParameterError(
            f"target band {lo_hz / 1e6:g}-{hi_hz / 1e6:g} MHz is not a positive range; give START-STOP such as 88-100"
        )
    return float(lo_hz), float(hi_hz)


def coverage(fit: PassbandFit, target_hz: tuple[float, float], stations_hz: Sequence[int] = ()) -> Coverage:
    """Coverage of ``target_hz`` by the fitted passband.

    A station is covered when it lies between the -3 dB edges; the target is covered when the
    fitted gain stays within 3 dB of the peak over the whole target (which, with the edges
    bounding the contiguous region around the peak, is the same as the target lying inside them).
    """
    lo, hi = check_target(*target_hz)
    grid = np.linspace(lo, hi, 4001)
    extra = [s.f0_hz for s in fit.stages if lo < s.f0_hz < hi] + ([fit.peak_hz] if lo < fit.peak_hz < hi else [])
    grid = np.sort(np.concatenate([grid, np.asarray(extra, dtype=np.float64)]))
    resp = fit.response_db(grid)
    e_lo, e_hi = fit.edges_3db_hz
    covered_band = bool(np.isfinite(e_lo) and np.isfinite(e_hi) and e_lo <= lo and e_hi >= hi)
    in_target = tuple(sorted(int(s) for s in stations_hz if lo <= s <= hi))
    inside = tuple(s for s in in_target if np.isfinite(e_lo) and np.isfinite(e_hi) and e_lo <= s <= e_hi)
    outside = tuple(s for s in in_target if s not in inside)
    return Coverage(
        target_hz=(lo, hi),
        ripple_db=float(resp.max() - resp.min()),
        worst_db=float(resp.min() - fit.peak_gain_db),
        target_covered=covered_band,
        stations_in_target_hz=in_target,
        covered_stations_hz=inside,
        uncovered_stations_hz=outside,
    )
