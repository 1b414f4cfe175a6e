"""Coverage of the uncertainty of the added-noise estimate (the unshaped floor ``beta``), by simulation.

The one estimate of noise added after the preamp is :func:`analysis.diagnose.noise_checks.fit_unshaped_floor`
(``N_t = G N_b + a G + beta``); ``compare``, ``diagnose`` and the report all reach it through
:func:`analysis.workflows.diagnosis_for`. Simulated chain (invented numbers): two tuned circuits
of Q 20 at 97 MHz with 20 dB of gain, input 290 K, receiver 400 K, preamp 100 K, 30 000 K entering
after the gain, 60 channels with 2 % radiometer scatter (Dicke 1946). Measured with these seeds
(200 each): 95.5 % of the +-1.96 sigma intervals contain the true ``beta`` with the gain known
exactly, 98.5 % with 0.2 dB and 99.0 % with 0.5 dB of random error in the gain curve (the bootstrap
over channels carries the misfit).
"""

from __future__ import annotations

import numpy as np
import pytest

from analysis.diagnose.noise_checks import fit_unshaped_floor

T_IN_K, T_R_K, T_P_K, T_S_K = 290.0, 400.0, 100.0, 30_000.0


def _covered(seed: int, gain_error_db: float, rel: float = 0.02, n: int = 60) -> bool:
    rng = np.random.default_rng(seed)
    f = np.linspace(88e6, 108e6, n)
    one = 1.0 / (1.0 + 20.0 ** 2 * (f / 97e6 - 97e6 / f) ** 2)
    gain = 100.0 * one * one
    base = (T_IN_K + T_R_K) * (1 + rel * rng.standard_normal(n))
    test = (gain * (T_IN_K + T_P_K) + T_S_K + T_R_K) * (1 + rel * rng.standard_normal(n))
    measured_gain = gain * 10 ** (gain_error_db * rng.standard_normal(n) / 10)
    fit = fit_unshaped_floor(measured_gain, base, test, seed=seed)
    sigma = max(float(np.std(fit["beta_boot"], ddof=1)), fit["beta_sigma_ls"])
    return abs(fit["beta"] - (T_S_K + T_R_K)) <= 1.96 * sigma


@pytest.mark.parametrize("gain_error_db, measured", [(0.0, 0.955), (0.2, 0.985), (0.5, 0.990)])
def test_added_noise_interval_covers_the_truth(gain_error_db, measured):
    coverage = float(np.mean([_covered(seed, gain_error_db) for seed in range(200)]))
    assert coverage >= 0.93
    assert coverage == pytest.approx(measured, abs=1e-9)  # fixed seeds: the figure in the docstring
