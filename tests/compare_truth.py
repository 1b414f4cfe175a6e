"""Known-truth channel readings for the comparison tests (simulated; invented stations).

Model per channel ``j`` (all levels in dBFS, ratios in dB):

* base noise power ``N_b = -70`` dBFS (the receiver's own floor, flat);
* a station of true base C/N ``cn0_j`` (None: unoccupied channel);
* slow log-normal fading ``F_j(t)`` in dB, an AR(1) process (standard deviation ``fade_db``,
  correlation time ``fade_tau_s``), the same for both configurations at a given time;
* the test configuration multiplies signals by the gain ``G_j`` and the noise by ``R_j``:
  true ``delta C/N = G_j - R_j`` dB, whatever the fading;
* radiometer scatter: measured ``N`` and ``P`` carry Gaussian relative errors ``rel_n`` and
  ``rel_p`` (radiometer equation ``1/sqrt(B tau)``, Dicke 1946, made larger here so it shows).

``received`` is set when ``P - N`` (dB) exceeds the 3 dB detection margin, as the sweep
engine does. Everything is seeded (``np.random.default_rng(seed)``).

The database written by :func:`write_db` also holds the station rows (the ``stations`` table)
the census reads: each station is a transmitter on its channel's raster frequency (its carrier,
by construction), recorded as an emission in every sweep where its measured C/N is at least
:data:`EMISSION_FLOOR_CN_DB` (the emission detector keeps stations down to about 0 dB C/N),
with the same measured power and floor as its channel row.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta, timezone

import numpy as np

from survey.records import ChannelReading, EmissionReading, HopReading, RunInfo, SweepResult, SweepSettings
from survey.store import ChannelMatrix, SurveyStore
from survey.units import db_to_ratio, ratio_to_db

FREQS_HZ = np.arange(88_100_000, 88_100_000 + 24 * 200_000, 200_000, dtype=np.int64)
#: True base C/N (dB) per channel; NaN = no station. Channels 2 and 21 are weak.
CN0_DB = np.array([25, 18, -1.0, np.nan, 30, 14, np.nan, 22, 9, np.nan, 35, 16,
                   np.nan, 20, 12, np.nan, 28, 24, np.nan, 17, 11, 4.0, np.nan, 26], float)
#: Preamp gain per channel (dB): a broad passband, low at the top edge.
GAIN_DB = np.array([14, 14, 14, 14, 14, 14, 13, 13, 13, 12, 12, 12,
                    11, 11, 11, 10, 10, 9.6, 9, 9, 8.6, 2.0, 2, 2], float)
#: Noise rise per channel (dB): preamp noise amplified, roughly flat.
RISE_DB = np.full(FREQS_HZ.size, 9.0)
#: Lowest measured C/N (dB) at which the fixture records a station's emission in a sweep.
EMISSION_FLOOR_CN_DB = 0.0
START = datetime(2026, 5, 1, 18, 0, 0, tzinfo=timezone.utc)


@dataclass(frozen=True)
class Truth:
    """Arrays ``(n_sweeps, n_channels)`` per configuration plus times and the true delta."""

    base_power: np.ndarray
    base_noise: np.ndarray
    test_power: np.ndarray
    test_noise: np.ndarray
    base_s: np.ndarray
    test_s: np.ndarray
    delta_db: np.ndarray
    cn0_db: np.ndarray


def _ar1(rng: np.random.Generator, times_s: np.ndarray, sigma_db: float, tau_s: float, m: int) -> np.ndarray:
    out = np.empty((times_s.size, m))
    out[0] = rng.normal(0.0, sigma_db, m)
    for k in range(1, times_s.size):
        rho = np.exp(-(times_s[k] - times_s[k - 1]) / tau_s)
        out[k] = rho * out[k - 1] + np.sqrt(1 - rho * rho) * rng.normal(0.0, sigma_db, m)
    return out


def make_truth(
    seed: int,
    n_per_side: int = 40,
    *,
    alternate: bool = True,
    spacing_s: float = 10.0,
    fade_db: float = 3.0,
    fade_tau_s: float = 600.0,
    rel_n: float = 0.03,
    rel_p: float = 0.03,
    gain_db: np.ndarray = GAIN_DB,
    rise_db: np.ndarray = RISE_DB,
) -> Truth:
    """Simulated readings: base and test alternating (or base first, then test)."""
    rng = np.random.default_rng(seed)
    m = FREQS_HZ.size
    n = 2 * n_per_side
    times = np.arange(n) * spacing_s
    fade = _ar1(rng, times, fade_db, fade_tau_s, m)
    is_test = (np.arange(n) % 2 == 1) if alternate else (np.arange(n) >= n_per_side)
    noise_b = -70.0
    cn0 = np.where(np.isfinite(CN0_DB), CN0_DB, -np.inf)
    sig_b = noise_b + cn0 + fade  # dBFS, -inf for no station
    noise = np.where(is_test[:, None], noise_b + rise_db, noise_b) + np.zeros((n, m))
    sig = np.where(is_test[:, None], sig_b + gain_db, sig_b)
    n_lin = np.asarray(db_to_ratio(noise)) * (1 + rel_n * rng.normal(size=(n, m)))
    p_lin = (np.asarray(db_to_ratio(sig)) + np.asarray(db_to_ratio(noise))) * (1 + rel_p * rng.normal(size=(n, m)))
    power = np.asarray(ratio_to_db(p_lin))
    noise_m = np.asarray(ratio_to_db(n_lin))
    return Truth(
        base_power=power[~is_test], base_noise=noise_m[~is_test],
        test_power=power[is_test], test_noise=noise_m[is_test],
        base_s=times[~is_test], test_s=times[is_test],
        delta_db=gain_db - rise_db, cn0_db=CN0_DB.copy(),
    )


def _stamp(t_s: float) -> str:
    return (START + timedelta(seconds=float(t_s))).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def matrices(truth: Truth, margin_db: float = 3.0) -> tuple[ChannelMatrix, ChannelMatrix]:
    """The truth as two :class:`ChannelMatrix` objects (what the store's reader returns)."""

    def one(power, noise, times):
        return ChannelMatrix(
            sweep_ids=np.arange(power.shape[0], dtype=np.int64),
            started_utc=tuple(_stamp(t) for t in times),
            freqs_hz=FREQS_HZ.copy(),
            power_dbfs=power.astype(np.float32),
            noise_dbfs=noise.astype(np.float32),
            received=(power - noise) >= margin_db,
        )

    return one(truth.base_power, truth.base_noise, truth.base_s), one(truth.test_power, truth.test_noise, truth.test_s)


def _sweep(config: str, power: np.ndarray, noise: np.ndarray, t_s: float, settings: SweepSettings,
           input: str = "antenna") -> SweepResult:
    bw = settings.channel_bw_hz
    chans, emissions = [], []
    for j, f in enumerate(FREQS_HZ.tolist()):
        p, nz = float(power[j]), float(noise[j])
        received = p - nz >= settings.received_margin_db
        cn = float(ratio_to_db(db_to_ratio(p) / db_to_ratio(nz) - 1.0)) if received else None
        chans.append(ChannelReading(int(f), 0, p, nz, nz - float(ratio_to_db(bw)), cn, received))
        excess = float(db_to_ratio(p) / db_to_ratio(nz) - 1.0)
        own_cn = float(ratio_to_db(excess)) if excess > 0 else float("nan")
        if np.isfinite(CN0_DB[j]) and own_cn >= EMISSION_FLOOR_CN_DB:
            emissions.append(EmissionReading(float(f), 0, "fm", 150_000.0, p, nz, own_cn, None, False, int(f)))
    hop = HopReading(0, 90_000_000.0, settings.sample_rate_hz, 2048, 0.0, float(np.median(noise)) - 53.0,
                     _stamp(t_s))
    return SweepResult(config, input, _stamp(t_s), _stamp(t_s + 2.0), settings, (hop,), tuple(chans),
                       emissions=tuple(emissions))


def write_db(path, truth: Truth, base: str = "bare", test: str = "preamp-a",
             base_settings: SweepSettings | None = None, test_settings: SweepSettings | None = None,
             input: str = "antenna") -> None:
    """Write the truth as sweeps (time order) through :meth:`SurveyStore.write_sweep`."""
    bs = base_settings or SweepSettings(band="simulated-europe", gain_db=30.0)
    ts = test_settings or bs
    items = [(t, base, truth.base_power[k], truth.base_noise[k], bs) for k, t in enumerate(truth.base_s)]
    items += [(t, test, truth.test_power[k], truth.test_noise[k], ts) for k, t in enumerate(truth.test_s)]
    items.sort(key=lambda x: x[0])
    with SurveyStore(path) as store:
        run = store.begin_run(RunInfo("simulated", "known-truth fixture (simulated)", "test", {}, seed=0))
        for t, label, p, nz, settings in items:
            store.write_sweep(run, _sweep(label, p, nz, t, settings, input))
        store.end_run(run)
