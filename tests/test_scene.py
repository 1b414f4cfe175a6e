"""Scene model and chain arithmetic against published formulas (no rendering here)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from survey.errors import SceneError
from survey.scene import (
    ITU_ENVIRONMENTS,
    Preamp,
    TunedCircuit,
    chain_truth,
    itu_fa_db,
    itu_ta_k,
    load_scene,
    parse_scene,
    stagger_tuned_circuits,
)
from survey.units import T0_K, nf_db_to_k

DEMO_SCENE = Path(__file__).resolve().parent.parent / "recordings_demo" / "quorrelby_hill.toml"


def _scene(**over):
    d = {
        "scene": {"name": "unit"},
        "outside_noise": {"environment": "rural"},
        "receiver": {"nf_db": 6.0, "full_scale_dbm": -60.0},
        "preamp": {"p100": {"gain_db": 20.0, "nf_db": 1.0, "circuits": [{"f0_hz": 100e6, "q": 20.0}]}},
        "station": [{"name": "Alpha", "freq_mhz": 100.0, "level_dbm": -80.0}],
    }
    d.update(over)
    return parse_scene(d)


# ---- ITU-R P.372 outside noise ------------------------------------------------------------

@pytest.mark.parametrize(
    "env, fa_db, ta_k",
    # REFERENCES.md table [D] from ITU-R P.372 Table 1 coefficients: Fa and ta at 100 MHz.
    [("city", 21.40, 40031), ("residential", 17.10, 14873), ("rural", 11.80, 4389),
     ("quiet rural", -3.60, 127), ("galactic", 6.00, 1155)],
)
def test_itu_fa_at_100_mhz(env, fa_db, ta_k):
    assert itu_fa_db(env, 100e6) == pytest.approx(fa_db, abs=0.005)
    assert itu_ta_k(env, 100e6) == pytest.approx(ta_k, rel=2e-3, abs=0.5)  # table rounded to 1 K


def test_itu_fa_slope_per_decade():
    # Fa = c - d log10(f_MHz): a decade lowers Fa by d dB (ITU-R P.372, Table 1).
    for env, (c, d) in ITU_ENVIRONMENTS.items():
        assert itu_fa_db(env, 10e6) - itu_fa_db(env, 100e6) == pytest.approx(d, abs=1e-9)


def test_unknown_environment_names_choices():
    with pytest.raises(SceneError, match="residential"):
        _scene(outside_noise={"environment": "suburbia"})


# ---- tuned circuits and preamp response ---------------------------------------------------

def test_single_circuit_bandwidth_is_f0_over_q():
    # |H|^2 = 1/(1+Q^2 (f/f0 - f0/f)^2) is -3 dB where Q (f/f0 - f0/f) = +-1; the two
    # solutions differ by exactly f0/Q (BW_3dB = f0/Q, standard single-tuned result [M]).
    c = TunedCircuit(94.5e6, 36.0)
    half = 1.0 / (2 * c.q)
    f_lo = c.f0_hz * (-half + math.sqrt(1 + half * half))
    f_hi = c.f0_hz * (half + math.sqrt(1 + half * half))
    assert c.power_response(np.array([f_lo, f_hi])) == pytest.approx([0.5, 0.5], rel=1e-12)
    assert f_hi - f_lo == pytest.approx(c.f0_hz / c.q, rel=1e-12)
    assert c.power_response(np.array([c.f0_hz]))[0] == pytest.approx(1.0)


def _bandwidth_at(pre: Preamp, level_db: float, center_hz: float) -> float:
    f = np.linspace(center_hz - 20e6, center_hz + 20e6, 400_001)
    g = 10 * np.log10(pre.shape(f))
    inside = f[g >= level_db]
    return float(inside[-1] - inside[0])


@pytest.mark.parametrize("n, factor", [(2, 0.6436), (3, 0.5098)])
def test_synchronous_stages_shrink_bandwidth(n, factor):
    # n identical synchronously tuned stages: BW_n = BW_1 sqrt(2**(1/n) - 1) (REFERENCES.md, [C]);
    # narrow-band result, so allow 0.5 % at Q = 36.
    pre = Preamp("p", tuple(TunedCircuit(94.5e6, 36.0) for _ in range(n)), 20.0, 1.0)
    bw1 = 94.5e6 / 36.0
    assert _bandwidth_at(pre, -3.0103, 94.5e6) == pytest.approx(bw1 * factor, rel=5e-3)
    assert factor == pytest.approx(math.sqrt(2 ** (1 / n) - 1), abs=1e-4)


def test_peak_gain_is_normalised():
    pre = Preamp("p", stagger_tuned_circuits(94e6, 12e6, 3), 20.0, 1.0)
    f = np.linspace(80e6, 110e6, 30001)
    assert 10 * np.log10(pre.gain_lin(f).max()) == pytest.approx(20.0, abs=1e-3)


@pytest.mark.parametrize("n", [2, 3])
def test_stagger_formula(n):
    # Maximally flat stagger tuning (REFERENCES.md [D], after Valley & Wallman 1948):
    # pair: each stage BW = B/sqrt(2) at f0 +- 0.354 B; triple: one at f0 with BW = B,
    # two at f0 +- 0.433 B with BW = B/2.
    f0, b = 94e6, 12e6
    cs = stagger_tuned_circuits(f0, b, n)
    offsets = sorted(c.f0_hz - f0 for c in cs)
    bws = [c.f0_hz / c.q for c in sorted(cs, key=lambda c: c.f0_hz)]
    if n == 2:
        assert offsets == pytest.approx([-0.35355 * b, 0.35355 * b], rel=1e-4)
        assert bws == pytest.approx([b / math.sqrt(2)] * 2, rel=1e-9)
    else:
        assert offsets == pytest.approx([-0.43301 * b, 0.0, 0.43301 * b], abs=1e-4 * b)
        assert bws == pytest.approx([b / 2, b, b / 2], rel=1e-9)


def test_staggered_triple_is_flat_and_covers_the_band():
    pre = Preamp("p", stagger_tuned_circuits(94e6, 12e6, 3), 20.0, 1.0)
    f = np.linspace(88.5e6, 99.5e6, 2001)
    g = 10 * np.log10(pre.shape(f))
    assert g.min() > -3.0  # inside the 88-100 MHz design band
    # -3 dB edges close to 88 and 100 MHz (narrow-band design applied to real circuits)
    assert _bandwidth_at(pre, -3.0103, 94e6) == pytest.approx(12e6, rel=0.05)
    # maximally flat: no ripple, a single maximum
    assert np.count_nonzero(np.diff(np.sign(np.diff(g)))) == 1


def test_stagger_rejects_nonsense():
    with pytest.raises(SceneError, match="stages"):
        stagger_tuned_circuits(94e6, 12e6, 0)


# ---- chain arithmetic -------------------------------------------------------------------

@pytest.mark.parametrize("env, expected_db", [("city", 0.08), ("rural", 0.70), ("galactic", 2.12),
                                              ("quiet rural", 6.73)])
def test_preamp_benefit_matches_p372_worked_values(env, expected_db):
    # REFERENCES.md [D]: delta C/N = 10 log10((ta + Tr)/(ta + Tp + Tr/G)) at 100 MHz with receiver
    # NF 6 dB, preamp NF 1 dB, gain 20 dB: city +0.08, rural +0.70, galactic +2.12, quiet rural +6.73.
    sc = _scene(outside_noise={"environment": env})
    bare = chain_truth(sc, "bare", "antenna", np.array([100e6]))
    pre = chain_truth(sc, "p100", "antenna", np.array([100e6]))
    benefit = 10 * np.log10(bare.system_temp_k[0] / pre.system_temp_k[0])
    assert benefit == pytest.approx(expected_db, abs=0.006)


def test_chain_temperature_is_friis():
    # Friis 1944: Te = Tp + Tr/G for two stages (supply noise joins Tr at the preamp output).
    sc = _scene()
    f = np.linspace(90e6, 110e6, 11)
    ct = chain_truth(sc, "p100", "terminated", f)
    g = 10 ** (ct.gain_db / 10)
    assert np.allclose(ct.chain_temp_k, nf_db_to_k(1.0) + nf_db_to_k(6.0) / g, rtol=1e-12)
    assert np.allclose(ct.rx_input_temp_k, g * (290.0 + nf_db_to_k(1.0)) + nf_db_to_k(6.0), rtol=1e-12)


def test_chain_noise_figure_matches_scikit_rf():
    # Independent reference: scikit-rf's noisy two-port cascade (noise correlation matrices,
    # T0 = 290 K) of a matched unilateral preamp and receiver (LIBRARY_NOTES.md section 5).
    skrf = pytest.importorskip("skrf")
    from skrf.network import cascade_list

    sc = _scene()
    freqs = np.array([96e6, 100e6, 104e6])
    ct = chain_truth(sc, "p100", "terminated", freqs)
    freq = skrf.Frequency.from_f(freqs, unit="Hz")

    def stage(g_db, nf_db):
        s = np.zeros((freq.npoints, 2, 2), complex)
        s[:, 1, 0] = 10 ** (np.asarray(g_db) / 20)
        n = skrf.Network(frequency=freq, s=s, z0=50)
        n.set_noise_a(freq, nfmin_db=nf_db, gamma_opt=0, rn=1.0)
        return n

    chain = cascade_list([stage(ct.gain_db, 1.0), stage(np.zeros(3), 6.0)])
    nf_skrf_db = 10 * np.log10(chain.nf(50))
    nf_ours_db = 10 * np.log10(1 + ct.chain_temp_k / T0_K)
    assert nf_ours_db == pytest.approx(nf_skrf_db, abs=1e-6)


def test_input_temperatures():
    sc = _scene(termination={"temp_k": 300.0}, noise_source={"enr_db": 15.0})
    f = np.array([100e6])
    # ENR = (Th - T0)/T0 (IEEE Std 161): hot = 290 (1 + 10**1.5) = 9460.6 K
    assert chain_truth(sc, "bare", "noise-hot", f).input_temp_k[0] == pytest.approx(290 * (1 + 10**1.5))
    assert chain_truth(sc, "bare", "noise-cold", f).input_temp_k[0] == pytest.approx(300.0)
    assert chain_truth(sc, "bare", "terminated", f).input_temp_k[0] == pytest.approx(300.0)
    assert chain_truth(sc, "bare", "antenna", f).input_temp_k[0] == pytest.approx(itu_ta_k("rural", 100e6))


def test_enr_table_interpolates():
    sc = _scene(noise_source={"enr_table": [[108e6, 14.0], [88e6, 16.0]]})
    assert sc.noise_source.enr_db_at(np.array([98e6]))[0] == pytest.approx(15.0)
    assert sc.noise_source.enr_db_at(np.array([80e6]))[0] == pytest.approx(16.0)


def test_fixed_antenna_temperature():
    sc = _scene(outside_noise={"temp_k": 1234.0})
    assert chain_truth(sc, "bare", "antenna", np.array([90e6, 100e6])).input_temp_k == pytest.approx([1234.0] * 2)


# ---- TOML loading and errors ---------------------------------------------------------------

def test_based_on_inherits_and_overrides():
    sc = _scene(preamp={
        "a": {"gain_db": 20.0, "nf_db": 1.0, "circuits": [{"f0_hz": 100e6, "q": 20.0}]},
        "b": {"based_on": "a", "supply_noise_k": 5000.0},
    })
    assert sc.preamps["b"].circuits == sc.preamps["a"].circuits
    assert sc.preamps["b"].supply_noise_k == 5000.0 and sc.preamps["a"].supply_noise_k == 0.0


def test_based_on_loop_is_refused():
    with pytest.raises(SceneError, match="based_on"):
        _scene(preamp={"a": {"based_on": "b"}, "b": {"based_on": "a"}})


@pytest.mark.parametrize("station, fix", [
    ({"name": "X", "freq_mhz": 99.0}, "level_dbm"),
    ({"name": "X", "level_dbm": -80.0}, "freq_hz"),
    ({"name": "X", "freq_mhz": 99.0, "level_dbm": "loud"}, "must be a number"),
])
def test_bad_station_says_how_to_fix(station, fix):
    with pytest.raises(SceneError, match=fix):
        _scene(station=[station])


def test_unknown_configuration_lists_choices():
    with pytest.raises(SceneError, match="bare, p100"):
        _scene().preamp("preamp-x")


def test_bare_is_reserved():
    with pytest.raises(SceneError, match="reserved"):
        _scene(preamp={"bare": {"gain_db": 1.0, "nf_db": 1.0, "circuits": [{"f0_hz": 1e8, "q": 5}]}})


def test_too_many_circuits():
    with pytest.raises(SceneError, match="1 to 3"):
        _scene(preamp={"x": {"gain_db": 1.0, "nf_db": 1.0, "circuits": [{"f0_hz": 1e8, "q": 5}] * 4}})


def test_load_scene_errors(tmp_path):
    with pytest.raises(SceneError, match="does not exist"):
        load_scene(tmp_path / "missing.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[scene\nname = 1\n")
    with pytest.raises(SceneError, match="not valid TOML"):
        load_scene(bad)


# ---- the bundled demo scene --------------------------------------------------------------

def test_demo_scene_is_as_described():
    sc = load_scene(DEMO_SCENE)
    assert set(sc.configurations) == {"bare", "preamp-peaked", "preamp-staggered", "preamp-bench-supply"}
    freqs = [s.freq_hz for s in sc.stations]
    assert 10 <= len(freqs) <= 14 and all(87.5e6 <= f <= 108e6 for f in freqs)
    assert any(abs(f - 94.5e6) < 0.2e6 for f in freqs)
    assert sc.environment in ("rural", "residential")
    peaked = sc.preamps["preamp-peaked"]
    assert all(c.f0_hz == 94.5e6 for c in peaked.circuits) and len(peaked.circuits) == 3
    # "a passband only about 2 MHz wide at -6 dB"
    assert _bandwidth_at(peaked, -6.0, 94.5e6) == pytest.approx(2.0e6, rel=0.1)
    stag = sc.preamps["preamp-staggered"]
    g = 10 * np.log10(stag.shape(np.linspace(88.5e6, 99.5e6, 201)))
    assert g.min() > -3.0
    bench = sc.preamps["preamp-bench-supply"]
    assert bench.circuits == peaked.circuits and bench.supply_noise_k > 0
