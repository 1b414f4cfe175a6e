"""Per-configuration channel statistics against values computed independently from the truth."""

from __future__ import annotations

import numpy as np
import pytest

from analysis.channel_stats import (
    SPREAD_NAME,
    channel_table,
    configuration_statistics,
    median_iqr,
    normalise_utc,
    statistics_from_arrays,
    utc_to_epoch_s,
)
from analysis.errors import BadParameterError, NoDataError
from compare_truth import FREQS_HZ, make_truth, write_db
from survey.records import SweepSettings
from survey.units import db_to_ratio, ratio_to_db

KEYS = {"freq_hz", "power_dbfs", "noise_dbfs", "cn_db", "received", "received_fraction", "sweeps", "cn_spread_db"}


@pytest.fixture(scope="module")
def truth_db(tmp_path_factory):
    path = tmp_path_factory.mktemp("stats") / "survey.db"
    truth = make_truth(5, n_per_side=12)
    write_db(path, truth)
    return path, truth


def _censored_cn(power, noise, margin=3.0):
    """Reference C/N per sweep: 10 log10(10**((P-N)/10) - 1), -inf when P - N < margin."""
    cn = np.asarray(ratio_to_db(np.asarray(db_to_ratio(power - noise)) - 1.0))
    return np.where(power - noise >= margin, cn, -np.inf)


def test_channel_table_matches_numpy_reference(truth_db):
    path, truth = truth_db
    rows = channel_table(path, "bare")
    assert [r["freq_hz"] for r in rows] == FREQS_HZ.tolist()
    assert all(set(r) == KEYS for r in rows)
    power = truth.base_power.astype(np.float32).astype(float)  # the store keeps float32 vectors
    noise = truth.base_noise.astype(np.float32).astype(float)
    cn = _censored_cn(power, noise)
    for j, r in enumerate(rows):
        assert r["sweeps"] == 12
        assert r["power_dbfs"] == pytest.approx(np.median(power[:, j]), abs=1e-4)
        assert r["noise_dbfs"] == pytest.approx(np.median(noise[:, j]), abs=1e-4)
        frac = np.mean(power[:, j] - noise[:, j] >= 3.0)
        assert r["received_fraction"] == pytest.approx(frac)
        assert r["received"] == (frac >= 0.5)
        col = np.sort(cn[:, j])
        # 12 sweeps: the median is the mean of the 6th and 7th order statistics (censored low)
        ref = 0.5 * (col[5] + col[6])
        if np.isfinite(ref) and r["received"]:
            assert r["cn_db"] == pytest.approx(ref, abs=1e-3)
        else:
            assert r["cn_db"] is None
        if r["cn_db"] is not None and np.all(np.isfinite(col)):
            q25, q75 = np.percentile(col, [25, 75])
            assert r["cn_spread_db"] == pytest.approx(q75 - q25, abs=1e-3)


def test_unoccupied_channels_are_not_received(truth_db):
    path, truth = truth_db
    rows = channel_table(path, "preamp-a")
    for r, cn0 in zip(rows, truth.cn0_db):
        if not np.isfinite(cn0):
            assert r["received"] is False and r["cn_db"] is None and r["cn_spread_db"] is None
        elif cn0 >= 15:
            assert r["received"] is True and r["received_fraction"] == 1.0


def test_censored_median_is_not_biased_by_dropping_faded_sweeps():
    # 10 sweeps: C/N 10..14 dB received in 6, not received in 4 -> censored median is the mean of
    # the 5th and 6th order statistics counting the 4 misses lowest: (10 + 11)/2 dB (by hand).
    cn_true = np.array([10.0, 11, 12, 13, 14, 14.5, np.nan, np.nan, np.nan, np.nan])
    noise = np.full((10, 1), -70.0)
    power = np.where(np.isfinite(cn_true), -70 + np.asarray(ratio_to_db(np.asarray(db_to_ratio(np.nan_to_num(cn_true))) + 1)),
                     -69.0)[:, None]
    received = np.isfinite(cn_true)[:, None]
    st = statistics_from_arrays(np.array([100_000_000]), power, noise, received)
    assert st.cn_db[0] == pytest.approx(10.5, abs=1e-4)
    assert st.received_fraction[0] == pytest.approx(0.6)
    assert np.isnan(st.cn_spread_db[0])  # lower quartile falls on a censored sweep: undefined
    assert st.spread == SPREAD_NAME and "IQR" in SPREAD_NAME
    # received in 4 of 10: no median
    received4 = received.copy()
    received4[4:6] = False
    assert np.isnan(statistics_from_arrays(np.array([1]), power, noise, received4).cn_db[0])


def test_median_iqr_fast_and_nan_paths_agree():
    rng = np.random.default_rng(1)
    x = rng.normal(size=(51, 7))
    q50, iqr = median_iqr(x)
    np.testing.assert_allclose(q50, np.median(x, axis=0))
    np.testing.assert_allclose(iqr, np.subtract(*np.percentile(x, [75, 25], axis=0)))
    y = np.vstack([x, np.full((3, 7), np.nan)])
    np.testing.assert_allclose(median_iqr(y)[0], q50)
    assert np.isnan(median_iqr(np.full((4, 2), np.nan))[0]).all()


def test_all_configurations_and_input_filter(tmp_path):
    path = tmp_path / "s.db"
    truth = make_truth(2, n_per_side=4)
    write_db(path, truth)
    write_db(path, make_truth(3, n_per_side=3), base="term-a", test="term-b", input="terminated")
    rows = channel_table(path)  # every configuration, antenna input only
    assert {r["sweeps"] for r in rows} == {8}
    assert {r["sweeps"] for r in channel_table(path, input="terminated")} == {6}
    with pytest.raises(BadParameterError, match="not one of"):
        channel_table(path, input="sky")


def test_time_range_selects_sweeps(truth_db):
    path, _ = truth_db
    # sweeps every 10 s from 18:00:00, alternating: bare at 0, 20, 40 ... s
    rows = channel_table(path, "bare", since="2026-05-01T18:00:30", until="2026-05-01T18:01:30Z")
    assert rows[0]["sweeps"] == 3  # bare sweeps at 40, 60, 80 s
    offset = channel_table(path, "bare", since="2026-05-01T20:00:30+02:00", until="2026-05-01T20:01:30+02:00")
    assert offset[0]["sweeps"] == 3
    with pytest.raises(NoDataError, match="between"):
        channel_table(path, "bare", since="2030-01-01")


def test_no_data_lists_labels(truth_db):
    path, _ = truth_db
    with pytest.raises(NoDataError) as err:
        configuration_statistics(path, "preamp-z")
    text = str(err.value)
    assert "preamp-z" in text and "bare (antenna: 12 sweeps)" in text and "preamp-a (antenna: 12 sweeps)" in text


def test_time_helpers():
    assert normalise_utc("2026-05-01T18:00") == "2026-05-01T18:00:00.000000Z"
    assert normalise_utc("2026-05-01T20:00:00+02:00") == "2026-05-01T18:00:00.000000Z"
    assert normalise_utc(None) is None
    with pytest.raises(BadParameterError, match="ISO 8601"):
        normalise_utc("yesterday")
    s = utc_to_epoch_s(("1970-01-01T00:00:10.500000Z", "1970-01-02T00:00:00.000000Z"))
    np.testing.assert_allclose(s, [10.5, 86400.0])


def test_band_settings_do_not_matter_for_one_configuration(tmp_path):
    # statistics of one label never refuse: mismatch checks belong to the comparison
    path = tmp_path / "m.db"
    truth = make_truth(4, n_per_side=2)
    write_db(path, truth, base_settings=SweepSettings(band="simulated-europe"),
             test_settings=SweepSettings(band="simulated-europe", gain_db=20.0))
    assert len(channel_table(path, "preamp-a")) == FREQS_HZ.size
