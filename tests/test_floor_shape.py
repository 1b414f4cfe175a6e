"""The tuned-preamp floor model of survey/floor_shape.py against the textbook resonance curve.

Universal resonance curve of a single tuned circuit (F. E. Terman, Radio Engineers' Handbook,
1943): ``|H|^2 = 1 / (1 + Q^2 (f/f0 - f0/f)^2)``, unity at ``f0`` and one half where
``Q (f/f0 - f0/f) = +-1``, i.e. at ``f = f0 (sqrt(1 + 1/(4 Q^2)) +- 1/(2 Q))``: the -3 dB
points lie ``f0 / Q`` apart (exactly, not only for large Q).
"""

from __future__ import annotations

import numpy as np
import pytest

from survey.floor_shape import fit_floor_shape, resonance_power


@pytest.mark.parametrize("q", [5.0, 24.0, 80.0])
def test_universal_resonance_curve_half_power_points(q):
    f0 = 98.0e6
    upper = f0 * (np.sqrt(1.0 + 1.0 / (4.0 * q * q)) + 1.0 / (2.0 * q))
    lower = f0 * (np.sqrt(1.0 + 1.0 / (4.0 * q * q)) - 1.0 / (2.0 * q))
    assert resonance_power(np.array([f0]), f0, q)[0] == pytest.approx(1.0)
    assert resonance_power(np.array([lower, upper]), f0, q) == pytest.approx([0.5, 0.5], rel=1e-12)
    assert upper - lower == pytest.approx(f0 / q, rel=1e-12)


def _hops(truth_db, occupied, seed, sigma=0.2):
    """Hop-like slices (1.8 MHz, 8 kHz groups) of a floor, free outside ``occupied`` (Hz pairs)."""
    rng = np.random.default_rng(seed)
    freq, floor, sig, upper = [], [], [], []
    for center in np.arange(88.4e6, 108.0e6, 1.7e6):
        f = center + np.arange(-0.9e6, 0.9e6, 8e3)
        y = truth_db(f) + rng.normal(0.0, sigma, f.size)
        busy = np.zeros(f.size, dtype=bool)
        for lo, hi in occupied:
            busy |= (f >= lo) & (f <= hi)
        freq.append(f)
        floor.append(np.where(busy, np.nan, y))
        sig.append(np.full(f.size, sigma))
        upper.append(np.where(busy, y + 3.0, np.nan))  # signals only add power
    return freq, floor, sig, upper


def _cascade_db(f0, q, circuits, peak_db=-80.0, flat_db=-100.0):
    return lambda f: 10 * np.log10(10 ** (flat_db / 10) + 10 ** (peak_db / 10) * resonance_power(f, f0, q) ** circuits)


@pytest.mark.parametrize("circuits", [1, 2, 3])
def test_a_cascade_is_recovered_across_a_covered_peak(circuits):
    truth = _cascade_db(98.0e6, 24.0 * np.sqrt(circuits / 3.0), circuits)
    freq, floor, sig, upper = _hops(truth, [(96.5e6, 99.5e6)], seed=circuits)  # 3 MHz over the peak occupied
    grid = np.arange(87.5e6, 108.9e6, 8e3)
    guide = np.interp(grid, np.concatenate(freq), np.nan_to_num(np.concatenate(floor), nan=-100.0))
    shape = fit_floor_shape(freq, floor, sig, upper, grid, guide)
    assert shape is not None
    assert shape.circuits == circuits
    assert np.max(np.abs(shape.db(grid) - truth(grid))) < 0.3  # a smoother bridging 3 MHz: several dB


def test_staggered_circuits_are_not_taken_for_identical_ones():
    f0a, f0b, q = 95.0e6, 101.0e6, 30.0  # two peaks with a 10 dB dip between them

    def truth(f):
        return 10 * np.log10(1e-10 + 1e-8 * resonance_power(f, f0a, q) + 1e-8 * resonance_power(f, f0b, q))

    freq, floor, sig, upper = _hops(truth, [(97.0e6, 99.0e6)], seed=5)
    grid = np.arange(87.5e6, 108.9e6, 8e3)
    guide = np.interp(grid, np.concatenate(freq), np.nan_to_num(np.concatenate(floor), nan=-100.0))
    assert fit_floor_shape(freq, floor, sig, upper, grid, guide) is None
