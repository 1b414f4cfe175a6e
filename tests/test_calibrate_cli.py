"""``bandcensus calibrate`` as the user sees it."""

import csv
import io
import json

import pytest

import generator_bench as bench
from bandcensus.cli import main


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = tmp_path_factory.mktemp("calcli") / "gen.db"
    bench.record(path, "bare", "generator", [(90.5e6, -75.0), (99.5e6, -75.0), (106.5e6, -75.0)], seed=4)
    return path


def test_writes_the_file_and_prints_the_points(db, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code = main(["calibrate", "--db", str(db), "--config", "bare", "--level-dbm", "-75", "--out", "cal.json"])
    out = capsys.readouterr().out
    assert code == 0
    assert "Calibration at receiver gain 40.2 dB from 3 generator sweeps of 'bare'" in out
    assert "90.50" in out and "99.50" in out and "106.50" in out
    assert "dBm + 106.99" in out
    assert "Written to cal.json;" in out  # relative to the current folder
    data = json.loads((tmp_path / "cal.json").read_text())
    assert data["gain_db"] == 40.2 and len(data["points"]) == 3


def test_csv_points_are_rounded(db, tmp_path, capsys):
    code = main(["calibrate", "--db", str(db), "--config", "bare", "--level-dbm", "-75",
                 "--out", str(tmp_path / "c.json"), "--csv"])
    text = capsys.readouterr().out
    assert code == 0
    rows = list(csv.DictReader(io.StringIO(text)))
    assert [r["freq_hz"] for r in rows] == ["90500000", "99500000", "106500000"]
    assert all(len(r["offset_db"].split(".")[1]) == 2 for r in rows)
    assert float(rows[1]["offset_db"]) == pytest.approx(float(bench.full_scale_dbm(99.5e6)), abs=0.05)


def test_usage_and_one_line_errors(db, tmp_path, capsys):
    assert main(["calibrate", "--db", str(db), "--config", "bare", "--out", str(tmp_path / "c.json")]) == 2
    assert "--level-dbm" in capsys.readouterr().err
    code = main(["calibrate", "--db", str(db), "--config", "preamp", "--level-dbm", "-75",
                 "--out", str(tmp_path / "c.json")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1 and len(err) == 1
    assert err[0].startswith("Error: no complete generator sweeps of configuration 'preamp'")
    assert not (tmp_path / "c.json").exists()


def test_stations_in_dbm_at_a_known_level(db, tmp_path, capsys):
    # a CW tone of known level at the receiver input (the bench's own full-scale model) read back
    # through the census with the generator calibration: P = C + N in dBm within 0.2 dB of the
    # level given (the tone is 40 dB above the floor, so N adds under 0.001 dB); dBuV = dBm + 106.99
    # across 50 ohm (P = V^2 / R)
    cal = tmp_path / "cal.json"
    assert main(["calibrate", "--db", str(db), "--config", "bare", "--level-dbm", "-75", "--out", str(cal)]) == 0
    bench.record(db, "bare", "antenna", [(99.5e6, -90.0)], seed=9)  # at a calibration point
    capsys.readouterr()
    assert main(["stations", "--db", str(db), "--config", "bare", "--kind", "narrow",
                 "--calibration", str(cal), "--json"]) == 0
    rows = json.loads(capsys.readouterr().out)["stations"]
    tone = [r for r in rows if abs(r["freq_hz"] - 99.5e6) < 5e3]
    assert len(tone) == 1
    assert tone[0]["power_dbm"] == pytest.approx(-90.0, abs=0.2)
    assert tone[0]["power_dbuv"] == pytest.approx(tone[0]["power_dbm"] + 106.99, abs=0.01)
    # without a calibration the same rows carry dBFS only
    assert main(["stations", "--db", str(db), "--config", "bare", "--kind", "narrow", "--json"]) == 0
    assert "power_dbm" not in json.loads(capsys.readouterr().out)["stations"][0]


def test_channels_in_dbm_beside_dbfs(db, tmp_path, capsys):
    # the same calibration on the raster table: every P and N gains dBm and dBuV, offset by the
    # calibration's own dBm - dBFS at that frequency (the tone's channel reads its known level)
    cal = tmp_path / "cal.json"
    assert main(["calibrate", "--db", str(db), "--config", "bare", "--level-dbm", "-75", "--out", str(cal)]) == 0
    bench.record(db, "bare", "antenna", [(99.5e6, -90.0)], seed=10)  # the tone at a calibration point
    capsys.readouterr()
    assert main(["channels", "--db", str(db), "--config", "bare", "--calibration", str(cal), "--json"]) == 0
    rows = json.loads(capsys.readouterr().out)["channels"]
    assert rows and all(r["power_dbm"] - r["power_dbfs"] == pytest.approx(r["noise_dbm"] - r["noise_dbfs"])
                        for r in rows if r["power_dbm"] is not None and r["noise_dbm"] is not None)
    at_tone = [r for r in rows if r["freq_hz"] == 99_500_000]
    assert at_tone and at_tone[0]["power_dbm"] == pytest.approx(-90.0, abs=0.2)
