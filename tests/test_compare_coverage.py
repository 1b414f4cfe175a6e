"""Coverage of the intervals behind the verdicts, measured by simulation (fixed seeds).

Each simulated survey has 12 invented stations with known C/N changes between -3 and +5 dB,
measured in ``n`` alternating base/test sweep pairs. Per sweep the station's signal fades by a
log-normal factor (standard deviation 0, or 1.5 dB, drawn independently for every sweep so that
pairing does not cancel it: the hard case), and channel and noise powers carry radiometer
errors of 3 % (Dicke 1946: ``1/sqrt(B tau)`` for B = 200 kHz, tau = 5.6 ms). The nominal
coverage is 95 %; the project's target is at least 93 % for 3, 7 and 20 pairs.

Figures measured with these seeds (200 surveys x 12 stations = 2400 intervals per cell):
see ``COVERAGE_MEASURED`` below, checked by the test.
"""

from __future__ import annotations

import numpy as np
import pytest

from analysis.compare.core import compare_matrices
from survey.store import ChannelMatrix

N_SEEDS = 200
TRUE_DELTA_DB = np.array([-3.0, -2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 5.0])
BASE_CN_DB = np.linspace(18.0, 34.0, TRUE_DELTA_DB.size)
FREQS_HZ = np.arange(88_100_000, 88_100_000 + TRUE_DELTA_DB.size * 200_000, 200_000, dtype=np.int64)
RADIOMETER_REL = 0.03
NOISE_DBFS = -70.0


def _stamps(start_s: float, n: int, step_s: float) -> tuple[str, ...]:
    base = np.datetime64("2026-06-01T20:00:00", "us")
    return tuple(str(base + np.timedelta64(int((start_s + k * step_s) * 1e6), "us")) + "Z" for k in range(n))


def _side(rng: np.random.Generator, n: int, cn_db: np.ndarray, fade_db: float, noise_rise_db: float):
    fade = rng.normal(0.0, fade_db, (n, cn_db.size)) if fade_db > 0 else np.zeros((n, cn_db.size))
    n_lin = 10 ** ((NOISE_DBFS + noise_rise_db) / 10)
    s_lin = n_lin * 10 ** ((cn_db + fade) / 10)
    p_meas = (s_lin + n_lin) * (1 + RADIOMETER_REL * rng.standard_normal((n, cn_db.size)))
    n_meas = n_lin * (1 + RADIOMETER_REL * rng.standard_normal((n, cn_db.size)))
    return (10 * np.log10(p_meas)).astype(np.float32), (10 * np.log10(n_meas)).astype(np.float32)


def simulated_pair(seed: int, n_pairs: int, fade_db: float) -> tuple[ChannelMatrix, ChannelMatrix]:
    """Base and test matrices of one simulated survey (alternating sweeps 60 s apart)."""
    rng = np.random.default_rng(seed)
    pb, nb = _side(rng, n_pairs, BASE_CN_DB, fade_db, 0.0)
    pt, nt = _side(rng, n_pairs, BASE_CN_DB + TRUE_DELTA_DB, fade_db, 6.0)
    detected = np.ones((n_pairs, FREQS_HZ.size), bool)
    ids = np.arange(n_pairs, dtype=np.int64)
    base = ChannelMatrix(ids, _stamps(0.0, n_pairs, 120.0), FREQS_HZ, pb, nb, detected)
    test = ChannelMatrix(ids + 1000, _stamps(60.0, n_pairs, 120.0), FREQS_HZ, pt, nt, detected)
    return base, test


def measure_coverage(n_pairs: int, fade_db: float, n_seeds: int = N_SEEDS, seed0: int = 20_260_601) -> float:
    """Fraction of 95 % intervals (over ``n_seeds`` surveys x 12 stations) containing the true change."""
    hits = total = 0
    for k in range(n_seeds):
        base, test = simulated_pair(seed0 + 7919 * k + 31 * n_pairs + int(10 * fade_db), n_pairs, fade_db)
        res = compare_matrices(base, test, confidence=0.95)
        assert res.paired and res.n_pairs == n_pairs
        for item, truth in zip(res.items, TRUE_DELTA_DB):
            assert item.pairs == n_pairs and item.ci_low_db is not None
            hits += item.ci_low_db <= truth <= item.ci_high_db
            total += 1
    return hits / total


#: Coverage measured by this test with the seeds above (pairs, fading dB) -> fraction.
COVERAGE_MEASURED = {
    (3, 0.0): 0.9567, (3, 1.5): 0.9500, (7, 0.0): 0.9412, (7, 1.5): 0.9492, (20, 0.0): 0.9458, (20, 1.5): 0.9525,
}


@pytest.mark.parametrize("n_pairs", [3, 7, 20])
@pytest.mark.parametrize("fade_db", [0.0, 1.5])
def test_paired_t_interval_covers_at_least_93_percent(n_pairs, fade_db):
    coverage = measure_coverage(n_pairs, fade_db)
    assert coverage >= 0.93, (n_pairs, fade_db, coverage)
    assert coverage == pytest.approx(COVERAGE_MEASURED[(n_pairs, fade_db)], abs=5e-4)  # deterministic seeds


def test_fewer_than_three_pairs_give_no_interval_and_no_verdict():
    base, test = simulated_pair(5, 2, 1.5)
    res = compare_matrices(base, test)
    assert all(i.ci_low_db is None and i.verdict == "undetermined" for i in res.items)


def test_verdict_error_rate_when_sweeps_scatter():
    """With 0.8 dB scatter and 7 pairs a verdict that contradicts the truth's sign (improved for a
    negative change, worse for a positive one, unchanged for |change| > 0.5 dB) stays near the
    5 % the interval allows, instead of the third of a fixed 0.5 dB threshold rule."""
    wrong = total = 0
    for k in range(200):
        base, test = simulated_pair(900 + k, 7, 0.8)
        for item, truth in zip(compare_matrices(base, test).items, TRUE_DELTA_DB):
            total += 1
            wrong += ((item.verdict == "improved" and truth <= 0) or (item.verdict == "worse" and truth >= 0)
                      or (item.verdict == "unchanged" and abs(truth) > 0.5))
    assert wrong / total <= 0.05, wrong / total
