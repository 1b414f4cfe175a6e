"""Survey databases built from a chosen noise truth, for the noise workflow tests.

Per-channel noise powers follow the Friis noise model (receiver alone ``N ~ T_in + Tr``,
preamp + receiver ``N ~ G (T_in + Tp) + Tr``) times an arbitrary receiver conversion factor
with a ripple across the band, plus seeded radiometer-level noise ``1/sqrt(B tau)`` on every
reading. Simulated data, invented stations.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from analysis.noise.outside import fa_to_temp_k, median_fa_db
from survey.records import ChannelReading, HopReading, RunInfo, SweepResult, SweepSettings
from survey.store import SurveyStore
from survey.units import T0_K, db_to_ratio, nf_db_to_k, ratio_to_db

FREQS_HZ = np.arange(87_900_000, 107_900_001, 200_000, dtype=np.int64)
#: Invented stations: (frequency, signal temperature at the antenna in K).
STATIONS = ((88_500_000, 3e6), (90_100_000, 8e5), (92_300_000, 2e6), (94_700_000, 5e6),
            (96_100_000, 1e6), (97_500_000, 4e6), (98_300_000, 6e5), (99_100_000, 3e6),
            (100_700_000, 2e6), (102_500_000, 7e6), (104_300_000, 1e6), (106_900_000, 2e6))


@dataclass(frozen=True)
class NoiseTruth:
    """The truth the database is built from (units in the names)."""

    receiver_nf_db: float = 5.5
    preamp_nf_db: float = 1.0
    peak_gain_db: float = 20.0
    center_hz: float = 98.0e6
    passband_hz: float = 10.0e6
    enr_db: float = 15.0
    environment: str = "galactic"
    ambient_k: float = 290.0
    channel_bw_hz: float = 200_000.0
    dwell_s: float = 0.1
    receiver_gain_db: float = 29.7
    #: extra noise at the receiver input of the system on antenna sweeps only (e.g. interference
    #: a powered preamp lets in), K; not seen with a noise source or a load
    extra_antenna_system_k: float = 0.0
    #: noise entering after the preamp's gain on every input (e.g. a noisy supply), K at the receiver input
    supply_k: float = 0.0

    def gain_db(self, f_hz):
        """Preamp gain: a maximally flat second-order passband around ``center_hz``."""
        x = (np.asarray(f_hz, float) - self.center_hz) / (self.passband_hz / 2)
        return self.peak_gain_db - 10 * np.log10(1 + x**4)

    @property
    def receiver_k(self) -> float:
        return float(nf_db_to_k(self.receiver_nf_db))

    @property
    def preamp_k(self) -> float:
        return float(nf_db_to_k(self.preamp_nf_db))

    def antenna_k(self, f_hz):
        return fa_to_temp_k(median_fa_db(f_hz, self.environment))

    def input_k(self, kind: str, f_hz):
        if kind == "antenna":
            return self.antenna_k(f_hz)
        if kind == "noise-hot":
            return np.full(np.shape(f_hz), T0_K * (1 + db_to_ratio(self.enr_db)))
        return np.full(np.shape(f_hz), self.ambient_k)  # terminated, noise-cold

    def total_k(self, kind: str, with_preamp: bool, f_hz):
        t_in = self.input_k(kind, f_hz)
        if not with_preamp:
            return t_in + self.receiver_k
        extra = self.extra_antenna_system_k if kind == "antenna" else 0.0
        return db_to_ratio(self.gain_db(f_hz)) * (t_in + self.preamp_k) + self.receiver_k + extra + self.supply_k

    @staticmethod
    def conversion_dbfs(f_hz):
        """dBFS of 290 K at the receiver input: arbitrary level with a 0.6 dB ripple."""
        return -95.0 + 0.6 * np.sin(2 * np.pi * (np.asarray(f_hz, float) - 87e6) / 7e6)


def sweep_result(truth: NoiseTruth, configuration: str, kind: str, with_preamp: bool,
                 rng: np.random.Generator, started_utc: str, gain_db: float | None = None,
                 channel_bw_hz: float | None = None, clip_fraction: float = 0.0) -> SweepResult:
    """One sweep of the truth with radiometer-level noise on P and N."""
    f = FREQS_HZ
    sigma = 1 / np.sqrt(truth.channel_bw_hz * truth.dwell_s)
    scale = db_to_ratio(truth.conversion_dbfs(f)) / T0_K
    noise_lin = scale * truth.total_k(kind, with_preamp, f)
    signal_lin = np.zeros(f.size)
    if kind == "antenna":
        g = db_to_ratio(truth.gain_db(f)) if with_preamp else np.ones(f.size)
        for f_st, s_k in STATIONS:
            i = int(np.searchsorted(f, f_st))
            signal_lin[i] = scale[i] * g[i] * s_k * (1 + 0.02 * rng.standard_normal())
    n_meas = noise_lin * (1 + sigma * rng.standard_normal(f.size))
    p_meas = (noise_lin + signal_lin) * (1 + sigma * rng.standard_normal(f.size))
    cn = ratio_to_db(np.maximum(p_meas - n_meas, 1e-30) / n_meas)
    received = (p_meas > n_meas) & (cn > 3.0)
    channels = tuple(
        ChannelReading(
            freq_hz=int(f[i]), hop_index=i // 10, power_dbfs=float(ratio_to_db(p_meas[i])),
            noise_dbfs=float(ratio_to_db(n_meas[i])),
            noise_density_dbfs_hz=float(ratio_to_db(n_meas[i] / truth.channel_bw_hz)),
            cn_db=float(cn[i]) if received[i] else None, received=bool(received[i]),
        )
        for i in range(f.size)
    )
    hops = tuple(
        HopReading(index=h, center_hz=float(np.mean(f[h * 10:(h + 1) * 10])), sample_rate_hz=2.4e6,
                   n_samples=240_000, clip_fraction=clip_fraction,
                   floor_dbfs_hz=float(np.median(ratio_to_db(n_meas[h * 10:(h + 1) * 10] / truth.channel_bw_hz))),
                   started_utc=started_utc)
        for h in range((f.size + 9) // 10)
    )
    settings = SweepSettings(band="simulated-test", channel_bw_hz=channel_bw_hz or truth.channel_bw_hz,
                             dwell_s=truth.dwell_s,
                             gain_db=truth.receiver_gain_db if gain_db is None else gain_db)
    return SweepResult(configuration=configuration, input=kind, started_utc=started_utc, ended_utc=started_utc,
                       settings=settings, hops=hops, channels=channels, notes="simulated")


def build_db(path: Path, truth: NoiseTruth, plan: dict[str, tuple[str, ...]], n_sweeps: int = 4, seed: int = 1,
             overrides: dict | None = None, receiver: str = "bare") -> Path:
    """Write ``n_sweeps`` sweeps of each (configuration, input) in ``plan``.

    ``plan`` maps configuration label to its inputs; the configuration named ``receiver`` has
    no preamp. ``overrides[(configuration, input)]`` passes ``gain_db`` / ``channel_bw_hz`` /
    ``clip_fraction``.
    """
    rng = np.random.default_rng(seed)
    overrides = overrides or {}
    with SurveyStore(path) as store:
        run = store.begin_run(RunInfo("simulated", "noise-truth", "test", {}, seed=seed))
        k = 0
        for sweep in range(n_sweeps):
            for cfg, kinds in plan.items():
                for kind in kinds:
                    stamp = f"2026-01-01T00:{k // 60:02d}:{k % 60:02d}.000000Z"
                    k += 1
                    store.write_sweep(run, sweep_result(truth, cfg, kind, cfg != receiver, rng, stamp,
                                                        **overrides.get((cfg, kind), {})))
        store.end_run(run)
    return path


FULL_PLAN = {
    "bare": ("antenna", "terminated", "noise-hot", "noise-cold"),
    "preamp-staggered": ("antenna", "terminated", "noise-hot", "noise-cold"),
}
