"""Noise arithmetic and ITU-R P.372 curves against published worked examples and references.

Sources (tags as in REFERENCES.md): [C] confirmed in the named source, [M] from memory,
[D] derived from the formulas and recomputed here.
"""

import math

import numpy as np
import pytest
import skrf as rf
from skrf.network import cascade_list

from analysis.noise import arithmetic as nz
from analysis.noise import outside as p372
from analysis.errors import BadParameterError
from survey.units import k_to_nf_db, nf_db_to_k


# -- thermal noise ----------------------------------------------------------------------------


def test_kt0_density_and_channel_powers():
    # k*T0 = -173.975 dBm/Hz; 200 kHz: -120.96 dBm; 180 kHz: -121.42 dBm [D; k from SI Brochure 2019]
    assert nz.thermal_noise_dbm(290.0, 1.0) == pytest.approx(-173.975, abs=5e-4)
    assert nz.thermal_noise_dbm(290.0, 200e3) == pytest.approx(-120.96, abs=5e-3)
    assert nz.thermal_noise_dbm(290.0, 180e3) == pytest.approx(-121.42, abs=5e-3)


# -- Friis -------------------------------------------------------------------------------------


def test_friis_rfchain_worked_example():
    # MathWorks RF Toolbox `rfchain` documentation [C]: gains 11, -3, 7 dB, NF 25, 3, 5 dB give
    # cumulative noise figures 25.0000, 25.0011, 25.0058 dB (Friis 1944).
    nf = nz.cascade_nf_db([25, 3, 5], [11, -3, 7], cumulative=True)
    assert np.allclose(nf, [25.0000, 25.0011, 25.0058], atol=6e-5)


def test_friis_phased_array_worked_example():
    # MathWorks Phased Array `noisefigure` documentation [C]: NF [1.0 0.5 5.0 1.0 0.6 1.0 6.0] dB,
    # gains [15 -0.5 -7 -1 15 20 -5] dB give 1.5252 dB total NF and 36.5 dB total gain.
    nfs = [1.0, 0.5, 5.0, 1.0, 0.6, 1.0, 6.0]
    gains = [15, -0.5, -7, -1, 15, 20, -5]
    assert nz.cascade_nf_db(nfs, gains) == pytest.approx(1.5252, abs=6e-5)
    assert nz.cascade_gain_db(gains) == pytest.approx(36.5, abs=1e-12)


def test_friis_temperature_form_equals_factor_form():
    # Friis 1944, Te = Te1 + Te2/G1 + ... equivalent to the factor form via F = 1 + Te/T0 (IEEE Std 161)
    nfs, gains = [1.0, 3.0, 8.0], [18.0, 6.0, 30.0]
    te = nz.cascade_temperature_k([nf_db_to_k(n) for n in nfs], gains)
    assert k_to_nf_db(te) == pytest.approx(nz.cascade_nf_db(nfs, gains), abs=1e-12)


def test_friis_against_scikit_rf_noisy_cascade():
    # Independent reference: scikit-rf noise-correlation cascade (LIBRARY_NOTES.md §5), matched
    # unilateral stages with gamma_opt = 0 so NF(50 ohm) = NFmin; lossy stages carry their own NF.
    freq = rf.Frequency(88, 108, 3, unit="MHz")

    def stage(g_db, nf_db):
        s = np.zeros((freq.npoints, 2, 2), complex)
        s[:, 1, 0] = 10 ** (g_db / 20)
        net = rf.Network(frequency=freq, s=s, z0=50)
        net.set_noise_a(freq, nfmin_db=nf_db, gamma_opt=0, rn=1.0)
        return net

    rng = np.random.default_rng(7)
    chains = [[(20, 1.5), (10, 6), (-6, 6), (30, 8)]]
    for _ in range(5):
        n = int(rng.integers(2, 6))
        chains.append([(float(rng.uniform(-6, 25)), float(rng.uniform(0.3, 10))) for _ in range(n)])
    for chain in chains:
        ref_db = 10 * np.log10(cascade_list([stage(g, f) for g, f in chain]).nf(50))
        ours = nz.cascade_nf_db([f for _, f in chain], [g for g, _ in chain])
        assert np.allclose(ref_db, ours, atol=1e-6), chain
    # value printed in LIBRARY_NOTES.md §5 for the first chain [C, same scikit-rf version]
    assert nz.cascade_nf_db([1.5, 6, 6, 8], [20, 10, -6, 30]) == pytest.approx(1.662723, abs=1e-6)


def test_cascade_rejects_wrong_gain_count():
    with pytest.raises(BadParameterError, match="stage gains"):
        nz.cascade_nf_db([1, 2, 3], [10])


# -- Y-factor ------------------------------------------------------------------------------------


def test_y_factor_glossary_worked_example():
    # Engineering glossary "Y-Factor Method", ib-lenhardt.com [C]: P_cold 10 mW, P_hot 15 mW,
    # ENR 6 dB give Y = 1.5, NF = 9.01 dB (9.0103).
    y = nz.y_factor(15e-3, 10e-3)
    assert y == pytest.approx(1.5)
    assert nz.y_factor_nf_db(6.0, y) == pytest.approx(9.0103, abs=5e-5)
    # the general form with T_cold = T0 gives the same figure
    assert nz.y_factor_nf_db_general(6.0, y, cold_k=290.0) == pytest.approx(9.0103, abs=5e-5)


def test_y_factor_pozar_worked_example():
    # Pozar, Microwave Engineering, noise chapter example [M]: G = 20 dB, B = 1 GHz, loads at 290 K
    # and 77 K give -62.0 dBm and -64.7 dBm; Y = 1.862, Te about 170 K. Recomputed [D]:
    y = nz.y_factor(10 ** (-62.0 / 10), 10 ** (-64.7 / 10))
    assert y == pytest.approx(1.862, abs=5e-4)
    te = nz.y_factor_temperature_k(y, 290.0, 77.0)
    assert te == pytest.approx(170.0, abs=1.0)
    # forward: k (T + Te) B G in dBm, rounded as in the example, from Te = 170 K
    hot = nz.thermal_noise_dbm(290.0 + 170.0, 1e9) + 20.0
    cold = nz.thermal_noise_dbm(77.0 + 170.0, 1e9) + 20.0
    assert round(hot, 1) == -62.0 and round(cold, 1) == -64.7


def test_y_factor_general_form_with_cold_not_t0():
    # Te = (T_hot - Y T_cold)/(Y - 1) inverts Y = (T_hot + Te)/(T_cold + Te) (IEEE Std 161 definitions)
    te_true, enr_db, cold = 420.0, 15.0, 305.0
    hot = nz.enr_db_to_hot_k(enr_db)
    assert hot == pytest.approx(290.0 * (1 + 10 ** 1.5))
    y = (hot + te_true) / (cold + te_true)
    assert nz.y_factor_temperature_k(y, hot, cold) == pytest.approx(te_true, rel=1e-12)
    # assuming T_cold = T0 when it is 305 K biases the figure
    assert abs(nz.y_factor_nf_db(enr_db, y) - k_to_nf_db(te_true)) > 0.05


def test_y_below_one_is_nan_not_a_number():
    assert math.isnan(nz.y_factor_temperature_k(0.9, 9000.0, 290.0))
    assert math.isnan(nz.y_factor_nf_db(15.0, 1.0))


def test_second_stage_correction_and_hot_cold_gain():
    # Friis 1944 two-stage cascade; gain from hot-minus-cold differences (Y-factor method)
    tp, g_db, tr = 75.0, 18.0, 740.0
    g = 10 ** (g_db / 10)
    t12 = nz.cascade_temperature_k([tp, tr], [g_db])
    assert nz.second_stage_correction_k(t12, tr, g) == pytest.approx(tp, rel=1e-12)
    t_hot, t_cold = nz.enr_db_to_hot_k(15.0), 290.0
    n2 = lambda t: t + tr  # noqa: E731  receiver alone
    n12 = lambda t: g * (t + tp) + tr  # noqa: E731  preamp + receiver
    assert nz.gain_from_hot_cold(n12(t_hot), n12(t_cold), n2(t_hot), n2(t_cold)) == pytest.approx(g, rel=1e-12)
    assert math.isnan(nz.gain_from_hot_cold(2.0, 1.0, 1.0, 1.0))


# -- terminated, antenna, benefit ----------------------------------------------------------------


def test_terminated_and_antenna_inversions():
    tp, g, tr, tamb, ta = 75.0, 100.0, 740.0, 290.0, 1500.0
    r_term = (g * (tamb + tp) + tr) / (tamb + tr)
    assert nz.preamp_temp_from_terminated_k(r_term, g, tamb, tr) == pytest.approx(tp, rel=1e-12)
    assert nz.antenna_temp_from_ratio_k((ta + tr) / (tamb + tr), tamb, tr) == pytest.approx(ta, rel=1e-12)
    r_sys = (g * (ta + tp) + tr) / (g * (tamb + tp) + tr)
    assert nz.antenna_temp_through_preamp_k(r_sys, g, tp, tamb, tr) == pytest.approx(ta, rel=1e-12)


@pytest.mark.parametrize("environment, expected_db", [
    # REFERENCES.md [D]: 100 MHz, receiver NF 6 dB, preamp NF 1 dB, gain 20 dB, ta from P.372
    ("city", 0.08), ("rural", 0.70), ("galactic", 2.12), ("quiet rural", 6.73),
])
def test_preamp_benefit_examples(environment, expected_db):
    ta = p372.fa_to_temp_k(p372.median_fa_db(100e6, environment))
    benefit = nz.preamp_benefit_db(ta, nf_db_to_k(1.0), 20.0, nf_db_to_k(6.0))
    assert benefit == pytest.approx(expected_db, abs=0.005)
    assert nz.projected_benefit_db(ta, nf_db_to_k(1.0), 20.0, 6.0) == pytest.approx(benefit, abs=1e-12)


def test_gain_minus_noise_rise_is_cn_change():
    # DESIGN.md identity: delta C/N (dB) = gain (dB) - noise rise (dB)
    ta, tp, tr = np.array([100.0, 1155.0, 40000.0]), 75.0, 864.0
    rise = nz.noise_rise_db(ta, tp, 20.0, tr)
    assert np.allclose(20.0 - rise, nz.preamp_benefit_db(ta, tp, 20.0, tr), atol=1e-12)


def test_max_improvement_is_the_limit_of_a_perfect_preamp():
    ta, tr = np.array([127.0, 1155.0, 40031.0]), nf_db_to_k(6.0)
    limit = p372.max_preamp_improvement_db(ta, tr)
    assert np.allclose(limit, nz.preamp_benefit_db(ta, 0.0, 200.0, tr), atol=1e-9)
    assert math.isnan(p372.max_preamp_improvement_db(0.0, tr))


# -- P.372 ----------------------------------------------------------------------------------------


@pytest.mark.parametrize("environment, fa_db, ta_k", [
    # ITU-R P.372 Table 1 coefficients (SG3 reference implementation) [C]; values at 100 MHz [D]
    ("city", 21.40, 40031), ("residential", 17.10, 14873), ("rural", 11.80, 4389),
    ("quiet rural", -3.60, 127), ("galactic", 6.00, 1155),
])
def test_p372_at_100_mhz(environment, fa_db, ta_k):
    fa = p372.median_fa_db(100e6, environment)
    assert fa == pytest.approx(fa_db, abs=1e-9)
    assert p372.fa_to_temp_k(fa) == pytest.approx(ta_k, abs=0.6)
    assert p372.temp_k_to_fa_db(p372.fa_to_temp_k(fa)) == pytest.approx(fa, abs=1e-12)


def test_p372_deciles_and_range():
    # Table 2 decile spreads [C]: city 11.0 above / 6.7 below the median
    lo, hi = p372.decile_fa_db(100e6, "city")
    assert (lo, hi) == pytest.approx((21.4 - 6.7, 21.4 + 11.0))
    assert p372.decile_fa_db(100e6, "quiet rural") is None
    with pytest.raises(BadParameterError, match="0.3 to 250 MHz"):
        p372.median_fa_db(400e6, "rural")
    with pytest.raises(BadParameterError, match="choose one of"):
        p372.median_fa_db(100e6, "downtown")


def test_closest_environment():
    f = np.linspace(88e6, 108e6, 21)
    for name in p372.ENVIRONMENTS:
        noisy = p372.median_fa_db(f, name) + np.random.default_rng(3).normal(0, 1.0, f.size)
        assert p372.closest_environment(f, noisy) == name
    assert p372.closest_environment(f, np.full(f.size, np.nan)) is None


# -- statistics and uncertainty ------------------------------------------------------------------


def test_radiometer_equation_value_and_simulation():
    # Radiometer equation, Dicke 1946: B = 200 kHz, tau = 0.1 s -> 0.71 %, 0.031 dB [D]
    s = nz.radiometer_sigma_rel(200e3, 0.1)
    assert s == pytest.approx(0.00707, abs=1e-5)
    assert 10 * np.log10(1 + s) == pytest.approx(0.031, abs=5e-4)
    # simulate: B tau complex Gaussian samples per estimate, power = mean |x|^2
    rng = np.random.default_rng(11)
    n = 20_000
    est = np.array([np.mean(np.abs(rng.standard_normal(n) + 1j * rng.standard_normal(n)) ** 2) for _ in range(300)])
    assert np.std(est, ddof=1) / np.mean(est) == pytest.approx(s, rel=0.12)
    with pytest.raises(BadParameterError):
        nz.radiometer_sigma_rel(0.0, 0.1)


def test_mean_and_sigma_rel():
    x = np.array([[1.0, 2.0], [3.0, np.nan], [5.0, np.nan]])
    mean, sig = nz.mean_and_sigma_rel(x, axis=0)
    assert mean[0] == 3.0 and mean[1] == 2.0
    assert sig[0] == pytest.approx(2.0 / 3.0 / np.sqrt(3))
    assert math.isnan(sig[1])


def _y_nf_model(v):
    return nz.y_factor_nf_db_general(v["enr"], v["hot"] / v["cold"], 290.0)


def test_linear_propagation_matches_closed_form_and_monte_carlo():
    # NF = ENR_dB - 10 log10(Y - 1): dNF/dENR = 1, dNF/dY = -10/ln10/(Y-1) (Y-factor method);
    # first-order propagation (GUM, from memory) against a seeded Monte Carlo (GUM Suppl. 1, from memory)
    enr, y = 15.0, 8.0
    s_rel = 0.01
    vals = {"enr": np.array([enr]), "hot": np.array([y]), "cold": np.array([1.0])}
    sigs = {"enr": np.array([0.2]), "hot": np.array([s_rel * y]), "cold": np.array([s_rel])}
    lin = nz.propagate_linear(_y_nf_model, vals, sigs)[0]
    dy = y * np.sqrt(2) * s_rel
    closed = np.hypot(0.2, 10 / np.log(10) * dy / (y - 1))
    assert lin == pytest.approx(closed, rel=1e-3)
    mean, mc = nz.propagate_monte_carlo(_y_nf_model, vals, sigs, n_draws=40_000, seed=5)
    assert mc[0] == pytest.approx(lin, rel=0.03)
    assert mean[0] == pytest.approx(_y_nf_model(vals)[0], abs=0.01)


def test_preamp_chain_uncertainty_against_monte_carlo():
    # second-stage corrected preamp NF from four noise powers and an ENR: linear vs Monte Carlo
    tp, tr, g = 75.0, 740.0, 10 ** 1.8
    th, tc = nz.enr_db_to_hot_k(15.0), 290.0
    vals = {"enr": np.array([15.0]), "rh": np.array([th + tr]), "rc": np.array([tc + tr]),
            "sh": np.array([g * (th + tp) + tr]), "sc": np.array([g * (tc + tp) + tr])}
    s = 0.005
    sigs = {"enr": np.array([0.2]), **{k: s * vals[k] for k in ("rh", "rc", "sh", "sc")}}

    def model(v):
        hot = nz.enr_db_to_hot_k(v["enr"])
        t2 = nz.y_factor_temperature_k(v["rh"] / v["rc"], hot, tc)
        t12 = nz.y_factor_temperature_k(v["sh"] / v["sc"], hot, tc)
        g1 = nz.gain_from_hot_cold(v["sh"], v["sc"], v["rh"], v["rc"])
        return k_to_nf_db(nz.second_stage_correction_k(t12, t2, g1))

    assert model(vals)[0] == pytest.approx(k_to_nf_db(tp), abs=1e-9)
    lin = nz.propagate_linear(model, vals, sigs)[0]
    _, mc = nz.propagate_monte_carlo(model, vals, sigs, n_draws=40_000, seed=9)
    assert mc[0] == pytest.approx(lin, rel=0.05)
    assert 0.15 < lin < 0.4


# -- ENR tables ----------------------------------------------------------------------------------


def test_enr_table_interpolates_and_refuses_extrapolation(tmp_path):
    path = tmp_path / "enr.csv"
    path.write_text("# noise source, simulated\nfreq_mhz,enr_db\n80,15.4\n100,15.0\n110,14.6\n")
    table = nz.load_enr_table(path)
    assert table.at([90e6, 100e6, 105e6]) == pytest.approx([15.2, 15.0, 14.8])
    assert table.at(110.5e6)[0] == pytest.approx(14.6)  # within the 1 MHz margin: end value held
    with pytest.raises(BadParameterError, match=r"80\.000-110\.000 MHz"):
        table.at([100e6, 112e6])


@pytest.mark.parametrize("text, match", [
    ("freq_mhz,enr_db\n100,15\n", "at least two"),
    ("100,15\n90,15\n", "ascending"),
    ("100,15\n110,abc\n", "not numbers"),
    ("100\n110,15\n", "expected freq_mhz,enr_db"),
    ("100,15\n110,nan\n", "finite"),
])
def test_bad_enr_tables(text, match):
    with pytest.raises(BadParameterError, match=match):
        nz.parse_enr_csv(text, "t.csv")


def test_missing_enr_file(tmp_path):
    with pytest.raises(BadParameterError, match="cannot read ENR table"):
        nz.load_enr_table(tmp_path / "none.csv")

