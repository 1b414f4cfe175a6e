"""The comparison on station columns (a census ``StationMatrix``): JSON rows, counts, one switch point."""

from __future__ import annotations

import json

import numpy as np
import pytest

import analysis.selection as selection
from analysis.census import StationMatrix
from analysis.compare.core import compare_matrices
from bandcensus.cli import main
from compare_truth import make_truth, write_db
from test_compare_coverage import FREQS_HZ, TRUE_DELTA_DB, simulated_pair

STATION_KEYS = ["freq_hz", "verdict", "base_cn_db", "test_cn_db", "delta_cn_db", "ci_low_db", "ci_high_db",
                "gain_db", "noise_rise_db", "pairs", "name", "base_block_error_rate", "test_block_error_rate",
                "delta_block_error_rate", "bler_ci_low", "bler_ci_high"]
COUNTS = ("helped", "hurt", "unchanged", "undetermined", "gained", "lost")


def as_stations(m) -> StationMatrix:
    """A channel matrix read as if every column were one station of the census (same readings)."""
    n, k = m.power_dbfs.shape
    return StationMatrix(
        sweep_ids=m.sweep_ids, started_utc=m.started_utc, freqs_hz=m.freqs_hz + 1_500, kinds=("fm",) * k,
        channel_freqs_hz=m.freqs_hz, power_dbfs=m.power_dbfs, noise_dbfs=m.noise_dbfs,
        cn_db=np.asarray(m.cn_db), ci_db=np.full((n, k), np.nan), detected=m.detected,
        stereo=np.zeros((n, k), bool))


def test_station_matrix_compares_like_channels():
    base, test = simulated_pair(11, 7, 0.5)
    by_channel = compare_matrices(base, test)
    by_station = compare_matrices(as_stations(base), as_stations(test), unit="station")
    assert by_station.unit == "station" and len(by_station.items) == FREQS_HZ.size
    for c, s in zip(by_channel.items, by_station.items):
        assert s.freq_hz == c.freq_hz + 1_500
        assert (s.verdict, s.delta_cn_db, s.ci_low_db, s.pairs) == (c.verdict, c.delta_cn_db, c.ci_low_db, c.pairs)
    assert by_station.summary["rows"] == sum(by_station.summary[k] for k in COUNTS)


def test_compare_json_has_stations_when_the_survey_gives_stations(tmp_path, capsys, monkeypatch):
    db = tmp_path / "ab.db"
    write_db(db, make_truth(17, n_per_side=8))
    # the one switch point between raster channels and the census
    monkeypatch.setattr(selection, "_matrix_for", lambda survey, sweeps, kinds=("fm",):
                        as_stations(survey.channel_matrix(sweeps)))
    assert main(["compare", "--db", str(db), "--base", "bare", "--test", "preamp-a", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["unit"] == "station" and "channels" not in doc
    rows = doc["stations"]
    assert rows and all(list(r) == STATION_KEYS for r in rows)
    s = doc["summary"]
    assert all(type(s[k]) is int for k in COUNTS)
    assert sum(s[k] for k in COUNTS) + s.get("not_received", 0) == len(rows)
    for key, verdict in zip(COUNTS, ("improved", "worse", "unchanged", "undetermined", "gained", "lost")):
        assert s[key] == sum(r["verdict"] == verdict for r in rows)
    assert doc["headlines"][0].startswith("Stations helped")
    # --channels keeps the raster detail view
    assert main(["compare", "--db", str(db), "--base", "bare", "--test", "preamp-a", "--json", "--channels"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["unit"] == "channel" and "stations" not in doc and len(doc["channels"]) == 24


def test_table_adds_up_for_every_row():
    base, test = simulated_pair(3, 7, 1.5)
    for item in compare_matrices(as_stations(base), as_stations(test), unit="station").items:
        assert item.test_cn_db - item.base_cn_db == pytest.approx(item.delta_cn_db, abs=2e-4)
        assert item.gain_db - item.noise_rise_db == pytest.approx(item.delta_cn_db, abs=2e-4)
    assert TRUE_DELTA_DB.size == FREQS_HZ.size


# -- station identity from RDS: names and block error rates ------------------------------------
#: Invented display names (as the census gives them: PS name with PI code); None: not decoded.
NAMES = ("MARSH FM (PI D2E4)", None, "DELL 2 (PI D3A1)")


def _named(m, blocks: np.ndarray | None, errors: np.ndarray | None, names=NAMES) -> StationMatrix:
    """The first three columns of a channel matrix as three stations with names and RDS counts."""
    k = 3
    s = as_stations(m)
    return StationMatrix(
        sweep_ids=s.sweep_ids, started_utc=s.started_utc, freqs_hz=s.freqs_hz[:k], kinds=("fm",) * k,
        channel_freqs_hz=s.channel_freqs_hz[:k], power_dbfs=s.power_dbfs[:, :k], noise_dbfs=s.noise_dbfs[:, :k],
        cn_db=s.cn_db[:, :k], ci_db=s.ci_db[:, :k], detected=s.detected[:, :k], stereo=s.stereo[:, :k],
        names=names, rds_blocks=blocks, rds_block_errors=errors)


def _rds_pair(seed: int = 4, n_pairs: int = 7):
    """Base and test station matrices with RDS block counts: station 0 decoded in both (error rate
    about 20 % -> 5 %), station 1 never decoded, station 2 decoded with the base only."""
    rng = np.random.default_rng(seed)
    base, test = simulated_pair(seed, n_pairs, 0.5)
    blocks_b = np.zeros((n_pairs, 3), np.int64)
    blocks_t = np.zeros((n_pairs, 3), np.int64)
    blocks_b[:, 0] = blocks_t[:, 0] = 400  # about 4.6 s of RDS at 87.6 blocks/s (IEC 62106)
    blocks_b[:, 2] = 400
    errors_b = np.zeros_like(blocks_b)
    errors_t = np.zeros_like(blocks_t)
    errors_b[:, 0] = rng.binomial(400, 0.20, n_pairs)
    errors_t[:, 0] = rng.binomial(400, 0.05, n_pairs)
    errors_b[:, 2] = rng.binomial(400, 0.5, n_pairs)
    return (_named(base, blocks_b, errors_b), _named(test, blocks_t, errors_t)), (errors_b, errors_t)


def test_block_error_rate_change_is_a_paired_t_interval():
    """Per-sweep error rates errors/blocks, paired as the C/N (alternating sweeps); the interval is
    scipy's one-sample t interval of the paired differences (reference: scipy.stats.ttest_1samp)."""
    from scipy import stats as sps

    (base, test), (errors_b, errors_t) = _rds_pair()
    res = compare_matrices(base, test)
    first, silent, base_only = res.items
    d = errors_t[:, 0] / 400 - errors_b[:, 0] / 400  # sweep k of base pairs with sweep k of test (60 s later)
    ci = sps.ttest_1samp(d, 0.0).confidence_interval(0.95)
    assert first.delta_block_error_rate == pytest.approx(d.mean(), abs=1e-6)
    assert first.bler_ci_low == pytest.approx(ci.low, abs=1e-6) and first.bler_ci_high == pytest.approx(ci.high, abs=1e-6)
    assert first.base_block_error_rate == pytest.approx(errors_b[:, 0].mean() / 400, abs=1e-6)
    assert first.test_block_error_rate - first.base_block_error_rate == pytest.approx(first.delta_block_error_rate,
                                                                                      abs=2e-6)
    assert first.bler_ci_high < 0  # 20 % -> 5 %: fewer errors, surely
    # no blocks in one configuration: no rate to compare, not a rate of zero
    for item in (silent, base_only):
        assert item.delta_block_error_rate is None and item.bler_ci_low is None and item.base_block_error_rate is None


def test_station_names_in_rows_headline_json_and_report(tmp_path, capsys, monkeypatch):
    (base, test), _ = _rds_pair()
    res = compare_matrices(base, test, unit="station")
    assert [c.name for c in res.items] == list(NAMES)
    from analysis.headline import verdict_line

    line = verdict_line(res.summary)
    first = res.items[0]
    assert first.verdict == "worse"  # -3 dB truth at this column (TRUE_DELTA_DB, test_compare_coverage)
    assert f"{first.freq_hz / 1e6:.1f} MHz MARSH FM (PI D2E4)" in line
    # without names the headline keeps the plain list
    plain = compare_matrices(_named(base.rows(base.sweep_ids), None, None, names=()),
                             _named(test.rows(test.sweep_ids), None, None, names=()), unit="station")
    assert "MARSH" not in verdict_line(plain.summary) and all(c.name is None for c in plain.items)
    # the command: JSON station rows carry the name and the block error rates
    db = tmp_path / "ab.db"
    write_db(db, make_truth(17, n_per_side=7))

    def fake(survey, sweeps, kinds=("fm",)):
        m = survey.channel_matrix(sweeps)
        n = m.sweep_ids.size
        blocks = np.full((n, 3), 400)
        is_base = np.asarray([s.configuration == "bare" for s in sweeps])
        errors = np.where(is_base[:, None], 80, 20) * np.ones((1, 3), np.int64)
        return _named(m, blocks, errors)

    monkeypatch.setattr(selection, "_matrix_for", fake)
    assert main(["compare", "--db", str(db), "--base", "bare", "--test", "preamp-a", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    rows = doc["stations"]
    assert [r["name"] for r in rows] == list(NAMES) and all(list(r) == STATION_KEYS for r in rows)
    # every base sweep has 80 of 400 blocks in error, every test sweep 20 of 400
    assert rows[0]["base_block_error_rate"] == pytest.approx(0.2) and rows[0]["test_block_error_rate"] == pytest.approx(0.05)
    assert rows[0]["delta_block_error_rate"] == pytest.approx(-0.15)
    # the headline lists the stations behind each count, by name where the station has one
    if rows[0]["verdict"] in ("improved", "worse", "gained", "lost"):
        assert "MARSH FM (PI D2E4)" in doc["headlines"][0]
    assert main(["compare", "--db", str(db), "--base", "bare", "--test", "preamp-a"]) == 0
    out = capsys.readouterr().out
    assert "MARSH FM (PI D2E4)" in out and "20.0 -> 5.0 %" in out
    from analysis.report.build import build_report
    from analysis.report.html import render_html

    page = render_html(build_report(db, "bare", "preamp-a"), {})
    assert "<th>station (RDS)</th>" in page and "<td>MARSH FM (PI D2E4)</td>" in page
