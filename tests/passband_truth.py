"""Small survey databases with a known preamp gain G(f), for the passband tests (simulated data).

Noise temperatures (K) seen by the receiver's input, per input kind:
``noise-hot`` T_HOT, ``noise-cold``/``terminated`` T_COLD. The receiver adds T_RX, the preamp
T_PRE at gain G(f). PSD (linear, arbitrary full-scale units) is ``SCALE * T`` so that

* without the preamp: S = SCALE (T_in + T_RX)
* with the preamp:    S = SCALE (G (T_in + T_PRE) + T_RX)

and (S_sys,hot - S_sys,cold) / (S_rx,hot - S_rx,cold) = G exactly, before the seeded
chi-square scatter of K averaged periodograms. Each hop also carries a DC spike that differs
between sweeps (it only cancels if the DC guard is honoured) and a steep receiver roll-off
beyond the usable fraction, combined with a spur pattern that differs between sweeps.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from analysis.passband.fit import TunedStage, cascade_response_db
from survey.records import ChannelReading, EmissionReading, HopReading, RunInfo, SweepResult, SweepSettings
from survey.store import SurveyStore
from survey.units import db_to_ratio, ratio_to_db

T_HOT = 290.0 * (1.0 + 10 ** (15.0 / 10.0))  # ENR 15 dB
T_COLD = 290.0
T_RX = 290.0 * (10 ** (6.0 / 10.0) - 1.0)  # receiver NF 6 dB
T_PRE = 75.0
SCALE = 1e-13  # full-scale units per kelvin per Hz (arbitrary)
FS_HZ = 2_400_000.0
FFT = 1024
CENTERS_HZ = tuple(88.6e6 + 1.75e6 * k for k in range(12))  # 88.6 .. 107.85 MHz
STATIONS_HZ = (88.8e6, 90.4e6, 91.9e6, 93.6e6, 94.5e6, 95.3e6, 97.1e6, 99.2e6, 101.7e6, 104.3e6, 106.6e6)
RASTER_HZ = tuple(87.6e6 + 100_000.0 * k for k in range(205))  # 87.6 .. 108.0 MHz
STATION_DBFS = -40.0  # signal-only power of every station without the preamp, dBFS


def preamp_gain_db(stages: Sequence[TunedStage], gain_db: float) -> Callable[[np.ndarray], np.ndarray]:
    """The true G(f) in dB of a preamp made of ``stages`` (exact circuit response)."""
    return lambda f: cascade_response_db(f, stages, gain_db)


def _hop_psd(fc: float, t_in: float, gain_fn, with_preamp: bool, rng, n_avg: int, dc_dbfs: float):
    freqs = fc + (np.arange(FFT) - FFT // 2) * (FS_HZ / FFT)
    if with_preamp:
        temp = db_to_ratio(gain_fn(freqs)) * (t_in + T_PRE) + T_RX
    else:
        temp = np.full(freqs.shape, t_in + T_RX)
    psd = SCALE * temp * rng.chisquare(2 * n_avg, size=FFT) / (2 * n_avg)
    d = np.abs(freqs - fc)
    psd = psd * np.where(d > 0.8 * FS_HZ / 2, 10 ** (-2.0 - 2.0 * rng.random()), 1.0)  # roll-off, varies
    psd[np.abs(freqs - fc) < 5_000.0] += db_to_ratio(dc_dbfs)  # DC spike, varies between sweeps
    return freqs, psd


def build_db(
    path: Path,
    gain_fn,
    *,
    configurations: tuple[str, str] = ("bare", "preamp"),
    inputs: Sequence[str] = ("noise-hot", "noise-cold", "antenna"),
    keep_spectra: bool = True,
    sweeps_per_input: int = 2,
    seed: int = 1,
    band: str = "europe",
    receiver_gain_db: tuple[float | None, float | None] = (30.0, 30.0),
) -> Path:
    """Write a survey database at ``path`` with sweeps of both configurations and each input."""
    rng = np.random.default_rng(seed)
    n_samples = 65536
    n_avg = n_samples // FFT
    channel_bw = 200_000.0
    store = SurveyStore(path)
    run = store.begin_run(RunInfo("simulated", "passband test fixture", "0", {"fixture": True}, seed=seed))
    for cfg_i, cfg in enumerate(configurations):
        with_pre = cfg_i == 1
        settings = SweepSettings(band=band, sample_rate_hz=FS_HZ, fft_size=FFT, gain_db=receiver_gain_db[cfg_i])
        for inp in inputs:
            t_in = {"noise-hot": T_HOT, "noise-cold": T_COLD, "terminated": T_COLD, "antenna": 600.0}[inp]
            for _s in range(sweeps_per_input):
                hops, channels, emissions = [], [], []
                for h, fc in enumerate(CENTERS_HZ):
                    freqs, psd = _hop_psd(fc, t_in, gain_fn, with_pre, rng, n_avg, -60.0 + 20.0 * rng.random())
                    hops.append(HopReading(
                        index=h, center_hz=fc, sample_rate_hz=FS_HZ, n_samples=n_samples, clip_fraction=0.0,
                        floor_dbfs_hz=float(np.median(ratio_to_db(psd))), started_utc="2026-01-01T00:00:00Z",
                        psd_freqs_hz=freqs if keep_spectra and inp != "antenna" else None,
                        psd_dbfs_hz=ratio_to_db(psd) if keep_spectra and inp != "antenna" else None,
                    ))
                for ch in RASTER_HZ:
                    h = int(np.argmin(np.abs(np.asarray(CENTERS_HZ) - ch)))
                    fc = CENTERS_HZ[h]
                    if not 150_000.0 <= abs(ch - fc) <= 850_000.0:
                        continue
                    g = float(db_to_ratio(gain_fn(np.array([ch]))[0])) if with_pre else 1.0
                    temp = (g * (t_in + T_PRE) + T_RX) if with_pre else (t_in + T_RX)
                    noise_lin = SCALE * temp * channel_bw * (1.0 + 0.01 * rng.standard_normal())
                    sig = 0.0
                    if inp == "antenna" and any(abs(ch - s) < 1.0 for s in STATIONS_HZ):
                        sig = db_to_ratio(STATION_DBFS) * g * db_to_ratio(0.3 * rng.standard_normal())
                    power = noise_lin + sig
                    received = sig > noise_lin * 0.5
                    cn = float(ratio_to_db(sig / noise_lin)) if received else None
                    channels.append(ChannelReading(
                        freq_hz=int(round(ch)), hop_index=h, power_dbfs=float(ratio_to_db(power)),
                        noise_dbfs=float(ratio_to_db(noise_lin)),
                        noise_density_dbfs_hz=float(ratio_to_db(noise_lin / channel_bw)), cn_db=cn,
                        received=bool(received),
                    ))
                    if sig > noise_lin:  # the station row the emission detector writes (C/N >= 0 dB)
                        emissions.append(EmissionReading(
                            freq_hz=float(round(ch)), hop_index=h, kind="fm", occupied_bw_hz=150_000.0,
                            power_dbfs=float(ratio_to_db(power)), noise_dbfs=float(ratio_to_db(noise_lin)),
                            cn_db=float(ratio_to_db(sig / noise_lin)), ci_db=None, stereo=False,
                            channel_freq_hz=int(round(ch))))
                result = SweepResult(
                    configuration=cfg, input=inp, started_utc="2026-01-01T00:00:00Z",
                    ended_utc="2026-01-01T00:00:01Z", settings=settings, hops=tuple(hops),
                    channels=tuple(channels), emissions=tuple(emissions),
                )
                store.write_sweep(run, result, keep_spectra=keep_spectra)
    store.end_run(run)
    store.close()
    return path
