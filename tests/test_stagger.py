"""Stagger tuning and synchronous shrinkage against the published formulas.

Sources (see REFERENCES.md, "Tuned circuits and passbands"):
* shrinkage ``BW_n = BW_1 sqrt(2^(1/n) - 1)``, factors 0.6436, 0.5098, 0.4350 for n = 2, 3, 4
  (standard textbook result; the factors are derived);
* maximally flat stagger tuning, stage k half-bandwidth (B/2) sin theta_k and offset
  (B/2) cos theta_k, theta_k = (2k-1) pi/(2n) (attributed to Valley & Wallman, Vacuum Tube
  Amplifiers, 1948, from memory); pair B/sqrt2 at f0 +- 0.354 B; triple B at f0 and B/2 at
  f0 +- 0.433 B.
"""

import numpy as np
import pytest

from analysis.errors import BadParameterError
from analysis.passband.fit import TunedStage, cascade_response_db, curve_features
from analysis.passband.stagger import (
    design_stagger,
    narrowband_response_db,
    butterworth_bandpass_stages,
    insertion_loss_db,
    peak_gain_change_db,
    shrinkage_factor,
    stagger_normalised,
    synchronous_bandwidth_hz,
)

HALF_POWER_DB = -10 * np.log10(2)  # -3.0103 dB


@pytest.mark.parametrize("n, factor", [(1, 1.0), (2, 0.6436), (3, 0.5098), (4, 0.4350)])
def test_shrinkage_factors_published(n, factor):
    # REFERENCES.md: standard textbook result, factors to 4 decimals
    assert shrinkage_factor(n) == pytest.approx(factor, abs=5e-5)


@pytest.mark.parametrize("n", [2, 3])
def test_shrinkage_matches_exact_cascade_when_narrow(n):
    # n identical circuits of Q = 500 at 100 MHz (0.2 MHz each): the exact cascade's -3 dB width
    # found numerically equals BW_1 * sqrt(2^(1/n) - 1) to 0.1 % (narrowband limit)
    stages = [TunedStage(100e6, 500.0)] * n
    feats = curve_features(stages)
    assert feats.bw_3db_hz == pytest.approx(synchronous_bandwidth_hz(0.2e6, n), rel=1e-3)


def test_stagger_pair_published_numbers():
    offs, widths = stagger_normalised(2)
    assert offs == pytest.approx([-0.354, 0.354], abs=5e-4)  # f0 +- 0.354 B
    assert widths == pytest.approx([1 / np.sqrt(2)] * 2, abs=1e-12)  # B / sqrt 2


def test_stagger_triple_published_numbers():
    offs, widths = stagger_normalised(3)
    assert offs == pytest.approx([-0.433, 0.0, 0.433], abs=5e-4)  # f0 and f0 +- 0.433 B
    assert widths == pytest.approx([0.5, 1.0, 0.5], abs=1e-12)  # B/2, B, B/2


@pytest.mark.parametrize("n", [1, 2, 3])
def test_narrowband_form_is_butterworth_with_half_power_edges(n):
    b = 12e6
    d = np.linspace(-2 * b, 2 * b, 801)
    got = narrowband_response_db(d, n, b)
    butterworth = -10 * np.log10(1 + (2 * d / b) ** (2 * n))  # maximally flat magnitude
    assert np.max(np.abs(got - butterworth)) < 1e-9
    edges = narrowband_response_db(np.array([-b / 2, b / 2]), n, b)
    assert edges == pytest.approx([HALF_POWER_DB] * 2, abs=1e-9)  # -3.01 dB at the band edges
    assert round(float(edges[0]), 2) == -3.01


@pytest.mark.parametrize("n", [2, 3])
def test_exact_response_close_to_narrowband_when_narrow(n):
    # 1 % fractional bandwidth: the exact circuits give -3.01 dB edges to 0.05 dB
    plan = design_stagger((94.0e6, 95.0e6), n)
    assert plan.edge_atten_db == pytest.approx([HALF_POWER_DB] * 2, abs=0.05)
    # peak loss of the staggered cascade: prod(sin^2 theta_k) (-6.02 dB pair, -12.04 dB triple)
    assert plan.cascade_peak_db == pytest.approx(plan.narrowband_cascade_peak_db, abs=0.05)
    assert plan.narrowband_cascade_peak_db == pytest.approx({2: -6.0206, 3: -12.0412}[n], abs=1e-3)


def test_butterworth_bandpass_88_100_three_circuits_matches_the_reference_design():
    """REFERENCES.md, "Tuned circuits and passbands": the maximally flat three-pole bandpass for
    88-100 MHz (f0 = sqrt(88 x 100) = 93.808 MHz, B = 12 MHz) has circuits at 88.753, 93.808 and
    99.151 MHz with Q 15.66, 7.82 and 15.66, and is -3.01 dB at 88.000 and 100.000 MHz."""
    stages = butterworth_bandpass_stages((88e6, 100e6), 3)
    assert [round(s.f0_hz / 1e6, 3) for s in stages] == [88.753, 93.808, 99.151]
    assert [round(s.q, 2) for s in stages] == [15.66, 7.82, 15.66]
    plan = design_stagger((88e6, 100e6), 3)
    assert plan.stages == stages and plan.center_hz == pytest.approx(np.sqrt(88e6 * 100e6))
    assert [round(v, 2) for v in plan.edge_atten_db] == [-3.01, -3.01]
    assert plan.edge_atten_db == pytest.approx([HALF_POWER_DB] * 2, abs=1e-9)


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_exact_design_is_the_butterworth_bandpass_magnitude(n):
    # |H|^2 = 1 / (1 + ((f^2 - f0^2) / (f B))^(2n)) (lowpass-to-bandpass transform of Butterworth)
    plan = design_stagger((88e6, 100e6), n)
    f = np.linspace(80e6, 110e6, 601)
    x = (f ** 2 - 88e6 * 100e6) / (f * 12e6)
    expected = -10 * np.log10(1 + x ** (2 * n))
    assert np.max(np.abs(plan.response_db(f) - expected)) < 1e-6
    assert plan.worst_db == pytest.approx(HALF_POWER_DB, abs=1e-6)  # maximally flat: no dip inside
    grid = np.linspace(88e6, 100e6, 501)
    assert np.max(plan.response_db(grid)) <= 1e-9  # relative to the cascade's own peak


def test_insertion_loss_of_passive_tuned_circuits():
    # IL = -20 log10(1 - Ql/Qu) (REFERENCES.md): Ql = Qu/2 loses 6.02 dB, Ql = Qu/10 0.915 dB
    assert insertion_loss_db(50.0, 100.0) == pytest.approx(6.0206, abs=1e-4)
    assert insertion_loss_db(10.0, 100.0) == pytest.approx(0.9151, abs=1e-4)
    with pytest.raises(BadParameterError, match="unloaded Q"):
        insertion_loss_db(120.0, 100.0)
    plan = design_stagger((88e6, 100e6), 3)
    assert plan.q_unloaded_assumed and plan.q_unloaded == 150.0
    assert plan.insertion_loss_db == pytest.approx([insertion_loss_db(s.q, 150.0) for s in plan.stages])
    given = design_stagger((88e6, 100e6), 3, q_unloaded=200.0)
    assert not given.q_unloaded_assumed and given.insertion_loss_db[1] == pytest.approx(insertion_loss_db(7.82, 200.0), abs=1e-3)


def test_gain_change_with_passive_circuits():
    # two identical 2 MHz circuits (Q 47) retuned to the pair plan for 88-100 MHz, coils of Qu 150:
    # the loss at resonance falls (lower loaded Q), the stagger costs its peak loss
    old = [TunedStage(94.5e6, 94.5 / 2.0)] * 2
    plan = design_stagger((88e6, 100e6), 2, measured_stages=old)
    il_old = 2 * insertion_loss_db(94.5 / 2.0, 150.0)
    il_new = sum(insertion_loss_db(s.q, 150.0) for s in plan.stages)
    expected = il_old - il_new + plan.cascade_peak_db
    assert plan.peak_gain_change_db == pytest.approx(expected, abs=0.01)
    assert -10.0 < plan.peak_gain_change_db < 0.0  # a few dB, not the 31 dB of a fixed gain-bandwidth model
    # same circuits in and out: no change
    assert peak_gain_change_db(old, old) == pytest.approx(0.0, abs=1e-9)


def test_bad_circuit_counts():
    with pytest.raises(BadParameterError):
        shrinkage_factor(0)
    with pytest.raises(BadParameterError):
        stagger_normalised(7)
    with pytest.raises(BadParameterError):
        peak_gain_change_db([TunedStage(1e8, 10)], [TunedStage(1e8, 10)] * 2)
    with pytest.raises(BadParameterError):
        design_stagger((100e6, 88e6), 2)


def test_cascade_response_of_one_circuit():
    # single circuit: -3.01 dB at f0 (1 +- 1/(2Q)) approximately, exactly where Q x = 1
    f0, q = 100e6, 50.0
    x_edge = 1 / q
    f_hi = f0 * (x_edge + np.sqrt(x_edge ** 2 + 4)) / 2  # solves f/f0 - f0/f = 1/Q
    assert float(cascade_response_db(f_hi, [TunedStage(f0, q)])) == pytest.approx(HALF_POWER_DB, abs=1e-9)


@pytest.mark.parametrize("n", [2, 3])
def test_exact_design_tends_to_the_published_narrowband_offsets(n):
    # at 1 % fractional bandwidth the exact circuits sit at the published stagger offsets and widths
    lo, hi = 94.0e6, 95.0e6
    plan = design_stagger((lo, hi), n)
    for s, o, w in zip(plan.stages, *stagger_normalised(n)):
        assert s.f0_hz == pytest.approx(plan.center_hz + o * 1e6, abs=0.02e6)
        assert s.bw_hz == pytest.approx(w * 1e6, rel=0.02)


@pytest.mark.parametrize("f0_hz, q", [(88e6, 5.0), (94.5e6, 47.0), (107e6, 300.0), (100e6, 0.8)])
def test_single_circuit_widths_exact(f0_hz, q):
    # one tuned circuit: the -3 dB points solve Q x = +-1 with f_lo f_hi = f0^2, so the width is
    # exactly f0/Q (BW_3dB = f0/Q, standard result); at -6 dB Q x = +-sqrt(3), width sqrt(3) f0/Q
    feats = curve_features([TunedStage(f0_hz, q)])
    assert feats.bw_3db_hz == pytest.approx(f0_hz / q, rel=1e-6)
    assert feats.bw_6db_hz == pytest.approx(np.sqrt(3) * f0_hz / q, rel=1e-6)
    assert feats.edges_3db_hz[0] * feats.edges_3db_hz[1] == pytest.approx(f0_hz ** 2, rel=1e-9)
    assert feats.peak_hz == pytest.approx(f0_hz, rel=1e-7)
