"""A bench for calibration tests: a signal generator on a modelled receiver input, as 8-bit IQ.

Invented test equipment, not a scene: one unmodulated carrier of known level (dBm at the receiver
input) plus the thermal noise of a 50 ohm termination and the receiver, ``k (T_term + T_rx)``,
converted to full scale by a receiver whose 0 dBFS input level (``full_scale_dbm``) ripples with
frequency, then quantised to ``cu8`` like the receivers this tool reads.
"""

from __future__ import annotations

import math

import numpy as np

from survey.bandplan import custom_band
from survey.records import IQBlock, RunInfo, SweepSettings
from survey.runner import record_sweep
from survey.store import SurveyStore
from survey.sweep import plan_for_source
from survey.units import BOLTZMANN_J_PER_K

SAMPLE_RATE_HZ = 2_400_000.0
RECEIVER_GAIN_DB = 40.2
TERMINATION_K = 290.0
RECEIVER_NOISE_K = 1163.0  # about 7 dB noise figure
BAND = custom_band(88_000_000, 108_000_000, 100_000, name="bench")


def full_scale_dbm(freq_hz) -> np.ndarray:
    """Input level (dBm) of a carrier reaching 0 dBFS: -67 dBm with a 1.5 dB ripple over the band."""
    f = np.asarray(freq_hz, dtype=np.float64)
    return -67.0 + 1.5 * np.sin(2.0 * np.pi * (f - 88e6) / 40e6)


class GeneratorBench:
    """An IQ source (see :class:`survey.sources.base.IQSource`) of one carrier plus noise."""

    kind = "simulated"

    def __init__(self, tone_hz: float | None, level_dbm: float, seed: int = 0):
        self.tone_hz = tone_hz
        self.level_dbm = level_dbm
        self._rng = np.random.default_rng(seed)
        self._center = None
        self._t = 0.0

    @property
    def sample_rate_hz(self) -> float:
        return SAMPLE_RATE_HZ

    @property
    def fixed_centers_hz(self):
        return None

    def describe(self) -> dict:
        return {"bench": "generator on a modelled receiver (test equipment, invented)"}

    def tune(self, center_hz: float) -> None:
        self._center = float(center_hz)

    def read(self, n_samples):
        n = int(n_samples or 24_000)
        fs = SAMPLE_RATE_HZ
        noise_mw_hz = BOLTZMANN_J_PER_K * (TERMINATION_K + RECEIVER_NOISE_K) * 1e3
        fs_mw = 10.0 ** (float(full_scale_dbm(self._center)) / 10.0)
        sigma = math.sqrt(noise_mw_hz * fs / fs_mw / 2.0)  # per rail, full-scale units
        x = (self._rng.normal(0.0, sigma, n) + 1j * self._rng.normal(0.0, sigma, n)).astype(np.complex128)
        if self.tone_hz is not None and abs(self.tone_hz - self._center) < fs / 2:
            amp = 10.0 ** ((self.level_dbm - float(full_scale_dbm(self.tone_hz))) / 20.0)
            t = self._t + np.arange(n) / fs
            x += amp * np.exp(2j * np.pi * (self.tone_hz - self._center) * t + 0.3j)
        self._t += n / fs
        iq = np.empty(2 * n)
        iq[0::2], iq[1::2] = x.real, x.imag
        raw = np.clip(np.round(iq * 127.5 + 127.5), 0, 255).astype(np.uint8)
        return IQBlock(self._center, fs, "cu8", raw, "2026-01-01T00:00:00.000000Z")

    def close(self) -> None:
        pass


def settings(gain_db: float = RECEIVER_GAIN_DB) -> SweepSettings:
    return SweepSettings(band=BAND.name, dwell_s=0.01, settle_s=0.0, gain_db=gain_db, fft_size=2048)


def record(db_path, configuration: str, input: str, tones: list[tuple[float | None, float]],
           gain_db: float = RECEIVER_GAIN_DB, seed: int = 0) -> list[int]:
    """One sweep per ``(tone_hz or None, level_dbm)``; returns the sweep ids."""
    ids = []
    with SurveyStore(db_path) as store:
        run = store.begin_run(RunInfo(source_kind="simulated", device="bench", tool_version="test",
                                      settings={}, seed=seed))
        for k, (tone_hz, level) in enumerate(tones):
            source = GeneratorBench(tone_hz, level, seed=seed + k)
            s = settings(gain_db)
            plan = plan_for_source(BAND, source, s)
            ids.append(record_sweep(store, run, source, plan, s, configuration, input, keep_spectra=False).sweep_id)
        store.end_run(run)
    return ids
