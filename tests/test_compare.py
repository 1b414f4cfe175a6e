"""A/B comparison against known truth: accuracy, interval coverage, pairing, verdicts, refusals.

Truth model and its parameters: tests/compare_truth.py (simulated, invented stations).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from scipy import stats as sps

from analysis.compare import compare_configurations, compare_matrices
from analysis.compare_estimators import (
    bootstrap_median_ci,
    exact_bootstrap_median_ci,
    hodges_lehmann_shift,
    pair_sweeps,
)
from analysis.errors import BadParameterError, MismatchError, NoDataError
from compare_truth import CN0_DB, FREQS_HZ, GAIN_DB, RISE_DB, make_truth, matrices, write_db
from survey.records import SweepSettings

TRUE_DELTA = GAIN_DB - RISE_DB
STRONG = np.isfinite(CN0_DB) & (CN0_DB > 6) & (CN0_DB + TRUE_DELTA > 6)  # C/N above 6 dB in both


@pytest.fixture(scope="module")
def alternating_db(tmp_path_factory):
    path = tmp_path_factory.mktemp("cmp") / "ab.db"
    truth = make_truth(11, n_per_side=40)
    write_db(path, truth)
    return path, truth


@pytest.fixture(scope="module")
def result(alternating_db):
    return compare_configurations(alternating_db[0], "bare", "preamp-a", n_boot=1000)


def _by_freq(res):
    return {c.freq_hz: c for c in res.channels}


def test_delta_within_half_db_of_truth(result):
    assert result.paired and result.n_pairs == 40
    assert result.method.startswith("paired") and "Wilcoxon signed-rank" in result.method
    ch = _by_freq(result)
    for f, strong, true in zip(FREQS_HZ.tolist(), STRONG, TRUE_DELTA):
        if strong:
            assert ch[f].delta_cn_db == pytest.approx(true, abs=0.5), f


def test_identity_gain_minus_noise_rise(result):
    checked = 0
    for c, g, r, strong in zip(result.channels, GAIN_DB, RISE_DB, STRONG):
        assert c.noise_rise_db is not None
        assert c.noise_rise_db == pytest.approx(r, abs=0.2)  # every channel, occupied or not
        if c.delta_cn_db is None:
            assert c.gain_db is None
            continue
        # reported values obey delta = gain - noise rise exactly (gain := delta + rise)
        assert c.delta_cn_db == pytest.approx(c.gain_db - c.noise_rise_db, abs=1e-9)
        # and the independent estimate of the signal-power ratio agrees
        assert c.gain_direct_db == pytest.approx(c.gain_db, abs=0.3)
        if strong:
            assert c.gain_db == pytest.approx(g, abs=0.5)
            checked += 1
    assert checked >= 12


def test_interval_coverage_over_40_seeds():
    hits, total, widths = 0, 0, []
    for seed in range(40):
        base, test = matrices(make_truth(1000 + seed, n_per_side=30))
        res = compare_matrices(base, test, n_boot=300, seed=seed)
        for c, true, strong in zip(res.channels, TRUE_DELTA, STRONG):
            if strong and c.ci_low_db is not None:
                total += 1
                hits += c.ci_low_db <= true <= c.ci_high_db
                widths.append(c.ci_high_db - c.ci_low_db)
    assert total >= 40 * 10
    coverage = hits / total
    assert coverage >= 0.85, coverage  # nominal 95 %
    assert np.median(widths) < 1.0  # informative, not trivially wide


def test_paired_intervals_narrower_than_unpaired_under_slow_fading():
    base, test = matrices(make_truth(21, n_per_side=40, fade_db=4.0, fade_tau_s=900.0))
    paired = compare_matrices(base, test, pairing="auto", n_boot=500)
    unpaired = compare_matrices(base, test, pairing="unpaired")
    assert paired.paired and not unpaired.paired and unpaired.method.startswith("unpaired")
    ratios = [
        (p.ci_high_db - p.ci_low_db) / (u.ci_high_db - u.ci_low_db)
        for p, u, s in zip(paired.channels, unpaired.channels, STRONG)
        if s and p.ci_low_db is not None and u.ci_low_db is not None
    ]
    assert len(ratios) >= 10 and np.median(ratios) < 0.5


def test_blocks_taken_at_different_times_use_unpaired_hodges_lehmann(tmp_path):
    truth = make_truth(8, n_per_side=30, alternate=False, fade_db=0.5, fade_tau_s=5.0)
    path = tmp_path / "blocks.db"
    write_db(path, truth)
    res = compare_configurations(path, "bare", "preamp-a")
    assert not res.paired and res.n_pairs == 0
    assert "Hodges-Lehmann" in res.method and "Mann-Whitney" in res.method
    ch = _by_freq(res)
    inside = []
    for f, strong, true in zip(FREQS_HZ.tolist(), STRONG, TRUE_DELTA):
        if strong:
            assert ch[f].delta_cn_db == pytest.approx(true, abs=0.5)
            inside.append(ch[f].ci_low_db <= true <= ch[f].ci_high_db)
    assert len(inside) >= 12 and np.mean(inside) >= 0.8


def test_verdicts_follow_the_stated_thresholds():
    base, test = matrices(make_truth(3, n_per_side=30, fade_db=0.5))
    res = compare_matrices(base, test, n_boot=500)
    ch = _by_freq(res)
    f = FREQS_HZ.tolist()
    assert ch[f[0]].verdict == "improved"          # +5 dB
    assert ch[f[19]].verdict == "unchanged"        # 0 dB
    assert ch[f[23]].verdict == "worse"            # -7 dB
    assert ch[f[2]].verdict == "gained"            # -1 dB -> +4 dB: received only with test
    assert ch[f[21]].verdict == "lost"             # 4 dB -> -3 dB: received only with base
    assert ch[f[3]].verdict == "not received"      # no station
    assert res.thresholds["min_change_db"] == 0.5 and res.thresholds["confidence"] == 0.95
    assert "interval above 0 dB" in res.thresholds["improved_if"]
    # a larger threshold turns the +1 dB channel (f[16]) into unchanged
    assert ch[f[16]].verdict == "improved"
    strict = compare_matrices(base, test, n_boot=500, min_change_db=1.5)
    assert _by_freq(strict)[f[16]].verdict == "unchanged"
    s = res.summary
    assert s["verdict_counts"]["gained"] == 1 and s["gained_hz"] == [f[2]] and s["lost_hz"] == [f[21]]
    assert sum(s["verdict_counts"].values()) == FREQS_HZ.size
    assert s["best_channel"]["freq_hz"] in f[:6] and s["worst_channel"]["freq_hz"] in (f[21], f[23])
    assert s["usable_cn_db_source"] == "common practice, no source"
    usable_test = sum(c.test_cn_db is not None and c.test_cn_db >= 12 for c in res.channels)
    assert s["usable_test"] == usable_test


def test_one_sweep_per_side_gives_difference_without_interval():
    base, test = matrices(make_truth(5, n_per_side=1, fade_db=0.1))
    res = compare_matrices(base, test)
    c = res.channels[0]
    assert c.delta_cn_db == pytest.approx(TRUE_DELTA[0], abs=0.5)
    assert c.ci_low_db is None and c.ci_high_db is None
    assert "no interval" in res.method and "fewer than 6" in res.method
    assert c.verdict == "improved"  # threshold alone, as the method says


def test_noise_rise_interpretation(result):
    s = result.summary
    assert s["broadband_noise_rise_db"] == pytest.approx(9.0, abs=0.2)
    assert s["unoccupied_channels"] == int(np.sum(~np.isfinite(CN0_DB)))
    assert "less than the signals" in s["noise_source"]
    assert s["predicted_noise_rise"].startswith("not available: no noise-figure runs")
    # a floor that rises as much as the signals: outside or preamp noise dominates
    base, test = matrices(make_truth(4, n_per_side=20, gain_db=np.full(24, 10.0), rise_db=np.full(24, 9.8)))
    assert "more gain will not help" in compare_matrices(base, test, n_boot=200).summary["noise_source"]
    base, test = matrices(make_truth(4, n_per_side=20, gain_db=np.full(24, 6.0), rise_db=np.full(24, 9.0)))
    assert "adds noise beyond its gain" in compare_matrices(base, test, n_boot=200).summary["noise_source"]


def test_to_dict_is_json_without_nan(result):
    d = result.to_dict()
    text = json.dumps(d, allow_nan=False)
    back = json.loads(text)
    assert back["base"] == "bare" and back["test"] == "preamp-a"
    assert len(back["channels"]) == FREQS_HZ.size
    row = back["channels"][0]
    for key in ("freq_hz", "base_cn_db", "test_cn_db", "delta_cn_db", "ci_low_db", "ci_high_db",
                "gain_db", "noise_rise_db", "verdict"):
        assert key in row


def test_refuses_different_band_plan_and_bandwidth(tmp_path):
    truth = make_truth(1, n_per_side=3)
    path = tmp_path / "band.db"
    write_db(path, truth, base_settings=SweepSettings(band="simulated-europe"),
             test_settings=SweepSettings(band="simulated-wide"))
    with pytest.raises(MismatchError, match="band plan differs.*simulated-europe.*simulated-wide.*--band"):
        compare_configurations(path, "bare", "preamp-a")
    path2 = tmp_path / "bw.db"
    write_db(path2, truth, base_settings=SweepSettings(band="b", channel_bw_hz=200_000.0),
             test_settings=SweepSettings(band="b", channel_bw_hz=180_000.0))
    with pytest.raises(MismatchError, match="channel bandwidth differs.*200000 Hz.*180000 Hz"):
        compare_configurations(path2, "bare", "preamp-a")


def test_warns_with_numbers_on_gain_and_sample_rate(tmp_path):
    path = tmp_path / "warn.db"
    write_db(path, make_truth(1, n_per_side=8),
             base_settings=SweepSettings(band="b", gain_db=29.7, sample_rate_hz=2_400_000.0),
             test_settings=SweepSettings(band="b", gain_db=None, sample_rate_hz=2_048_000.0))
    res = compare_configurations(path, "bare", "preamp-a")
    text = " | ".join(res.warnings)
    assert "receiver gain differs: 'bare' 29.7 dB, 'preamp-a' auto (tuner AGC)" in text
    assert "sample rate differs: 'bare' 2.4e+06 Hz, 'preamp-a' 2.048e+06 Hz" in text
    clean = tmp_path / "clean.db"
    write_db(clean, make_truth(1, n_per_side=8))
    assert compare_configurations(clean, "bare", "preamp-a").warnings == ()


def test_no_data_names_labels(alternating_db):
    with pytest.raises(NoDataError, match=r"'preamp-b'.*labels present: bare \(antenna: 40 sweeps\)"):
        compare_configurations(alternating_db[0], "bare", "preamp-b")


def test_bad_parameters(alternating_db):
    with pytest.raises(BadParameterError):
        compare_configurations(alternating_db[0], "bare", "preamp-a", confidence=1.2)
    with pytest.raises(BadParameterError):
        compare_configurations(alternating_db[0], "bare", "preamp-a", pairing="sometimes")


# -- estimators against references ----------------------------------------------------------
def test_pairing_alternating_and_each_used_once():
    b = np.arange(10) * 20.0
    for t in (b + 10.0, b - 10.0):  # test after or before each base sweep
        bi, ti, tol = pair_sweeps(b, t)
        assert tol == pytest.approx(20.0) and bi.size == 10
        assert np.unique(ti).size == 10 and np.all(np.abs(t[ti] - b[bi]) == 10.0)
    bi, ti, _ = pair_sweeps(b, b[:3] + 1000.0)  # far away: no pairs
    assert bi.size == 0
    bi, ti, _ = pair_sweeps(np.array([0.0, 1.0, 2.0]), np.array([1.1]), tolerance_s=5.0)
    assert bi.tolist() == [1] and ti.tolist() == [0]


def test_wilcoxon_p_matches_scipy(result, alternating_db):
    # recompute the paired differences of one channel from the stored truth
    _, truth = alternating_db
    from analysis.channel_stats import cn_db_from

    j = 0
    bp, bn = truth.base_power.astype(np.float32), truth.base_noise.astype(np.float32)
    tp, tn = truth.test_power.astype(np.float32), truth.test_noise.astype(np.float32)
    d = cn_db_from(tp, tn, tp - tn >= 3)[:, j] - cn_db_from(bp, bn, bp - bn >= 3)[:, j]
    assert result.channels[j].p_value == pytest.approx(sps.wilcoxon(d[np.isfinite(d)]).pvalue, rel=1e-9)
    assert result.channels[j].delta_cn_db == pytest.approx(float(np.median(d)), abs=1e-4)


def test_exact_bootstrap_matches_monte_carlo():
    rng = np.random.default_rng(7)
    x = rng.standard_t(5, size=(301, 3))
    x[250:, 2] = np.nan
    lo_e, hi_e = exact_bootstrap_median_ci(x, 0.95)
    lo_m, hi_m = bootstrap_median_ci(x, 0.95, 5000, np.random.default_rng(1))
    np.testing.assert_allclose(lo_e, lo_m, atol=0.05)
    np.testing.assert_allclose(hi_e, hi_m, atol=0.05)
    # endpoints are order statistics of the data
    for j in range(3):
        assert lo_e[j] in x[:, j] and hi_e[j] in x[:, j]


def test_hodges_lehmann_against_brute_force_and_textbook_rank():
    rng = np.random.default_rng(3)
    t, b = rng.normal(1.0, 1, 12), rng.normal(0.0, 1, 9)
    est, lo, hi = hodges_lehmann_shift(t, b, 0.95)
    d = np.sort(np.subtract.outer(t, b).ravel())
    assert est == pytest.approx(np.median(d))
    # c = floor(nm/2 - 1.96 sqrt(nm(n+m+1)/12)) = floor(54 - 1.96 * 14.2478) = 26 (computed here)
    c = int(np.floor(54 - sps.norm.ppf(0.975) * np.sqrt(108 * 22 / 12)))
    assert c == 26 and lo == d[c - 1] and hi == d[108 - c]


# -- end to end on the simulated scene ------------------------------------------------------
@pytest.mark.slow
def test_end_to_end_on_simulated_scene(tmp_path):
    """`bandcensus simulate` (SIMULATED demo scene, invented stations) then compare against the
    scene's chain truth: delta C/N = 10 log10((Ta + Tr) / (Ta + Tp + Tr/G)) (Friis 1944)."""
    from bandcensus.cli import main
    from survey.scene import chain_truth, load_scene

    scene_path = Path(__file__).resolve().parent.parent / "recordings_demo" / "quorrelby_hill.toml"
    if not scene_path.exists():
        pytest.skip("demo scene not present")
    db = tmp_path / "sim.db"
    code = main(["simulate", str(scene_path), "--db", str(db), "--alternate", "bare,preamp-staggered",
                 "--sweeps", "14", "--every", "20s", "--band", "custom:95.0-97.0:100", "--dwell-ms", "20",
                 "--seed", "3", "--json"])
    assert code == 0
    res = compare_configurations(db, "bare", "preamp-staggered")
    assert res.paired and res.n_pairs == 7 and res.warnings == ()
    scene = load_scene(scene_path)
    ch = _by_freq(res)
    f = np.asarray(sorted(ch), float)
    base_t = chain_truth(scene, "bare", "antenna", f)
    test_t = chain_truth(scene, "preamp-staggered", "antenna", f)
    delta_truth = dict(zip(f.astype(int).tolist(), 10 * np.log10(base_t.system_temp_k / test_t.system_temp_k)))
    gain_truth = dict(zip(f.astype(int).tolist(), test_t.gain_db))
    rise_truth = 10 * np.log10(test_t.rx_input_temp_k / base_t.rx_input_temp_k)
    station = ch[95_900_000]  # invented station at 95.9 MHz, about 10 dB C/N without the preamp
    assert station.verdict == "improved"
    assert station.delta_cn_db == pytest.approx(delta_truth[95_900_000], abs=0.6)
    assert station.gain_db == pytest.approx(gain_truth[95_900_000], abs=0.5)
    assert res.summary["broadband_noise_rise_db"] == pytest.approx(float(np.median(rise_truth)), abs=0.5)
    # noise-figure runs (and a terminated run of the receiver alone, for the antenna temperature):
    # the noise rise the measured preamp predicts joins the summary
    for cfg, inputs in (("bare", ("noise-hot", "noise-cold", "terminated")),
                        ("preamp-staggered", ("noise-hot", "noise-cold"))):
        for inp in inputs:
            assert main(["simulate", str(scene_path), "--db", str(db), "--config", cfg, "--input", inp,
                         "--sweeps", "2", "--band", "custom:95.0-97.0:100", "--dwell-ms", "20", "--seed", "5",
                         "--json"]) == 0
    missing_enr = compare_configurations(db, "bare", "preamp-staggered").summary["predicted_noise_rise"]
    assert missing_enr.startswith("not available:") and "enr" in missing_enr.lower()
    pred = compare_configurations(db, "bare", "preamp-staggered",
                                  noise_options={"enr_db": 15.0}).summary["predicted_noise_rise"]
    assert isinstance(pred, dict) and abs(pred["excess_db"]) < 1.0 and "agrees" in pred["note"]
    assert pred["median_predicted_db"] == pytest.approx(float(np.median(rise_truth)), abs=0.5)


def test_smallest_samples_that_can_reach_significance():
    from analysis.compare_estimators import min_n_for_interval, min_n_unpaired

    # signed-rank: smallest two-sided p is 2 * 2**-n (0.0625 at n = 5, 0.03125 at n = 6)
    assert min_n_for_interval(0.05) == 6 and sps.wilcoxon(np.arange(1.0, 7.0)).pvalue < 0.05
    assert sps.wilcoxon(np.arange(1.0, 6.0)).pvalue > 0.05
    # rank-sum: smallest two-sided p is 2 / C(2k, k) (0.1 at k = 3, 0.029 at k = 4)
    assert min_n_unpaired(0.05) == 4
    assert sps.mannwhitneyu([5.0, 6, 7, 8], [1.0, 2, 3, 4]).pvalue < 0.05
    assert sps.mannwhitneyu([5.0, 6, 7], [1.0, 2, 3]).pvalue > 0.05
