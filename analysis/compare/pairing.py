"""Time pairing of the A/B comparison: which base sweep goes with which test sweep.

See :mod:`analysis.compare.core` for how the pairs are used and
:mod:`analysis.compare.intervals` for the intervals on them.
"""

from __future__ import annotations

import numpy as np


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
    cb_list, ct_list = cb.tolist(), ct.tolist()
    for prefer_after in (True, False):  # equal gaps (strict alternation): try both tie orders
        order_k = np.lexsort((side if not prefer_after else 1 - side, gap))
        used_b = bytearray(base_s.size)  # plain Python flags: the loop below is per candidate
        used_t = bytearray(test_s.size)
        out_b, out_t = [], []
        for k in order_k.tolist():
            i, j = cb_list[k], ct_list[k]
            if not used_b[i] and not used_t[j]:
                used_b[i] = used_t[j] = 1
                out_b.append(i)
                out_t.append(j)
        if len(out_b) > len(best[0]):
            best = (out_b, out_t)
    out_b, out_t = best
    bi = np.asarray(out_b, np.int64)
    ti = np.asarray(out_t, np.int64)
    keep_order = np.argsort(bi, kind="stable")
    return bi[keep_order], ti[keep_order], float(tolerance_s)
