"""A/B comparison against known truth: accuracy, interval coverage, pairing, verdicts, refusals.

Truth model and its parameters: tests/compare_truth.py (simulated, invented stations).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from scipy import stats as sps

from analysis.compare.core import compare_configurations, compare_matrices
from analysis.compare.pairing import pair_sweeps
from analysis.errors import BadParameterError, MismatchError, NoDataError
from analysis.terms import utc_to_epoch_s as utc_s
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
    return compare_configurations(alternating_db[0], "bare", "preamp-a")


def _by_freq(res):
    return {c.freq_hz: c for c in res.channels}


def test_delta_within_half_db_of_truth(result):
    assert result.paired and result.n_pairs == 40
    assert result.method.startswith("paired") and "Student t" in result.method
    ch = _by_freq(result)
    for f, strong, true in zip(FREQS_HZ.tolist(), STRONG, TRUE_DELTA):
        if strong:
            assert ch[f].delta_cn_db == pytest.approx(true, abs=0.5), f


def test_identity_gain_minus_noise_rise(result):
    checked = 0
    # the items are the census stations: one per simulated transmitter, on its carrier
    assert result.unit == "station"
    assert sorted(c.freq_hz for c in result.items) == FREQS_HZ[np.isfinite(CN0_DB)].tolist()
    column = {f: j for j, f in enumerate(FREQS_HZ.tolist())}
    for c in result.items:
        j = column[c.freq_hz]
        g, r, strong = GAIN_DB[j], RISE_DB[j], STRONG[j]
        assert c.noise_rise_db is not None
        assert c.noise_rise_db == pytest.approx(r, abs=0.2)  # every station, strong or weak
        if c.delta_cn_db is None:
            assert c.gain_db is None
            continue
        # reported values obey delta = gain - noise rise exactly (gain := delta + rise), and the
        # base and test columns come from the same pairs as the delta, so the table adds up
        assert c.delta_cn_db == pytest.approx(c.gain_db - c.noise_rise_db, abs=1e-9)
        assert c.test_cn_db - c.base_cn_db == pytest.approx(c.delta_cn_db, abs=1e-3)
        if strong:
            assert c.gain_db == pytest.approx(g, abs=0.5)
            checked += 1
    assert checked >= 12


def test_interval_coverage_over_40_seeds():
    hits, total, widths = 0, 0, []
    for seed in range(40):
        base, test = matrices(make_truth(1000 + seed, n_per_side=30))
        res = compare_matrices(base, test)
        for c, true, strong in zip(res.channels, TRUE_DELTA, STRONG):
            if strong and c.ci_low_db is not None:
                total += 1
                hits += c.ci_low_db <= true <= c.ci_high_db
                widths.append(c.ci_high_db - c.ci_low_db)
    assert total >= 40 * 10
    coverage = hits / total
    assert coverage >= 0.92, coverage  # nominal 95 %
    assert np.median(widths) < 1.0  # informative, not trivially wide


def test_paired_intervals_narrower_than_unpaired_under_slow_fading():
    base, test = matrices(make_truth(21, n_per_side=40, fade_db=4.0, fade_tau_s=900.0))
    paired = compare_matrices(base, test, pairing="auto")
    unpaired = compare_matrices(base, test, pairing="unpaired")
    assert paired.paired and not unpaired.paired and unpaired.method.startswith("unpaired")
    ratios = [
        (p.ci_high_db - p.ci_low_db) / (u.ci_high_db - u.ci_low_db)
        for p, u, s in zip(paired.channels, unpaired.channels, STRONG)
        if s and p.ci_low_db is not None and u.ci_low_db is not None
    ]
    assert len(ratios) >= 10 and np.median(ratios) < 0.5


def test_blocks_taken_at_different_times_use_unpaired_welch(tmp_path):
    truth = make_truth(8, n_per_side=30, alternate=False, fade_db=0.5, fade_tau_s=5.0)
    path = tmp_path / "blocks.db"
    write_db(path, truth)
    res = compare_configurations(path, "bare", "preamp-a")
    assert not res.paired and res.n_pairs == 0
    assert "Welch" in res.method
    ch = _by_freq(res)
    inside = []
    for f, strong, true in zip(FREQS_HZ.tolist(), STRONG, TRUE_DELTA):
        if strong:
            assert ch[f].delta_cn_db == pytest.approx(true, abs=0.5)
            inside.append(ch[f].ci_low_db <= true <= ch[f].ci_high_db)
    assert len(inside) >= 12 and np.mean(inside) >= 0.8


def test_verdicts_follow_the_stated_rules():
    base, test = matrices(make_truth(3, n_per_side=30, fade_db=0.5))
    res = compare_matrices(base, test)
    ch = _by_freq(res)
    f = FREQS_HZ.tolist()
    assert ch[f[0]].verdict == "improved"          # +5 dB
    assert ch[f[19]].verdict == "unchanged"        # 0 dB: interval within +-0.5 dB
    assert ch[f[23]].verdict == "worse"            # -7 dB
    assert ch[f[2]].verdict == "gained"            # -1 dB -> +4 dB: detected only with test
    assert ch[f[21]].verdict == "lost"             # 4 dB -> -3 dB: detected only with base
    assert ch[f[3]].verdict == "not received"      # no station
    assert ch[f[3]].delta_cn_db is None and ch[f[3]].noise_rise_db == pytest.approx(9.0, abs=0.3)
    assert res.thresholds["min_change_db"] == 0.5 and res.thresholds["confidence"] == 0.95
    assert "wholly above 0 dB" in res.thresholds["improved_if"]
    # the +0.6 dB channel (f[17]): improved with a tight interval, undetermined at 80 % of the pairs
    # when the margin is wide enough to contain its interval it is unchanged
    assert ch[f[17]].verdict == "improved"
    wide = compare_matrices(base, test, min_change_db=1.5)
    assert _by_freq(wide)[f[17]].verdict == "unchanged"
    s = res.summary
    assert s["gained"] == 1 and s["frequencies_hz"]["gained"] == [f[2]] and s["frequencies_hz"]["lost"] == [f[21]]
    keys = ("helped", "hurt", "unchanged", "undetermined", "gained", "lost", "not_received")
    assert sum(s[k] for k in keys) == FREQS_HZ.size == s["rows"]
    for k, verdict in zip(keys, ("improved", "worse", "unchanged", "undetermined", "gained", "lost", "not received")):
        assert s[k] == sum(c.verdict == verdict for c in res.items)
    assert s["listenable"]["source"] == "common practice, no source"
    assert s["listenable"]["mono_test"] == sum(c.test_cn_db is not None and c.test_cn_db >= 12 for c in res.items)


def test_interval_spanning_zero_is_undetermined():
    """A 0 dB change measured with 1.5 dB fading that does not cancel (unpaired) and few sweeps:
    the interval spans zero and is wider than the margin, so the verdict is undetermined."""
    base, test = matrices(make_truth(4, n_per_side=4, alternate=False, fade_db=3.0, fade_tau_s=5.0))
    res = compare_matrices(base, test, pairing="unpaired")
    c = _by_freq(res)[FREQS_HZ[19]]
    assert c.ci_low_db < 0 < c.ci_high_db and c.verdict == "undetermined"


def test_one_sweep_per_side_gives_difference_without_interval():
    base, test = matrices(make_truth(5, n_per_side=1, fade_db=0.1))
    res = compare_matrices(base, test)
    c = res.channels[0]
    assert c.delta_cn_db == pytest.approx(TRUE_DELTA[0], abs=0.5)
    assert c.ci_low_db is None and c.ci_high_db is None
    assert c.verdict == "undetermined"  # fewer than 3 pairs: no interval, no verdict


def test_noise_rise_explained_at_the_same_frequencies(result):
    s = result.summary
    # measured on the raster detail: the channels no sweep received (the unoccupied ones)
    assert s["broadband_noise_rise_db"] == pytest.approx(9.0, abs=0.2)
    assert s["unoccupied_channels"] == int(np.sum(~np.isfinite(CN0_DB)))
    assert s["median_noise_rise_db"] == pytest.approx(9.0, abs=0.2)  # at the stations themselves
    assert "less than the signals" in s["noise_source"]


def test_to_dict_is_json_without_nan(result):
    text = json.dumps(result.to_dict(), allow_nan=False)
    doc = json.loads(text)
    # one row per census station (the 17 simulated transmitters), not per raster channel
    assert doc["base"] == "bare" and doc["unit"] == "station" and len(doc["items"]) == int(np.isfinite(CN0_DB).sum())
    for row in doc["items"]:
        for key in ("freq_hz", "base_cn_db", "test_cn_db", "delta_cn_db", "ci_low_db", "ci_high_db",
                    "gain_db", "noise_rise_db", "verdict", "pairs"):
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
    with pytest.raises(NoDataError, match=r"'preamp-b'.*it holds: bare \(antenna: 40 sweeps\)"):
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




def test_p_value_matches_scipy_paired_t(result, alternating_db):
    from scipy import stats as sps

    base, test = matrices(alternating_db[1])
    bi, ti, _ = pair_sweeps(utc_s(base.started_utc), utc_s(test.started_utc))
    j = 0
    d = test.cn_db[ti, j].astype(float) - base.cn_db[bi, j].astype(float)
    ref = sps.ttest_1samp(d[np.isfinite(d)], 0.0)
    assert result.channels[j].p_value == pytest.approx(ref.pvalue, rel=1e-4, abs=1e-12)
    ci = ref.confidence_interval(0.95)
    assert result.channels[j].ci_low_db == pytest.approx(ci.low, abs=1e-3)
    assert result.channels[j].ci_high_db == pytest.approx(ci.high, abs=1e-3)


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
    res = compare_configurations(db, "bare", "preamp-staggered", channels=True)
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
    from analysis.workflows import NoiseOptions, assess

    missing_enr = assess(db, "bare", "preamp-staggered", with_diagnosis=False).predicted_noise_rise
    assert missing_enr.startswith("not available:")
    full = assess(db, "bare", "preamp-staggered", with_diagnosis=False, options=NoiseOptions(enr_db=15.0))
    pred = full.predicted_noise_rise
    assert isinstance(pred, dict) and abs(pred["excess_db"]) < 1.0 and "agrees" in pred["note"]
    assert pred["median_predicted_db"] == pytest.approx(float(np.median(rise_truth)), abs=0.5)


def test_noise_rise_explanation_by_case():
    """delta C/N = G - R: the sentence follows the signs (margins 1 dB, common practice, no source)."""
    from analysis.compare.summary import noise_rise_explanation

    assert "lifts signals above it" in noise_rise_explanation(19.0, 17.4, 12)     # receiver noise dominated
    assert "more gain will not help" in noise_rise_explanation(10.0, 9.6, 12)      # noise ahead dominates
    assert "adds noise beyond its gain" in noise_rise_explanation(-20.0, 7.2, 12)  # floor rose, signals fell
    attenuated = noise_rise_explanation(-14.7, -3.8, 12)  # a passband that misses the stations
    assert "attenuates the signals" in attenuated and "adds noise" not in attenuated
    assert noise_rise_explanation(None, 1.0, 0).startswith("not available")
