"""Start-up transients of foreign captures are found and left out (survey.settling, replay).

Truth: a capture of white Gaussian noise plus a tone whose first 6000 samples carry 2 dB more
gain (a receiver's gain loop settling, as in third-party captures). The channel power of the
steady part is known (Parseval: tone power A**2, noise s2 * B / fs); with the transient left
out the replayed power must match it, with it kept it must be biased high.
"""

from __future__ import annotations

import sqlite3

import numpy as np
import pytest

from bandcensus.cli import main
from survey.settling import MAD_TO_SIGMA, detect_startup_transient, segment_powers_db
from test_recording import write_foreign

FS = 2_400_000.0
N = 400_000
TRANSIENT = 6000


def _capture(seed=4, transient_db=2.0, transient=TRANSIENT):
    rng = np.random.default_rng(seed)
    t = np.arange(N) / FS
    z = np.sqrt(0.004 / 2) * (rng.standard_normal(N) + 1j * rng.standard_normal(N))
    z += 0.05 * np.exp(2j * np.pi * 300e3 * t)
    z[:transient] *= 10 ** (transient_db / 20)
    return z.astype(np.complex64)


def test_mad_scale_is_the_normal_one():
    # 1 / Phi^-1(0.75) = 1.482602... (normal quantile, any statistics handbook)
    from scipy.stats import norm

    assert MAD_TO_SIGMA == pytest.approx(1 / norm.ppf(0.75), rel=1e-4)


def test_detects_the_settling_stretch():
    found = detect_startup_transient(_capture())
    assert found is not None
    assert TRANSIENT <= found.n_samples <= TRANSIENT + 1024  # to the segment holding its end
    assert found.departure_db == pytest.approx(2.0, abs=0.3)


@pytest.mark.parametrize("seed", range(20))
def test_steady_noise_is_left_alone(seed):
    assert detect_startup_transient(_capture(seed=seed, transient_db=0.0)) is None


def test_segment_powers_by_parseval():
    z = 0.1 * np.exp(2j * np.pi * 0.01 * np.arange(4096))
    assert np.allclose(segment_powers_db(z, 1024), 20 * np.log10(0.1))


def _replay_power(tmp_path, name, extra):
    raw = np.empty(2 * N, "<f4")
    z = _capture()
    raw[0::2], raw[1::2] = z.real, z.imag
    meta = write_foreign(tmp_path, name, "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}], raw)
    db = tmp_path / f"{name}.db"
    assert main(["replay", str(meta), "--db", str(db), "--config", "x", "--quiet", "--json",
                 "--band", "custom:98.3-98.4:100", *extra]) == 0
    conn = sqlite3.connect(db)
    power = conn.execute("SELECT power_dbfs FROM channels WHERE freq_hz = 98300000").fetchone()[0]
    notes = conn.execute("SELECT notes FROM sweeps").fetchone()[0]
    conn.close()
    return power, notes


def test_replay_leaves_the_transient_out_and_says_so(tmp_path):
    truth = 10 * np.log10(0.05**2 + 0.004 * 200e3 / FS)
    auto, notes = _replay_power(tmp_path, "auto", [])
    kept, kept_notes = _replay_power(tmp_path, "kept", ["--skip-ms", "0"])
    by_hand, hand_notes = _replay_power(tmp_path, "hand", ["--skip-ms", "3"])
    assert "start-up transient left out of capture 0" in notes and kept_notes == ""
    assert "skipped by hand" in hand_notes
    assert abs(auto - truth) < 0.1 and abs(by_hand - truth) < 0.1
    assert kept - truth > 0.02  # 1.5 % of the samples 2 dB high: the bias the skip removes
