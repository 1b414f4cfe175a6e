"""Emission detection against truth: the numpy-only generator, the simulator and published facts.

Truth sources: the generator's own amplitudes (a constant-envelope FM signal of amplitude A has
power A^2), the simulator's channel truth of a station rendered alone, Bessel-function line
powers of tone-modulated FM (``J_k(beta)^2``, scipy.special.jv) and Carson's rule
``B = 2 (deviation + f_m)`` (J. R. Carson, Proc. IRE 10, 1922; FS-1037C "Carson bandwidth rule").
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.special

from survey import dsp
from survey.emissions import occupied_bandwidth
from survey.records import SweepSettings
from survey.scene import parse_scene
from survey.sources.simulated import SimulatedSource
from synth_signals import complex_noise, fm_broadcast, make_block, tone

FS = 2.4e6
CENTER = 98.0e6
N0 = 1e-9  # FS^2/Hz of the generator's white noise
BW = 200e3
SETTINGS = SweepSettings(band="europe", dwell_s=0.1)
CHANNELS = [int(CENTER + k * 100e3) for k in range(-8, 9) if abs(k) > 1]


def _measure(z, center=CENTER, channels=CHANNELS, settings=SETTINGS):
    found: list = []
    block = make_block(z, center, FS)
    dsp.measure_hop(block, channels, settings, hop_index=0, emissions_out=found)
    return found


def _amplitude_for_cn(cn_db: float) -> float:
    return float(np.sqrt(N0 * BW * 10 ** (cn_db / 10.0)))


def _pair(spacing_hz, delta_db, weak_cn_db, seed, n=240_000):
    rng = np.random.default_rng(seed)
    weak = -500e3
    a = _amplitude_for_cn(weak_cn_db)
    z = complex_noise(n, N0 * FS, rng)
    z += fm_broadcast(n, FS, weak, a, rng)
    z += fm_broadcast(n, FS, weak + spacing_hz, a * 10 ** (delta_db / 20.0), rng)
    return _measure(z), CENTER + weak, CENTER + weak + spacing_hz


# ---- published facts ---------------------------------------------------------------------------

def _bessel_99_bandwidth(beta: float, fm_hz: float) -> float:
    """Smallest 2 n f_m holding 99 % of a tone-modulated FM signal's power (J_k(beta)^2 lines)."""
    for n in range(0, 100):
        k = np.arange(-n, n + 1)
        if np.sum(scipy.special.jv(k, beta) ** 2) >= 0.99:
            return 2.0 * n * fm_hz
    raise AssertionError("no convergence")


def test_occupied_bandwidth_of_a_75_khz_deviation_station_follows_bessel_and_carson():
    # 15 kHz tone at 75 kHz deviation: beta = 5, Carson 2 (75 + 15) = 180 kHz.
    n = 240_000
    t = np.arange(n) / FS
    dev, fm_hz = 75e3, 15e3
    beta = dev / fm_hz
    a = _amplitude_for_cn(40.0)
    phase = 2 * np.pi * (-400e3) * t + beta * np.sin(2 * np.pi * fm_hz * t)
    rng = np.random.default_rng(3)
    z = (a * np.exp(1j * phase)).astype(np.complex64) + complex_noise(n, N0 * FS, rng)
    (em,) = _measure(z)
    carson = 2 * (dev + fm_hz)
    bessel = _bessel_99_bandwidth(beta, fm_hz)
    assert bessel == pytest.approx(carson)  # beta = 5: the 99 % lines end at beta + 1
    assert em.kind == "fm"
    assert em.occupied_bw_hz == pytest.approx(bessel, abs=4e3)  # a line straddles ~3 bins
    assert em.freq_hz == pytest.approx(CENTER - 400e3, abs=500.0)
    assert em.cn_db == pytest.approx(40.0, abs=0.3)


def test_occupied_bandwidth_helper_on_a_flat_band():
    # A flat density over [-50, 50] kHz: 0.5 % of the power lies beyond +-49.5 kHz.
    f = np.arange(-100e3, 100e3, 100.0)
    p = (np.abs(f) <= 50e3).astype(float)
    lo, hi = occupied_bandwidth(f, p)
    assert hi - lo == pytest.approx(99e3, abs=200.0)


# ---- kinds ----------------------------------------------------------------------------------------

def test_cw_tone_is_narrow_and_fm_station_is_fm():
    n = 240_000
    rng = np.random.default_rng(5)
    z = complex_noise(n, N0 * FS, rng)
    z += tone(n, FS, -600e3 + 1234.0, _amplitude_for_cn(25.0))
    z += fm_broadcast(n, FS, 300e3, _amplitude_for_cn(20.0), rng, stereo=True)
    z += fm_broadcast(n, FS, 600e3, _amplitude_for_cn(20.0), rng, stereo=False)
    found = _measure(z)
    assert [round(e.freq_hz - CENTER, -3) for e in found] == [-599e3, 300e3, 600e3]
    cw, stereo_fm, mono_fm = found
    assert cw.kind == "narrow" and cw.occupied_bw_hz < 10e3
    assert cw.freq_hz == pytest.approx(CENTER - 600e3 + 1234.0, abs=300.0)
    assert cw.cn_db == pytest.approx(25.0, abs=0.3)
    assert stereo_fm.kind == "fm" and stereo_fm.occupied_bw_hz > 100e3 and stereo_fm.stereo
    assert mono_fm.kind == "fm" and not mono_fm.stereo
    assert stereo_fm.freq_hz == pytest.approx(CENTER + 300e3, abs=1500.0)


def test_supply_comb_lines_are_narrow_never_fm():
    n = 240_000
    rng = np.random.default_rng(6)
    z = complex_noise(n, N0 * FS, rng)
    for k in range(7):  # a harmonic comb, lines 120 kHz apart
        z += tone(n, FS, -700e3 + k * 120e3, _amplitude_for_cn(15.0 - k))
    found = _measure(z)
    # the lines at -100 and +20 kHz sit in the hop's DC guard / an unmeasured channel
    assert [round(e.freq_hz - CENTER, -3) for e in found] == [-700e3, -580e3, -460e3, -340e3, -220e3]
    assert all(e.kind == "narrow" for e in found), [(e.freq_hz, e.occupied_bw_hz) for e in found]


# ---- neighbours (numpy-only generator) -----------------------------------------------------------

@pytest.mark.parametrize("delta_db", [15.0, 20.0, 25.0, 30.0])
@pytest.mark.parametrize("weak_cn_db", [5.0, 10.0])
def test_weak_station_200_khz_from_a_strong_one(delta_db, weak_cn_db):
    found, weak_f, strong_f = _pair(200e3, delta_db, weak_cn_db, seed=int(delta_db + weak_cn_db))
    assert len(found) == 2, [(e.freq_hz, e.cn_db) for e in found]  # no phantom
    weak, strong = sorted(found, key=lambda e: e.cn_db)
    assert weak.freq_hz == pytest.approx(weak_f, abs=2e3)
    assert weak.cn_db == pytest.approx(weak_cn_db, abs=1.0)
    assert strong.cn_db == pytest.approx(weak_cn_db + delta_db, abs=1.0)
    assert weak.separable and weak.ci_db is not None


@pytest.mark.parametrize("delta_db", [15.0, 20.0, 25.0, 30.0])
def test_weak_station_100_khz_from_a_strong_one_is_within_1_5_db_or_not_separable(delta_db):
    found, weak_f, strong_f = _pair(100e3, delta_db, 10.0, seed=int(delta_db))
    strong = min(found, key=lambda e: abs(e.freq_hz - strong_f))
    assert strong.cn_db == pytest.approx(10.0 + delta_db, abs=1.0)
    others = [e for e in found if e is not strong]
    assert len(others) <= 1
    for e in others:
        assert abs(e.freq_hz - weak_f) < 30e3
        assert (not e.separable) or abs(e.cn_db - 10.0) <= 1.5


# ---- the simulator --------------------------------------------------------------------------------

def _scene(stations, oscillation=None):
    pre = {"gain_db": 20.0, "nf_db": 1.0, "circuits": [{"f0_hz": 98.0e6, "q": 5.0}]}
    if oscillation:
        pre["oscillation"] = oscillation
    return parse_scene({
        "scene": {"name": "unit"},
        "outside_noise": {"environment": "rural"},
        "receiver": {"nf_db": 9.0, "full_scale_dbm": -57.0},
        "preamp": {"flat": pre},
        "station": [{"name": f"S{i}", "freq_mhz": f, "level_dbm": lvl, "stereo": st,
                     "fading": {"time_constant_s": 600.0, "spread_db": 0.0}}
                    for i, (f, lvl, st) in enumerate(stations)],
    })


def _sim_measure(scene, cfg="bare", seed=4):
    src = SimulatedSource(scene, cfg, seed=seed)
    src.tune(CENTER)
    block = src.read(240_000)
    found: list = []
    dsp.measure_hop(block, CHANNELS, SETTINGS, hop_index=0, emissions_out=found)
    return found, src


def _alone_cn(freq_mhz, level, stereo=True):
    sc = _scene([(freq_mhz, level, stereo)])
    src = SimulatedSource(sc, "bare", seed=4)
    (t,) = src.truth(CENTER, [int(round(freq_mhz * 1e6))], BW, at_s=0.0)
    return t.cn_db


@pytest.mark.parametrize("spacing_khz,delta_db", [(200, 15.0), (200, 30.0), (100, 20.0)])
def test_simulated_neighbours(spacing_khz, delta_db):
    weak_mhz, weak_dbm = 97.5, -100.0
    strong_mhz = weak_mhz + spacing_khz / 1e3
    truth = _alone_cn(weak_mhz, weak_dbm)
    found, _ = _sim_measure(_scene([(weak_mhz, weak_dbm, True), (strong_mhz, weak_dbm + delta_db, True)]))
    near = [e for e in found if abs(e.freq_hz - weak_mhz * 1e6) < 30e3]
    assert len(found) <= 2 and all(
        min(abs(e.freq_hz - weak_mhz * 1e6), abs(e.freq_hz - strong_mhz * 1e6)) < 30e3 for e in found)
    if spacing_khz == 200:
        assert len(near) == 1 and near[0].cn_db == pytest.approx(truth, abs=1.0)
    else:
        assert all((not e.separable) or abs(e.cn_db - truth) <= 1.5 for e in near)


def test_simulated_oscillation_is_narrow_and_stations_are_fm():
    sc = _scene([(97.5, -95.0, True), (98.6, -95.0, False)],
                oscillation={"freq_hz": 97.77e6, "level_dbm": -100.0})
    found, _ = _sim_measure(sc, cfg="flat")
    kinds = {round(e.freq_hz / 1e4) / 100: e.kind for e in found}
    assert kinds == {97.5: "fm", 97.77: "narrow", 98.6: "fm"}, kinds
    stereo = {round(e.freq_hz / 1e4) / 100: e.stereo for e in found if e.kind == "fm"}
    assert stereo == {97.5: True, 98.6: False}
