"""Noise temperature and noise figure arithmetic: Friis cascades, the Y-factor method,
terminated-input ratios, antenna noise temperature, preamp benefit and uncertainty.

All functions accept scalars or numpy arrays (broadcast together) and return float64 arrays
or floats. Temperatures are kelvin (``_k``), gains and figures decibels (``_db``) unless the
name says ``factor`` or ``ratio`` (linear). Decibel and noise-temperature conversions come
from :mod:`survey.units`; impossible results (a noise temperature below 0 K, ``Y <= 1``) are
NaN, never a silent sentinel.

References
----------
.. [Friis1944] H. T. Friis, "Noise figures of radio receivers", Proc. IRE 32, 419-422 (1944).
.. [IEEE161] IEEE Std 161 definitions (from the IRE 1959 standard on measuring noise in
   linear two-ports): ``F = 1 + Te/T0``, ``T0 = 290 K``, ENR, the Y-factor method.
.. [Dicke1946] R. H. Dicke, "The measurement of thermal radiation at microwave frequencies",
   Rev. Sci. Instrum. 17, 268 (1946): the radiometer equation (from memory; the formula is
   confirmed in radio-astronomy observatory documentation).
.. [GUM] JCGM 100:2008 (law of propagation of uncertainty) and JCGM 101:2008 (Monte Carlo
   propagation), from memory.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Mapping, Sequence

import numpy as np
from numpy.typing import ArrayLike

from analysis.errors import BadParameterError
from survey.units import (
    T0_K,
    db_to_ratio,
    k_to_nf_db,
    nf_db_to_k,
    ratio_to_db,
    thermal_noise_dbm_per_hz,
)


def _out(x: np.ndarray) -> np.ndarray | float:
    x = np.asarray(x, dtype=np.float64)
    return x if x.ndim else float(x)


# -- thermal noise -------------------------------------------------------------------------


def thermal_noise_dbm(temp_k: float, bandwidth_hz: ArrayLike) -> np.ndarray | float:
    """Available thermal noise power ``k T B`` in dBm.

    ``k T0`` is -173.975 dBm/Hz; in 200 kHz this gives -120.96 dBm ([IEEE161], SI Brochure).
    """
    return _out(thermal_noise_dbm_per_hz(temp_k) + ratio_to_db(bandwidth_hz))


# -- Friis cascade ---------------------------------------------------------------------------


def _stage_gains(n_stages: int, gains_db: Sequence[ArrayLike]) -> list[np.ndarray]:
    if len(gains_db) not in (n_stages, n_stages - 1):
        raise BadParameterError(
            f"a cascade of {n_stages} stages needs {n_stages} (or {n_stages - 1}) stage gains, "
            f"got {len(gains_db)}: give one gain in dB per stage"
        )
    return [np.asarray(db_to_ratio(g), dtype=np.float64) for g in gains_db]


def cascade_noise_factor(
    factors: Sequence[ArrayLike], gains_db: Sequence[ArrayLike], cumulative: bool = False
) -> np.ndarray | float:
    r"""Noise factor of a cascade of stages (Friis 1944).

    .. math:: F = F_1 + \frac{F_2 - 1}{G_1} + \frac{F_3 - 1}{G_1 G_2} + \dots

    Parameters
    ----------
    factors : sequence of array_like
        Linear noise factor of each stage, first stage first.
    gains_db : sequence of array_like
        Available gain of each stage in dB (the last stage's gain may be omitted).
    cumulative : bool
        If True return the factor after each stage (stage axis first).

    References
    ----------
    [Friis1944]
    """
    if len(factors) == 0:
        raise BadParameterError("a cascade needs at least one stage")
    # F = 1 + Te/T0 term by term: F1 + (F2-1)/G1 + ... = 1 + (Te1 + Te2/G1 + ...)/T0
    temps = [(np.asarray(f, dtype=np.float64) - 1.0) * T0_K for f in factors]
    return _out(1.0 + np.asarray(cascade_temperature_k(temps, gains_db, cumulative)) / T0_K)


def cascade_temperature_k(
    temps_k: Sequence[ArrayLike], gains_db: Sequence[ArrayLike], cumulative: bool = False
) -> np.ndarray | float:
    r"""Equivalent input noise temperature of a cascade (Friis 1944, temperature form).

    .. math:: T_e = T_1 + \frac{T_2}{G_1} + \frac{T_3}{G_1 G_2} + \dots

    Parameters as :func:`cascade_noise_factor`, with temperatures in K.
    """
    if len(temps_k) == 0:
        raise BadParameterError("a cascade needs at least one stage")
    gains = _stage_gains(len(temps_k), gains_db)
    total = np.asarray(temps_k[0], dtype=np.float64)
    gain_before = np.ones_like(total)
    steps = [total]
    for k in range(1, len(temps_k)):
        gain_before = gain_before * gains[k - 1]
        total = total + np.asarray(temps_k[k], dtype=np.float64) / gain_before
        steps.append(total)
    return _out(np.stack(np.broadcast_arrays(*steps))) if cumulative else _out(total)


def cascade_nf_db(
    nfs_db: Sequence[ArrayLike], gains_db: Sequence[ArrayLike], cumulative: bool = False
) -> np.ndarray | float:
    """Noise figure (dB) of a cascade from stage noise figures and gains in dB (Friis 1944)."""
    factors = [db_to_ratio(nf) for nf in nfs_db]
    return _out(ratio_to_db(cascade_noise_factor(factors, gains_db, cumulative=cumulative)))


def cascade_gain_db(gains_db: Sequence[ArrayLike]) -> np.ndarray | float:
    """Total gain of a cascade in dB: available gains multiply, so dB add ([Friis1944])."""
    return _out(np.sum(np.stack(np.broadcast_arrays(*[np.asarray(g, float) for g in gains_db])), axis=0))


# -- Y-factor method -------------------------------------------------------------------------


def enr_db_to_hot_k(enr_db: ArrayLike, t0_k: float = T0_K) -> np.ndarray | float:
    """Hot temperature of a noise source from its excess noise ratio, ``T_hot = T0 (1 + ENR)``.

    ENR is defined against ``T0 = 290 K`` whatever the physical cold temperature ([IEEE161]).
    """
    return _out(t0_k * (1.0 + np.asarray(db_to_ratio(enr_db))))


def y_factor(hot_power: ArrayLike, cold_power: ArrayLike) -> np.ndarray | float:
    """``Y = N_hot / N_cold`` from linear powers (any common unit) ([IEEE161], Y-factor method)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return _out(np.asarray(hot_power, float) / np.asarray(cold_power, float))


def y_factor_temperature_k(y: ArrayLike, hot_k: ArrayLike, cold_k: ArrayLike = T0_K) -> np.ndarray | float:
    r"""Equivalent noise temperature from the Y-factor, general form ([IEEE161], Y-factor method).

    .. math:: T_e = \frac{T_{hot} - Y T_{cold}}{Y - 1}

    ``Y <= 1`` (the hot source did not raise the noise) gives NaN.
    """
    y = np.asarray(y, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        te = (np.asarray(hot_k, float) - y * np.asarray(cold_k, float)) / (y - 1.0)
    return _out(np.where(y > 1.0, te, np.nan))


def y_factor_nf_db(enr_db: ArrayLike, y: ArrayLike) -> np.ndarray | float:
    r"""Noise figure from ENR and Y when the cold source is at ``T0`` ([IEEE161]).

    .. math:: NF = ENR_{dB} - 10 \log_{10}(Y - 1)

    ``Y <= 1`` gives NaN.
    """
    y = np.asarray(y, dtype=np.float64)
    nf = np.asarray(enr_db, float) - np.asarray(ratio_to_db(np.where(y > 1.0, y - 1.0, np.nan)))
    return _out(nf)


def y_factor_nf_db_general(
    enr_db: ArrayLike, y: ArrayLike, cold_k: ArrayLike = T0_K, t0_k: float = T0_K
) -> np.ndarray | float:
    """Noise figure from ENR and Y for any cold temperature ([IEEE161]).

    General form ``Te = (T_hot - Y T_cold)/(Y - 1)`` with ``T_hot = T0 (1 + ENR)``, then
    ``NF = 10 log10(1 + Te/T0)``.
    """
    te = y_factor_temperature_k(y, enr_db_to_hot_k(enr_db, t0_k), cold_k)
    return _out(k_to_nf_db(te, t0_k))


def second_stage_correction_k(t12_k: ArrayLike, t2_k: ArrayLike, gain1: ArrayLike) -> np.ndarray | float:
    r"""Noise temperature of the first stage from the cascade's ([Friis1944], [IEEE161]).

    .. math:: T_1 = T_{12} - T_2 / G_1

    ``gain1`` is linear. A negative result (measurement noise on a very quiet first stage) is
    kept as a number so that its uncertainty can be propagated; convert with
    :func:`survey.units.k_to_nf_db`, which turns it into NaN.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        return _out(np.asarray(t12_k, float) - np.asarray(t2_k, float) / np.asarray(gain1, float))


def gain_from_hot_cold(
    n12_hot: ArrayLike, n12_cold: ArrayLike, n2_hot: ArrayLike, n2_cold: ArrayLike
) -> np.ndarray | float:
    r"""Linear gain of the device under test from hot-minus-cold differences (Y-factor method).

    .. math:: G_1 = \frac{N_{12,hot} - N_{12,cold}}{N_{2,hot} - N_{2,cold}}

    Powers are linear, measured by the same receiver at the same gain setting with (``12``) and
    without (``2``) the device. A non-positive denominator gives NaN.
    """
    den = np.asarray(n2_hot, float) - np.asarray(n2_cold, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        g = (np.asarray(n12_hot, float) - np.asarray(n12_cold, float)) / den
    return _out(np.where(den > 0, g, np.nan))


# -- terminated input, antenna temperature, preamp benefit -----------------------------------


def preamp_temp_from_terminated_k(
    ratio: ArrayLike, gain: ArrayLike, ambient_k: ArrayLike, receiver_k: ArrayLike
) -> np.ndarray | float:
    r"""Preamp noise temperature from terminated runs with and without it (Friis 1944).

    Solves :math:`R = N_{sys}/N_{rx} = \frac{G (T_{amb} + T_p) + T_r}{T_{amb} + T_r}` for
    :math:`T_p = \frac{R (T_{amb} + T_r) - T_r}{G} - T_{amb}`. ``gain`` is linear.
    """
    r = np.asarray(ratio, float)
    tr = np.asarray(receiver_k, float)
    ta = np.asarray(ambient_k, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return _out((r * (ta + tr) - tr) / np.asarray(gain, float) - ta)


def antenna_temp_from_ratio_k(ratio: ArrayLike, ambient_k: ArrayLike, receiver_k: ArrayLike) -> np.ndarray | float:
    r"""Antenna noise temperature from antenna and terminated runs of one receiver.

    Solves :math:`N_{ant}/N_{term} = \frac{T_a + T_r}{T_{amb} + T_r}` for
    :math:`T_a = R (T_{amb} + T_r) - T_r` (noise powers add, [Friis1944]; [IEEE161]).
    """
    tr = np.asarray(receiver_k, float)
    return _out(np.asarray(ratio, float) * (np.asarray(ambient_k, float) + tr) - tr)


def antenna_temp_through_preamp_k(
    ratio: ArrayLike, gain: ArrayLike, preamp_k: ArrayLike, ambient_k: ArrayLike, receiver_k: ArrayLike
) -> np.ndarray | float:
    r"""Antenna noise temperature from antenna and terminated runs through a preamp.

    Solves :math:`R = \frac{G (T_a + T_p) + T_r}{G (T_{amb} + T_p) + T_r}` for :math:`T_a` ([Friis1944]).
    With gain in front, the receiver's own noise matters less, so ``Ta`` well below ``Tr``
    is resolved better than with the receiver alone.
    """
    g = np.asarray(gain, float)
    tp = np.asarray(preamp_k, float)
    tr = np.asarray(receiver_k, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return _out((np.asarray(ratio, float) * (g * (np.asarray(ambient_k, float) + tp) + tr) - tr) / g - tp)


def preamp_benefit_db(
    antenna_k: ArrayLike, preamp_k: ArrayLike, gain_db: ArrayLike, receiver_k: ArrayLike
) -> np.ndarray | float:
    r"""Carrier-to-noise improvement a preamp gives on an antenna ([Friis1944]).

    .. math:: \Delta C/N = 10 \log_{10} \frac{T_a + T_r}{T_a + T_p + T_r / G}

    A preamp helps only where the outside noise ``Ta`` does not dominate (ITU-R P.372,
    "considering" c).
    """
    g = np.asarray(db_to_ratio(gain_db))
    ta = np.asarray(antenna_k, float)
    tr = np.asarray(receiver_k, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return _out(ratio_to_db((ta + tr) / (ta + np.asarray(preamp_k, float) + tr / g)))


def projected_benefit_db(
    antenna_k: ArrayLike, preamp_k: ArrayLike, gain_db: ArrayLike, other_receiver_nf_db: ArrayLike
) -> np.ndarray | float:
    """:func:`preamp_benefit_db` for another receiver given by its noise figure in dB.

    ``Tr = T0 (10**(NF/10) - 1)`` ([IEEE161]) with the measured ``Ta``, ``Tp`` and ``G`` ([Friis1944]).
    """
    return preamp_benefit_db(antenna_k, preamp_k, gain_db, nf_db_to_k(other_receiver_nf_db))


def noise_rise_db(
    antenna_k: ArrayLike, preamp_k: ArrayLike, gain_db: ArrayLike, receiver_k: ArrayLike
) -> np.ndarray | float:
    r"""Noise rise a preamp causes on an antenna input ([Friis1944]).

    .. math:: N_{sys}/N_{rx} = \frac{G (T_a + T_p) + T_r}{T_a + T_r}

    Note the identity ``delta C/N = gain - noise rise`` (all in dB).
    """
    g = np.asarray(db_to_ratio(gain_db))
    ta = np.asarray(antenna_k, float)
    tr = np.asarray(receiver_k, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return _out(ratio_to_db((g * (ta + np.asarray(preamp_k, float)) + tr) / (ta + tr)))


# -- measurement statistics --------------------------------------------------------------------


def radiometer_sigma_rel(bandwidth_hz: ArrayLike, dwell_s: ArrayLike) -> np.ndarray | float:
    r"""Relative standard deviation of one noise-power estimate, :math:`1/\sqrt{B \tau}`.

    ``B`` is the noise bandwidth (the channel bandwidth) in Hz and ``tau`` the integration time
    (the dwell) in s. 200 kHz and 0.1 s give 0.71 % (0.031 dB) [Dicke1946].
    """
    b = np.asarray(bandwidth_hz, float)
    t = np.asarray(dwell_s, float)
    if np.any(b <= 0) or np.any(t <= 0):
        raise BadParameterError("bandwidth and dwell must be positive for the radiometer equation")
    return _out(1.0 / np.sqrt(b * t))


def mean_and_sigma_rel(samples_linear: np.ndarray, axis: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Mean of repeated linear power readings and the empirical relative standard error of it.

    Type A evaluation of standard uncertainty ([GUM] §4.2).

    ``sigma_rel = std(ddof=1) / mean / sqrt(n)`` along ``axis`` (NaN readings ignored); NaN
    where fewer than two readings exist.
    """
    x = np.asarray(samples_linear, dtype=np.float64)
    n = np.sum(np.isfinite(x), axis=axis)
    with np.errstate(invalid="ignore", divide="ignore"):
        total = np.nansum(x, axis=axis)
        mean = np.where(n > 0, total / np.maximum(n, 1), np.nan)
        dev = np.where(np.isfinite(x), x - np.expand_dims(mean, axis), 0.0)
        var = np.sum(dev**2, axis=axis) / np.maximum(n - 1, 1)
        sigma = np.where(n >= 2, np.sqrt(var) / mean / np.sqrt(np.maximum(n, 1)), np.nan)
    return mean, sigma


# -- uncertainty propagation ----------------------------------------------------------------

Model = Callable[[Mapping[str, np.ndarray]], np.ndarray]


def propagate_linear(model: Model, values: Mapping[str, ArrayLike], sigmas: Mapping[str, ArrayLike]) -> np.ndarray:
    r"""Standard uncertainty of ``model(values)`` by first-order propagation ([GUM] §5.1).

    .. math:: u_y^2 = \sum_k \left(\frac{\partial y}{\partial x_k}\right)^2 u_k^2

    Inputs are taken as independent; partial derivatives are central differences with a step
    of 1e-3 of each input's standard uncertainty (the model is smooth on that scale). Inputs
    missing from ``sigmas`` or with zero uncertainty are exact. Works element-wise on arrays.
    """
    base = {k: np.asarray(v, dtype=np.float64) for k, v in values.items()}
    var = np.zeros(np.shape(model(base)), dtype=np.float64)
    for key, sigma in sigmas.items():
        s = np.broadcast_to(np.asarray(sigma, dtype=np.float64), np.shape(base[key]))
        if not np.any(s > 0):
            continue
        h = np.where(s > 0, s * 1e-3, 1.0)
        up = dict(base); up[key] = base[key] + h
        dn = dict(base); dn[key] = base[key] - h
        with np.errstate(invalid="ignore", divide="ignore"):
            deriv = (np.asarray(model(up)) - np.asarray(model(dn))) / (2.0 * h)
        var = var + np.where(s > 0, (deriv * s) ** 2, 0.0)
    return np.sqrt(var)


def propagate_monte_carlo(
    model: Model,
    values: Mapping[str, ArrayLike],
    sigmas: Mapping[str, ArrayLike],
    n_draws: int = 20000,
    seed: int = 0,
) -> tuple[np.ndarray, np.ndarray]:
    """Mean and standard deviation of ``model`` with Gaussian inputs, by Monte Carlo ([GUM] 101).

    Each input ``x_k`` is drawn ``N(values[k], sigmas[k]**2)`` independently, ``n_draws`` times
    with ``np.random.default_rng(seed)``. Returns ``(mean, std)`` element-wise (NaN draws of
    the output, e.g. a negative temperature in dB, are ignored).
    """
    rng = np.random.default_rng(seed)
    draws = {}
    for key, v in values.items():
        v = np.asarray(v, dtype=np.float64)
        s = np.broadcast_to(np.asarray(sigmas.get(key, 0.0), dtype=np.float64), v.shape)
        draws[key] = v[None, ...] + s[None, ...] * rng.standard_normal((n_draws,) + v.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.asarray(model(draws), dtype=np.float64)
    ok = np.isfinite(y)
    n = ok.sum(axis=0)
    y0 = np.where(ok, y, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n > 0, y0.sum(axis=0) / np.maximum(n, 1), np.nan)
        var = np.where(ok, (y - mean) ** 2, 0.0).sum(axis=0) / np.maximum(n - 1, 1)
    return mean, np.where(n >= 2, np.sqrt(var), np.nan)


# -- ENR tables -------------------------------------------------------------------------------


@dataclass(frozen=True)
class EnrTable:
    """Excess noise ratio of a noise source against frequency.

    ``freqs_hz`` ascending, ``enr_db`` in dB; ``source`` names the file it came from.
    Interpolated linearly in dB between points; see :meth:`at`.
    """

    freqs_hz: np.ndarray
    enr_db: np.ndarray
    source: str = ""

    def at(self, freqs_hz: ArrayLike, margin_hz: float = 1e6) -> np.ndarray:
        """ENR in dB at ``freqs_hz``.

        Linear interpolation in dB between table points (common practice, no source; noise
        source ENR varies slowly with frequency); within ``margin_hz`` beyond either end the
        end value is held; further out :class:`BadParameterError` names the covered range.
        """
        f = np.atleast_1d(np.asarray(freqs_hz, dtype=np.float64))
        lo, hi = float(self.freqs_hz[0]), float(self.freqs_hz[-1])
        outside = (f < lo - margin_hz) | (f > hi + margin_hz)
        if np.any(outside):
            bad = f[outside]
            raise BadParameterError(
                f"ENR table {self.source or ''} covers {lo / 1e6:.3f}-{hi / 1e6:.3f} MHz but channels "
                f"{bad.min() / 1e6:.3f}-{bad.max() / 1e6:.3f} MHz lie more than {margin_hz / 1e6:.2f} MHz "
                "outside it; add ENR points covering the band (the table is never extrapolated)"
            )
        return np.interp(f, self.freqs_hz, self.enr_db)


def parse_enr_csv(text: str, source: str = "") -> EnrTable:
    """Parse an ENR table: CSV rows ``freq_mhz,enr_db`` (optional header, ``#`` comments).

    Needs at least two points with strictly ascending frequencies and finite values; otherwise
    :class:`BadParameterError` says which line is wrong.
    """
    freqs, enrs = [], []
    name = source or "ENR table"
    for lineno, row in enumerate(csv.reader(io.StringIO(text)), start=1):
        if not row or not "".join(row).strip() or row[0].strip().startswith("#"):
            continue
        if len(row) < 2:
            raise BadParameterError(f"{name} line {lineno}: expected freq_mhz,enr_db, got {','.join(row)!r}")
        a, b = row[0].strip(), row[1].strip()
        try:
            f_mhz, enr = float(a), float(b)
        except ValueError:
            if not freqs and a.lower().startswith("freq"):
                continue  # header
            raise BadParameterError(f"{name} line {lineno}: {a!r},{b!r} are not numbers (freq_mhz,enr_db)") from None
        if not (np.isfinite(f_mhz) and np.isfinite(enr)) or f_mhz <= 0:
            raise BadParameterError(f"{name} line {lineno}: frequency must be positive and ENR finite")
        if freqs and f_mhz * 1e6 <= freqs[-1]:
            raise BadParameterError(f"{name} line {lineno}: frequencies must be strictly ascending")
        freqs.append(f_mhz * 1e6)
        enrs.append(enr)
    if len(freqs) < 2:
        raise BadParameterError(
            f"{name} has {len(freqs)} point(s); give at least two rows freq_mhz,enr_db spanning the band "
            "(or a flat ENR with --enr-db)"
        )
    return EnrTable(np.asarray(freqs), np.asarray(enrs), source)


def load_enr_table(path: str | Path) -> EnrTable:
    """Read an ENR table CSV (``freq_mhz,enr_db``) from ``path``; see :func:`parse_enr_csv`."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise BadParameterError(f"cannot read ENR table {p}: {exc.strerror or exc}; check the path") from exc
    return parse_enr_csv(text, source=str(p))
