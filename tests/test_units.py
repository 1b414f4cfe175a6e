"""dB and noise-temperature conversions (survey.units), including documented edge cases."""

import math

import numpy as np
import pytest

from survey import units


def test_kt0_density():
    # k*T0 = -173.975 dBm/Hz, derived from k = 1.380649e-23 J/K (SI Brochure, 9th ed.) and T0 = 290 K
    # (IEEE Std 161); recomputed here rather than trusting the digits.
    expected = 10 * math.log10(1.380649e-23 * 290.0 / 1e-3)
    assert units.thermal_noise_dbm_per_hz() == pytest.approx(expected, abs=1e-9)
    assert units.thermal_noise_dbm_per_hz() == pytest.approx(-173.975, abs=0.001)
    # in 200 kHz: -120.96 dBm (REFERENCES.md, derived)
    assert units.thermal_noise_dbm_per_hz() + 10 * math.log10(200e3) == pytest.approx(-120.96, abs=0.01)


def test_db_round_trip_and_edges():
    x = np.array([1e-3, 0.5, 1.0, 2.0, 1e6])
    assert np.allclose(units.db_to_ratio(units.ratio_to_db(x)), x)
    assert units.ratio_to_db(0.0) == -math.inf
    assert math.isnan(units.ratio_to_db(-1.0))
    assert units.db_to_ratio(-math.inf) == 0.0


def test_noise_figure_temperature():
    # F = 1 + Te/T0 (IEEE Std 161): NF 3.0103 dB <-> 290 K; 0 dB <-> 0 K
    assert units.nf_db_to_k(10 * math.log10(2)) == pytest.approx(290.0)
    assert units.nf_db_to_k(0.0) == 0.0
    assert units.k_to_nf_db(290.0) == pytest.approx(3.0103, abs=1e-4)
    assert math.isnan(units.nf_db_to_k(-1.0))
    assert math.isnan(units.k_to_nf_db(-5.0))
    temps = np.array([10.0, 75.1, 627.0, 1000.0])
    assert np.allclose(units.nf_db_to_k(units.k_to_nf_db(temps)), temps)


def test_dbm_watts():
    assert units.dbm_to_w(30.0) == pytest.approx(1.0)
    assert units.w_to_dbm(1e-3) == pytest.approx(0.0)
    assert units.w_to_dbm(0.0) == -math.inf
