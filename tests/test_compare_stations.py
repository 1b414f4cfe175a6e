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
                "gain_db", "noise_rise_db", "pairs"]
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
