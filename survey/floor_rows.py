"""The noise-floor fit of :mod:`survey.noise_floor` for many hops at once (one row per hop).

The hops of a sweep share one bin grid, usable mask and tuning, so their grouped log-PSDs are
rows of one array. Each step of the fit works on all rows together:

* the Whittaker smoother [1]_ of every row is one banded Cholesky solve (LAPACK ``pbsv``) of
  the block-diagonal system that stacks the rows' systems: the penalty bands of a row do not
  reach into the next (the upper-band entries that would couple them are zero), so each block
  is factorised with exactly the arithmetic of a solve on its own;
* the occupancy mask (:func:`occupied_rows`) is computed with row-wise running sums and
  maxima, nothing reaching from one row into the next;
* the iterations (asymmetric least squares [2]_, then occupancy refits) stop for each row when
  that row has settled, as they would for that hop alone, so the result equals the hop-by-hop
  fit (tests/test_floor_rows.py).

References
----------
.. [1] P. H. C. Eilers, "A perfect smoother," Anal. Chem., vol. 75, pp. 3631-3636, 2003.
.. [2] P. H. C. Eilers and H. F. M. Boelens, "Baseline correction with asymmetric least squares
   smoothing," Leiden University Medical Centre report, 2005.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import scipy.linalg

from survey.errors import PlanError

_PBSV = scipy.linalg.get_lapack_funcs("pbsv", dtype=np.float64)  # banded SPD solver, as solveh_banded
_SQRT3 = float(np.sqrt(3.0))
_THIRDS = np.full(3, 1.0 / 3.0)
_RIDGES = (1e-9, 1e-6, 1e-3)  # tiny diagonal loads that keep a system definite where no weight is


def _solve_one(y: np.ndarray, weight: np.ndarray, penalty: np.ndarray) -> np.ndarray:
    for ridge in _RIDGES:
        ab = penalty.copy()
        ab[2] += weight + ridge
        _, z, info = _PBSV(ab, weight * y, lower=0, overwrite_ab=1, overwrite_b=1)
        if info == 0:
            return z
    raise PlanError("the noise-floor fit did not converge; check the PSD for NaN or infinite values")


def whittaker_rows(y: np.ndarray, weight: np.ndarray, penalty: np.ndarray) -> np.ndarray:
    """Per row, minimise ``sum w (y - z)^2 + z' P z`` for the banded penalty ``P`` (Eilers [1]_).

    ``y`` and ``weight`` are ``(rows, n)``; ``penalty`` is the upper banded form ``(3, n)`` of
    ``P`` (:func:`survey.noise_floor._penalty_bands`), the same for every row. All rows are one
    LAPACK ``pbsv`` call on the block-diagonal system; a row whose system is not definite with
    the smallest ridge is solved alone with larger ridges.
    """
    rows, n = y.shape
    ab = np.tile(penalty, rows) if rows > 1 else penalty.copy()
    ab[2] += (weight + _RIDGES[0]).reshape(-1)
    _, z, info = _PBSV(ab, (weight * y).reshape(-1), lower=0, overwrite_ab=1, overwrite_b=1)
    if info == 0:
        return z.reshape(rows, n)
    return np.stack([_solve_one(y[r], weight[r], penalty) for r in range(rows)])


@lru_cache(maxsize=16)
def _offsets(half: int) -> np.ndarray:
    out = np.arange(-half, half + 1)
    out.setflags(write=False)
    return out


@lru_cache(maxsize=64)
def _ones_u8(length: int) -> np.ndarray:
    out = np.ones(length, dtype=np.uint8)
    out.setflags(write=False)
    return out


@lru_cache(maxsize=64)
def window_ends(n: int, half: int) -> tuple[np.ndarray, np.ndarray]:
    """Indices into a cumulative sum (with a leading zero) of each window's end and start, for
    windows of ``2 half + 1`` elements clipped to ``0 .. n`` (read-only, cached per shape)."""
    i = np.arange(n)
    upper, lower = np.minimum(i + half + 1, n), np.maximum(i - half, 0)
    for a in (upper, lower):
        a.setflags(write=False)
    return upper, lower


def dilate_rows(mask: np.ndarray, half: int) -> np.ndarray:
    """``mask`` (rows, n) grown by ``half`` elements on each side within each row (a running OR)."""
    if half <= 0:
        return mask
    rows, n = mask.shape
    if rows == 1 and 2 * half + 1 <= min(n, 255):  # one row: one short correlation (counts fit in uint8)
        return (np.convolve(mask[0].view(np.uint8), _ones_u8(2 * half + 1), mode="same") > 0)[np.newaxis]
    if half <= 8:  # short reach: shifted ORs
        out = mask.copy()
        for d in range(1, min(half, n - 1) + 1):
            out[:, d:] |= mask[:, :-d]
            out[:, :-d] |= mask[:, d:]
        return out
    c = np.zeros((rows, n + 1), dtype=np.int32)  # long reach: cumulative sums
    np.cumsum(mask, axis=1, out=c[:, 1:])
    upper, lower = window_ends(n, half)
    return c[:, upper] > c[:, lower]


def _paint(rows: np.ndarray, lo: np.ndarray, hi: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Boolean ``shape`` array, True on ``[lo, hi)`` of row ``rows`` for every triple."""
    n_rows, n = shape
    width = n + 1
    edges = np.bincount(rows * width + lo, minlength=n_rows * width)
    edges -= np.bincount(rows * width + hi, minlength=n_rows * width)
    return np.cumsum(edges.reshape(n_rows, width), axis=1)[:, :n] > 0


def occupied_rows(resid_db: np.ndarray, sigma_db: float, usable: np.ndarray, core_sigma: float,
                  skirt_sigma: float, reach: int, skirt_max: int, carrier_db: float, peak_half: int,
                  occupancy: int, occupancy_per_db: float, body_half: int = 0) -> np.ndarray:
    """Groups holding signal in each row of ``resid_db`` (rows, n), as
    :func:`survey.noise_floor._occupied` describes for one hop (cores, skirts, carriers with
    their occupancy and body, then ``reach``), ``sigma_db`` the same for every row. Nothing
    reaches from one row into another."""
    core = resid_db > core_sigma * sigma_db
    core &= usable
    if not core.any():
        return core
    n_rows, n = core.shape
    r = resid_db * usable
    if n_rows == 1:  # 3-group running mean, zero beyond the ends
        smooth = np.convolve(r[0], _THIRDS, mode="same")[np.newaxis]
    else:
        third = r / 3.0
        smooth = third.copy()
        smooth[:, 1:] += third[:, :-1]
        smooth[:, :-1] += third[:, 1:]
    rising = smooth > skirt_sigma * sigma_db / _SQRT3
    rising |= core
    starts = np.empty_like(rising)  # a new run id at every rise and at every row's start
    starts[:, 0] = True
    np.greater(rising[:, 1:], rising[:, :-1], out=starts[:, 1:])
    run = np.cumsum(starts.reshape(-1)).reshape(n_rows, n)
    ok_run = np.zeros(int(run[-1, -1]) + 1, dtype=bool)
    ok_run[run[core]] = True
    claimed = ok_run[run]
    claimed &= rising
    claimed &= dilate_rows(core, skirt_max)
    # carriers: cores high enough whose residual is the largest within peak_half groups (the
    # window held at the row's ends, as scipy.ndimage.maximum_filter1d's mode "nearest")
    where_rows, where_cols = (core & (smooth > carrier_db)).nonzero()
    if where_rows.size:
        window = where_cols[:, np.newaxis] + _offsets(peak_half)
        np.maximum(window, 0, out=window)
        np.minimum(window, n - 1, out=window)
        start = where_rows * n
        window += start[:, np.newaxis]
        flat = r.reshape(-1)
        peak = flat[start + where_cols] >= flat[window].max(axis=1)
        where_rows, where_cols = where_rows[peak], where_cols[peak]
    if where_rows.size == 0:
        return np.zeros_like(core)  # nothing is held without a carrier
    heights = smooth[where_rows, where_cols]
    if where_rows.size <= 16:  # a few carriers: slices
        held = np.zeros_like(core)
        body = np.zeros_like(core)
        for row, at, height_db in zip(where_rows.tolist(), where_cols.tolist(), heights.tolist()):
            half = occupancy + int(round(occupancy_per_db * max(height_db - 10.0, 0.0)))  # as np.rint
            held[row, max(at - half, 0) : at + half + 1] = True
            grown = body_half + half - occupancy
            body[row, max(at - grown, 0) : at + grown + 1] = True
    else:
        half = occupancy + np.rint(occupancy_per_db * np.maximum(heights - 10.0, 0.0)).astype(np.int64)
        grown = body_half + half - occupancy
        held = _paint(where_rows, np.maximum(where_cols - half, 0), np.minimum(where_cols + half + 1, n), core.shape)
        body = _paint(where_rows, np.maximum(where_cols - grown, 0), np.minimum(where_cols + grown + 1, n), core.shape)
    claimed &= held
    claimed |= body
    return dilate_rows(claimed, reach)


def fit_rows(y: np.ndarray, weight: np.ndarray, has_data: np.ndarray, stiff: np.ndarray, penalty: np.ndarray,
             sigma_db: float, occupancy_args: tuple, *, core_sigma: float, skirt_sigma: float, asymmetry: float,
             als_rounds: int, mask_rounds: int) -> np.ndarray:
    """The floor fit of :func:`survey.noise_floor.local_noise_floor` (steps 2 and 3) for every row.

    ``y``, ``weight`` are ``(rows, n)`` group means (dB) and weights, ``has_data`` ``(n,)`` the
    groups with a usable bin; ``stiff`` and ``penalty`` the banded penalties of the starting
    envelope and of the occupancy refits. Returns the fit (dB, the biased log-PSD mean) per row.

    First a lower envelope (asymmetric least squares [2]_), then occupancy refits. Each row
    stops when its own weights (envelope) or classification (refits) settle, exactly as the
    same row fitted alone would.
    """
    n_rows, n = y.shape
    if n < 4:
        return np.tile(np.sum(weight * y, axis=1, keepdims=True) / np.sum(weight, axis=1, keepdims=True), (1, n))
    fit = whittaker_rows(y, weight, stiff)
    above = None
    active = np.ones(n_rows, dtype=bool)
    for _ in range(als_rounds):  # asymmetric least squares: a lower envelope to start from
        now_above = y > fit
        if above is not None:
            active &= (now_above != above).any(axis=1)  # weights unchanged: converged (Eilers & Boelens)
            if not active.any():
                break
        above = now_above
        fit[active] = whittaker_rows(y[active], weight[active] * np.where(above[active], asymmetry, 1.0 - asymmetry),
                                     stiff)
    previous = np.zeros((n_rows, n), dtype=bool)
    seeded = np.zeros(n_rows, dtype=bool)  # rows whose fit came from an occupancy mask (``previous``)
    active = np.ones(n_rows, dtype=bool)
    for _ in range(mask_rounds):
        rows = active.nonzero()[0]
        now = occupied_rows(y[rows] - fit[rows], sigma_db, has_data, core_sigma, skirt_sigma, *occupancy_args)
        free = ~now & has_data
        done = ~free.any(axis=1)  # the whole hop is occupied: keep the lower envelope
        done |= seeded[rows] & ~(now != previous[rows]).any(axis=1)  # settled
        refit = rows[~done]
        active[rows[done]] = False
        if refit.size == 0:
            break
        fit[refit] = whittaker_rows(y[refit], weight[refit] * free[~done], penalty)
        previous[refit] = now[~done]
        seeded[refit] = True
    return fit
