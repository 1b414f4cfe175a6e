"""Outside (man-made and galactic) radio noise after Recommendation ITU-R P.372.

The median external noise factor of each environment is a straight line in log frequency,
``Fa = c - d log10(f_MHz)`` dB above ``k T0 b``, valid about 0.3-250 MHz, with
``ta = T0 10**(Fa/10)`` (``T0 = 290 K``).

References
----------
.. [P372] Recommendation ITU-R P.372 (Radio noise), §5 Table 1 (coefficients c, d) and
   Table 2 (decile spreads), as in ITU-R Study Group 3's reference implementation of
   P.372-10 (same in later editions). ``ta = 290 10**(Fa/10)`` is P.372 §2 (from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from analysis.errors import BadParameterError
from survey.units import T0_K, db_to_ratio, ratio_to_db

#: Frequency range over which the straight-line fits apply, Hz [P372].
VALID_RANGE_HZ = (0.3e6, 250e6)


@dataclass(frozen=True)
class Environment:
    """One P.372 environment curve: ``Fa = c_db - d_db * log10(f_MHz)`` and its decile spreads.

    ``upper_decile_db`` / ``lower_decile_db`` are the spreads above / below the median
    (None where P.372 gives none).
    """

    name: str
    c_db: float
    d_db: float
    upper_decile_db: float | None
    lower_decile_db: float | None


#: The environments of [P372] Table 1 (c, d) and Table 2 (decile spreads), quietest last.
ENVIRONMENTS: dict[str, Environment] = {
    "city": Environment("city", 76.8, 27.7, 11.0, 6.7),
    "residential": Environment("residential", 72.5, 27.7, 10.6, 5.3),
    "rural": Environment("rural", 67.2, 27.7, 9.2, 4.6),
    "quiet rural": Environment("quiet rural", 53.6, 28.6, None, None),
    "galactic": Environment("galactic", 52.0, 23.0, 2.0, 2.0),
}


def _environment(name: str) -> Environment:
    try:
        return ENVIRONMENTS[name]
    except KeyError:
        raise BadParameterError(
            f"unknown environment {name!r}; choose one of {', '.join(ENVIRONMENTS)}"
        ) from None


def median_fa_db(freqs_hz: ArrayLike, environment: str) -> np.ndarray | float:
    """Median external noise factor ``Fa`` in dB of an environment at ``freqs_hz`` [P372].

    Raises :class:`BadParameterError` outside the 0.3-250 MHz range of the fit.
    """
    f = np.asarray(freqs_hz, dtype=np.float64)
    if np.any(f < VALID_RANGE_HZ[0]) or np.any(f > VALID_RANGE_HZ[1]):
        raise BadParameterError(
            "P.372 man-made noise curves apply from 0.3 to 250 MHz; "
            f"got {np.min(f) / 1e6:.3f}-{np.max(f) / 1e6:.3f} MHz"
        )
    env = _environment(environment)
    out = env.c_db - env.d_db * np.log10(f / 1e6)
    return out if out.ndim else float(out)


def decile_fa_db(freqs_hz: ArrayLike, environment: str) -> tuple[np.ndarray | float, np.ndarray | float] | None:
    """``(lower, upper)`` decile of ``Fa`` in dB [P372 Table 2]; None where no spread is given."""
    env = _environment(environment)
    if env.upper_decile_db is None or env.lower_decile_db is None:
        return None
    med = np.asarray(median_fa_db(freqs_hz, environment))
    lo, hi = med - env.lower_decile_db, med + env.upper_decile_db
    return (lo if lo.ndim else float(lo)), (hi if hi.ndim else float(hi))


def fa_to_temp_k(fa_db: ArrayLike, t0_k: float = T0_K) -> np.ndarray | float:
    """External noise temperature ``ta = T0 10**(Fa/10)`` in K [P372 §2]."""
    out = t0_k * np.asarray(db_to_ratio(fa_db))
    return out if out.ndim else float(out)


def temp_k_to_fa_db(temp_k: ArrayLike, t0_k: float = T0_K) -> np.ndarray | float:
    """External noise factor ``Fa = 10 log10(ta / T0)`` in dB; ``ta <= 0`` gives -inf / NaN."""
    return ratio_to_db(np.asarray(temp_k, dtype=np.float64) / t0_k)


def environment_distances_db(freqs_hz: ArrayLike, fa_db: ArrayLike) -> dict[str, float]:
    """RMS difference in dB between a measured ``Fa(f)`` and each environment's median curve.

    Non-finite measured values are skipped; NaN distances when none is finite.
    """
    f = np.asarray(freqs_hz, dtype=np.float64)
    fa = np.asarray(fa_db, dtype=np.float64)
    ok = np.isfinite(fa) & np.isfinite(f)
    out = {}
    for name in ENVIRONMENTS:
        if not np.any(ok):
            out[name] = float("nan")
            continue
        diff = fa[ok] - np.asarray(median_fa_db(f[ok], name))
        out[name] = float(np.sqrt(np.mean(diff**2)))
    return out


def closest_environment(freqs_hz: ArrayLike, fa_db: ArrayLike) -> str | None:
    """The P.372 environment whose median curve is nearest (RMS, dB) to the measured ``Fa(f)``.

    None when no measured value is finite.
    """
    dist = environment_distances_db(freqs_hz, fa_db)
    finite = {k: v for k, v in dist.items() if np.isfinite(v)}
    return min(finite, key=finite.get) if finite else None


def max_preamp_improvement_db(antenna_k: ArrayLike, receiver_k: ArrayLike) -> np.ndarray | float:
    r"""Largest C/N improvement any preamp (noiseless, infinite gain) could give at a site.

    .. math:: \Delta C/N_{max} = 10 \log_{10} \frac{T_a + T_r}{T_a}

    The limit of the preamp benefit as ``Tp -> 0`` and ``G -> inf`` (Friis 1944); P.372
    ("considering" c) warns that receivers quieter than the outside noise gain nothing.
    ``Ta <= 0`` gives NaN.
    """
    ta = np.asarray(antenna_k, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(ta > 0, np.asarray(ratio_to_db((ta + np.asarray(receiver_k, float)) / ta)), np.nan)
    return out if out.ndim else float(out)
