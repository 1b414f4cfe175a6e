"""Decibel and noise-temperature conversions shared by the capture and analysis sides.

All functions accept scalars or numpy arrays and return the same shape as float64.

Edge cases (documented, tested, never replaced by a silent sentinel):

* ``ratio_to_db(0)`` is ``-inf``; a negative ratio is ``nan`` (numpy emits no warning here).
* ``nf_db_to_k(0)`` is 0 K; noise figures below 0 dB give negative temperatures, which are
  physically impossible and therefore returned as ``nan``.

References
----------
Noise factor ``F = 1 + Te / T0`` with ``T0 = 290 K``: IEEE Std 161 definitions (from the IRE
1959 standard on measuring noise in linear two-ports). Boltzmann constant: SI Brochure, 9th ed.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

#: Boltzmann constant in J/K, exact (SI Brochure, 9th edition, 2019).
BOLTZMANN_J_PER_K = 1.380649e-23
#: Reference temperature for noise factor, K (IEEE Std 161).
T0_K = 290.0


def ratio_to_db(ratio: ArrayLike) -> np.ndarray | float:
    """Power ratio to decibels, ``10 log10(ratio)``; 0 gives -inf, negative gives nan."""
    r = np.asarray(ratio, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = 10.0 * np.log10(r)
    return out if out.ndim else float(out)


def db_to_ratio(db: ArrayLike) -> np.ndarray | float:
    """Decibels to a power ratio, ``10**(db/10)``; -inf gives 0."""
    d = np.asarray(db, dtype=np.float64)
    out = np.power(10.0, d / 10.0)
    return out if out.ndim else float(out)


def dbm_to_w(dbm: ArrayLike) -> np.ndarray | float:
    """Power in dBm to watts."""
    d = np.asarray(dbm, dtype=np.float64)
    out = 1e-3 * np.power(10.0, d / 10.0)
    return out if out.ndim else float(out)


def w_to_dbm(watts: ArrayLike) -> np.ndarray | float:
    """Power in watts to dBm; 0 W gives -inf."""
    w = np.asarray(watts, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = 10.0 * np.log10(w / 1e-3)
    return out if out.ndim else float(out)


def noise_factor_to_k(factor: ArrayLike, t0_k: float = T0_K) -> np.ndarray | float:
    """Noise factor (linear) to equivalent noise temperature, ``Te = (F - 1) T0`` (IEEE Std 161).

    A factor below 1 is impossible for a physical two-port and gives nan.
    """
    f = np.asarray(factor, dtype=np.float64)
    out = np.where(f >= 1.0, (f - 1.0) * t0_k, np.nan)
    return out if out.ndim else float(out)


def k_to_noise_factor(temp_k: ArrayLike, t0_k: float = T0_K) -> np.ndarray | float:
    """Equivalent noise temperature in K to noise factor, ``F = 1 + Te / T0`` (IEEE Std 161)."""
    t = np.asarray(temp_k, dtype=np.float64)
    out = np.where(t >= 0.0, 1.0 + t / t0_k, np.nan)
    return out if out.ndim else float(out)


def nf_db_to_k(nf_db: ArrayLike, t0_k: float = T0_K) -> np.ndarray | float:
    """Noise figure in dB to noise temperature in K, ``Te = T0 (10**(NF/10) - 1)``."""
    return noise_factor_to_k(db_to_ratio(nf_db), t0_k)


def k_to_nf_db(temp_k: ArrayLike, t0_k: float = T0_K) -> np.ndarray | float:
    """Noise temperature in K to noise figure in dB, ``NF = 10 log10(1 + Te/T0)``."""
    return ratio_to_db(k_to_noise_factor(temp_k, t0_k))


def thermal_noise_dbm_per_hz(temp_k: float = T0_K) -> float:
    """Available thermal noise density ``k T`` in dBm/Hz (-173.975 dBm/Hz at 290 K)."""
    return float(w_to_dbm(BOLTZMANN_J_PER_K * temp_k))


def mhz_to_hz(mhz: float) -> float:
    """Megahertz (command-line unit) to hertz (internal unit)."""
    return float(mhz) * 1e6


def hz_to_mhz(hz: float) -> float:
    """Hertz (internal unit) to megahertz (display unit)."""
    return float(hz) / 1e6
