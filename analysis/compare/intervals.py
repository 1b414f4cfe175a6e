"""Intervals behind every verdict: Student t intervals on paired and unpaired differences.

Paired (the configurations alternated): for each item (station or channel) the ``n`` paired
differences ``d_i = x_test,i - x_base,i`` give the mean ``d̄``, the standard deviation ``s``
(``n - 1`` in the denominator) and the interval

    d̄ ± t(1 - α/2; n - 1) · s / √n

(Student 1908; any statistics text, e.g. NIST/SEMATECH e-Handbook of Statistical Methods,
section 7.2.2, "Do the observations come from a population with a given mean?" applied to the
differences). Its coverage is exact for normal differences at every ``n >= 2``; slow fading that
is common to the two members of a pair cancels in ``d_i``. The project asks for 3 or more pairs
(with 2 pairs ``t(0.975; 1) = 12.7`` makes the interval useless).

Unpaired (taken at different times): Welch's interval for the difference of two means with
the Welch-Satterthwaite degrees of freedom (Welch 1947, Biometrika 34, 28-35).

Everything is vectorised over items (columns); NaN entries are ignored per column.
The t distribution comes from ``scipy.special`` (``stdtrit``, ``stdtr``: what ``scipy.stats.t``
calls), so a comparison does not import ``scipy.stats``; the median interval imports it when
first used.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Fewest pairs (or sweeps per side) for which an interval is given.
MIN_PAIRS = 3


@dataclass(frozen=True)
class Intervals:
    """Per-item mean difference, interval and sample count (arrays over items; NaN where undefined)."""

    mean: np.ndarray
    low: np.ndarray
    high: np.ndarray
    p_value: np.ndarray
    n: np.ndarray


def _t_quantile(level: float, dof: np.ndarray) -> np.ndarray:
    """Student t quantile: ``scipy.special.stdtrit``, the function ``scipy.stats.t.ppf`` calls
    (the same values, without importing ``scipy.stats``)."""
    from scipy.special import stdtrit

    return stdtrit(np.maximum(dof, 1.0), level)


def _t_two_sided_p(t_stat: np.ndarray, dof: np.ndarray) -> np.ndarray:
    """Two-sided p-value ``2 P(T > |t|)``: ``scipy.special.stdtr`` (what ``scipy.stats.t.sf`` calls)."""
    from scipy.special import stdtr

    return 2.0 * stdtr(np.maximum(dof, 1.0), -np.abs(t_stat))


def column_mean_sd(values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean, sample standard deviation (``n - 1``) and count of each column, NaN ignored.

    Works in the values' own precision (float32 readings stay float32) and accumulates the
    sums in float64.
    """
    x = np.asarray(values)
    if x.dtype.kind != "f":
        x = x.astype(np.float64)
    ok = np.isfinite(x)
    n = ok.sum(axis=0)
    filled = np.where(ok, x, x.dtype.type(0))
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = filled.sum(axis=0, dtype=np.float64) / n
        dev = np.where(ok, x - mean.astype(x.dtype), x.dtype.type(0))
        var = np.einsum("ij,ij->j", dev, dev, dtype=np.float64) / (n - 1)
    mean = np.where(n > 0, mean, np.nan)
    sd = np.sqrt(np.where(n > 1, var, np.nan))
    return mean, sd, n


def _half_width_and_p(mean: np.ndarray, se: np.ndarray, dof: np.ndarray, have: np.ndarray,
                      confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Student t half-width ``t(1 - a/2, dof) * se`` and the two-sided p-value of ``mean / se``
    per column, NaN where ``have`` is False; zero spread makes the sign certain when the mean is
    not zero (p = 0)."""
    half = np.full(mean.shape, np.nan)
    p = np.full(mean.shape, np.nan)
    if have.any():
        q = _t_quantile(0.5 + confidence / 2.0, dof)
        half = np.where(have, q * se, np.nan)
        with np.errstate(invalid="ignore", divide="ignore"):
            t_stat = mean / se
        p_all = _t_two_sided_p(np.where(np.isfinite(t_stat), t_stat, 0.0), dof)
        p_all = np.where(se > 0, p_all, np.where(mean != 0, 0.0, 1.0))
        p = np.where(have, p_all, np.nan)
    return half, p


def paired_t(diffs: np.ndarray, confidence: float = 0.95, min_pairs: int = MIN_PAIRS) -> Intervals:
    """Paired t interval of each column of ``diffs`` (rows = pairs); no interval under ``min_pairs``.

    Returns the mean difference (for every column with at least one pair), the interval and
    the two-sided p-value of "no change" (columns with fewer than ``min_pairs`` pairs: NaN).
    """
    mean, sd, n = column_mean_sd(diffs)
    have = n >= max(min_pairs, 2)
    dof = np.where(have, n - 1, 1).astype(np.float64)
    half, p = _half_width_and_p(mean, sd / np.sqrt(np.maximum(n, 1)), dof, have, confidence)
    return Intervals(mean, mean - half, mean + half, p, n.astype(np.int64))


def welch_t(test: np.ndarray, base: np.ndarray, confidence: float = 0.95, min_per_side: int = MIN_PAIRS) -> Intervals:
    """Welch interval of ``mean(test) - mean(base)`` per column (rows = sweeps of each side).

    ``n`` is the smaller of the two sample sizes; no interval when it is under ``min_per_side``.
    """
    mt, st, nt = column_mean_sd(test)
    mb, sb, nb = column_mean_sd(base)
    mean = mt - mb
    n = np.minimum(nt, nb)
    have = n >= max(min_per_side, 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        vt, vb = st**2 / nt, sb**2 / nb
        se = np.sqrt(vt + vb)
        dof = (vt + vb) ** 2 / (vt**2 / (nt - 1) + vb**2 / (nb - 1))
    dof = np.where(have & np.isfinite(dof), dof, np.maximum(n - 1, 1)).astype(np.float64)
    half, p = _half_width_and_p(mean, se, dof, have, confidence)
    return Intervals(np.where(n > 0, mean, np.nan), mean - half, mean + half, p, n.astype(np.int64))


def median_interval(values, confidence: float = 0.95) -> tuple[float | None, float | None, float | None]:
    """Median of ``values`` (NaN ignored) and its distribution-free confidence interval.

    The interval is between order statistics ``x_(k)`` and ``x_(n-k+1)`` with the largest
    ``k`` for which ``P(B <= k - 1) <= (1 - confidence) / 2``, ``B ~ Binomial(n, 1/2)``: its
    coverage is at least ``confidence`` for any continuous distribution (the sign-test interval
    for a median; e.g. Conover, Practical Nonparametric Statistics, 3rd ed., section 3.2, from
    memory). ``(median, None, None)`` when ``n`` is too small for that confidence (n < 6 at
    95 %); all None without values.
    """
    import scipy.stats

    x = np.sort(np.asarray(values, np.float64)[np.isfinite(np.asarray(values, np.float64))])
    n = x.size
    if n == 0:
        return None, None, None
    med = float(np.median(x))
    alpha = (1.0 - confidence) / 2.0
    ks = np.arange(1, n // 2 + 1)
    ok = ks[scipy.stats.binom.cdf(ks - 1, n, 0.5) <= alpha]
    if ok.size == 0:
        return med, None, None
    k = int(ok.max())
    return med, float(x[k - 1]), float(x[n - k])
