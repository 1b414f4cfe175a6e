"""Robust estimators for the A/B comparison: time pairing, bootstrap and Hodges-Lehmann.

Every function works on arrays only (rows = sweeps or pairs, columns = channels, NaN where
undefined) and is vectorised across channels where the method allows. See
:mod:`analysis.compare` for how they are combined and for the references.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import stats as sps


# -- pairing --------------------------------------------------------------------------------
def pair_sweeps(
    base_s: np.ndarray, test_s: np.ndarray, tolerance_s: float | None = None
) -> tuple[np.ndarray, np.ndarray, float]:
    """Pair each base sweep with the nearest test sweep in time, each sweep used at most once.

    Candidates are the test sweeps just before and just after each base sweep; they are
    accepted greedily, closest first, when closer than ``tolerance_s`` (default: twice the
    median spacing of all sweeps merged in time order).

    Returns
    -------
    base_index, test_index : ndarray of int
        Indices of the pairs, in base order.
    tolerance_s : float
        The tolerance used (s).
    """
    base_s = np.asarray(base_s, np.float64)
    test_s = np.asarray(test_s, np.float64)
    if base_s.size == 0 or test_s.size == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), float("nan")
    if tolerance_s is None:
        merged = np.sort(np.concatenate([base_s, test_s]))
        steps = np.diff(merged)
        steps = steps[steps > 0]
        tolerance_s = 2.0 * float(np.median(steps)) if steps.size else float("inf")
    order = np.argsort(test_s, kind="stable")
    sorted_t = test_s[order]
    right = np.searchsorted(sorted_t, base_s)
    cand_b, cand_t = [], []
    for shift in (-1, 0):
        pos = right + shift
        ok = (pos >= 0) & (pos < sorted_t.size)
        cand_b.append(np.nonzero(ok)[0])
        cand_t.append(order[pos[ok]])
    cb = np.concatenate(cand_b)
    ct = np.concatenate(cand_t)
    side = np.repeat([0, 1], [cand_b[0].size, cand_b[1].size])  # 0: test before, 1: test after
    gap = np.abs(test_s[ct] - base_s[cb])
    keep = gap < tolerance_s
    cb, ct, gap, side = cb[keep], ct[keep], gap[keep], side[keep]
    best: tuple[list[int], list[int]] = ([], [])
    for prefer_after in (True, False):  # equal gaps (strict alternation): try both tie orders
        order_k = np.lexsort((side if not prefer_after else 1 - side, gap))
        used_b = np.zeros(base_s.size, bool)
        used_t = np.zeros(test_s.size, bool)
        out_b, out_t = [], []
        for k in order_k.tolist():
            i, j = int(cb[k]), int(ct[k])
            if not used_b[i] and not used_t[j]:
                used_b[i] = used_t[j] = True
                out_b.append(i)
                out_t.append(j)
        if len(out_b) > len(best[0]):
            best = (out_b, out_t)
    out_b, out_t = best
    bi = np.asarray(out_b, np.int64)
    ti = np.asarray(out_t, np.int64)
    keep_order = np.argsort(bi, kind="stable")
    return bi[keep_order], ti[keep_order], float(tolerance_s)


# -- robust estimators ----------------------------------------------------------------------
def quiet_nanmedian(values: np.ndarray, axis: int) -> np.ndarray:
    """``numpy.nanmedian`` that returns NaN for all-NaN slices without a RuntimeWarning."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices give NaN: wanted
        return np.nanmedian(values, axis=axis)


def bootstrap_median_ci(
    diffs: np.ndarray, confidence: float, n_boot: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """Percentile bootstrap CI of the column medians of ``diffs`` (rows = pairs, NaN ignored).

    One replicate draws ``n`` pair indices with replacement and applies them to every column,
    so channels are resampled jointly, vectorised in chunks of replicates (Efron & Tibshirani
    1993, ch. 13, percentile interval). A replicate in which a column drew only NaN is ignored
    for that column.
    """
    n, m = diffs.shape
    alpha = 1.0 - confidence
    chunk = max(1, int(8_000_000 // max(1, n * m)))
    meds = np.empty((n_boot, m), np.float64)
    for start in range(0, n_boot, chunk):
        stop = min(n_boot, start + chunk)
        idx = rng.integers(0, n, size=(stop - start, n))
        meds[start:stop] = quiet_nanmedian(diffs[idx], axis=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        lo, hi = np.nanpercentile(meds, [100 * alpha / 2, 100 * (1 - alpha / 2)], axis=0)
    return np.asarray(lo), np.asarray(hi)


def exact_bootstrap_median_ci(diffs: np.ndarray, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Percentile interval of the exact bootstrap distribution of the column medians.

    For ``n`` sorted values the bootstrap order statistic obeys
    ``P(X*_(r) <= x_(k)) = P(Binomial(n, k/n) >= r)`` (Maritz & Jarrett 1978). The lower end
    uses ``r = ceil(n/2)``, the upper ``r = floor(n/2) + 1`` (for even ``n`` the resampled
    median lies between them, so the interval is at most one rank conservative). The
    smallest qualifying rank ``k`` is found by vectorised bisection over all columns.
    """
    alpha = 1.0 - confidence
    srt = np.sort(diffs, axis=0)  # NaN sort last
    n = np.sum(np.isfinite(diffs), axis=0)
    cols = np.arange(diffs.shape[1])

    def first_rank(r: np.ndarray, level: float) -> np.ndarray:
        lo = np.ones_like(n)
        hi = np.maximum(n, 1)
        safe_n = np.maximum(n, 1)
        for _ in range(int(np.ceil(np.log2(max(2, int(safe_n.max()))))) + 1):
            mid = (lo + hi) // 2
            ok = sps.binom.sf(r - 1, safe_n, mid / safe_n) >= level
            hi = np.where(ok, mid, hi)
            lo = np.where(ok, lo, mid + 1)
        return np.minimum(hi, safe_n)

    k_lo = first_rank((n + 1) // 2, alpha / 2)
    k_hi = first_rank(n // 2 + 1, 1 - alpha / 2)
    lo = srt[k_lo - 1, cols].astype(np.float64)
    hi = srt[k_hi - 1, cols].astype(np.float64)
    empty = n == 0
    lo[empty] = np.nan
    hi[empty] = np.nan
    return lo, hi


def hodges_lehmann_shift(
    test: np.ndarray, base: np.ndarray, confidence: float | None = None
) -> tuple[float, float, float]:
    """Hodges-Lehmann shift ``median(test_i - base_j)`` with its Mann-Whitney-based interval.

    The interval is ``[D_(c), D_(N+1-c)]`` of the ``N = n m`` sorted differences with
    ``c = floor(N/2 - z sqrt(N (n+m+1) / 12))`` (normal approximation of the Mann-Whitney
    critical value; Lehmann 1975, from memory). Returns NaN where undefined.
    """
    t = test[np.isfinite(test)]
    b = base[np.isfinite(base)]
    if t.size == 0 or b.size == 0:
        return float("nan"), float("nan"), float("nan")
    d = np.subtract.outer(t, b).ravel()
    total = d.size
    mids = [(total - 1) // 2, total // 2]
    ks = set(mids)
    c = 0
    if confidence is not None:
        z = float(sps.norm.ppf(0.5 + confidence / 2))
        c = int(np.floor(total / 2 - z * np.sqrt(total * (t.size + b.size + 1) / 12.0)))
        if c >= 1:
            ks.update({c - 1, total - c})
    part = np.partition(d, sorted(ks))
    est = 0.5 * (part[mids[0]] + part[mids[1]])
    if confidence is None or c < 1:
        return float(est), float("nan"), float("nan")
    return float(est), float(part[c - 1]), float(part[total - c])


def min_n_for_interval(alpha: float) -> int:
    """Smallest sample for which the signed-rank test can reach ``alpha`` (2**(1-n) < alpha)."""
    return int(np.floor(1 + np.log2(1 / alpha))) + 1


def min_n_unpaired(alpha: float) -> int:
    """Smallest equal sample size ``k`` per side for which the two-sided Mann-Whitney test can
    reach ``alpha`` (smallest p-value ``2 / C(2k, k)``)."""
    from math import comb

    k = 1
    while 2.0 / comb(2 * k, k) >= alpha:
        k += 1
    return k


def wilcoxon_p(d: np.ndarray) -> float | None:
    d = d[np.isfinite(d)]
    if d.size < 2 or not np.any(d != 0):
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p = float(sps.wilcoxon(d).pvalue)
    return p if np.isfinite(p) else None


def mannwhitney_p(t: np.ndarray, b: np.ndarray) -> float | None:
    t = t[np.isfinite(t)]
    b = b[np.isfinite(b)]
    if t.size < 1 or b.size < 1 or t.size + b.size < 3:
        return None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p = float(sps.mannwhitneyu(t, b, alternative="two-sided").pvalue)
    return p if np.isfinite(p) else None
