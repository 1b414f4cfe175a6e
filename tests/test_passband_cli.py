"""``bandcensus passband`` through the command line: JSON shape, errors and exit codes."""

import json

import numpy as np
import pytest

from analysis.passband.fit import TunedStage
from bandcensus.cli import main
from passband_truth import build_db, preamp_gain_db

READINGS = "freq_mhz,level_db\n88.0,-36.9\n93.5,-6\n94.5,0\n95.5,-6\n100.0,-30.8\n"
KEYS = {
    "peak_hz", "peak_gain_db", "bw_3db_hz", "edges_3db_hz", "bw_6db_hz", "edges_6db_hz", "stages",
    "source", "target_hz", "target_covered", "ripple_db", "uncovered_stations_hz", "stagger_plan",
    "stagger_peak_gain_change_db", "residual_rms_db", "n_circuits", "criterion",
}


@pytest.fixture()
def readings(tmp_path):
    p = tmp_path / "readings.csv"
    p.write_text(READINGS)
    return p


def test_json_from_readings(readings, capsys):
    assert main(["passband", "--points", str(readings), "--target", "88-100", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert KEYS <= set(out)
    assert out["source"] == "readings"
    assert out["target_hz"] == [88e6, 100e6]
    assert out["target_covered"] is False
    assert out["uncovered_stations_hz"] == []  # no station list for readings
    assert len(out["edges_3db_hz"]) == 2 and len(out["edges_6db_hz"]) == 2
    assert abs(out["bw_6db_hz"] - 2.0e6) < 0.3e6
    assert len(out["stages"]) == out["n_circuits"] and {"f0_hz", "q"} <= set(out["stages"][0])
    assert len(out["stagger_plan"]) == out["n_circuits"]
    assert {"f0_hz", "q", "bw_hz"} <= set(out["stagger_plan"][0])
    assert out["stagger_peak_gain_change_db"] < 0
    assert out["criterion"] == "BIC"


def test_text_verdict_and_plot(readings, tmp_path, capsys):
    png = tmp_path / "pb.png"
    assert main(["passband", "--points", str(readings), "--target", "88-100", "--plot", str(png)]) == 0
    text = capsys.readouterr().out
    first = text.splitlines()[0]
    assert first.startswith("passband 2.0 MHz wide at -6 dB") and "around 94.5 MHz" in first
    assert first.endswith("not covered")
    assert "stagger plan" in text
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_default_target_is_band_plan(readings, capsys):
    assert main(["passband", "--points", str(readings), "--band", "europe", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["target_hz"] == [87.5e6, 108e6]  # GE84 Region 1 band (REFERENCES.md)


@pytest.mark.parametrize(
    "argv",
    [
        ["passband"],
        ["passband", "--db", "x.db", "--base", "a", "--test", "b", "--points", "p.csv"],
        ["passband", "--db", "x.db", "--base", "a"],
        ["passband", "--points", "p.csv", "--target", "100-88"],
        ["passband", "--points", "p.csv", "--source", "stations"],
    ],
)
def test_usage_errors_exit_2(argv, capsys):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert "--db" in err or "--target" in err or "--source" in err


@pytest.mark.parametrize(
    "text",
    ["freq,level\n88,0\n90,1\n92,2\n", "freq_mhz,level_db\n88,x\n90,1\n92,2\n", "freq_mhz,level_db\n88,0\n90,1\n"],
)
def test_bad_csv_exit_1_with_format(tmp_path, text, capsys):
    p = tmp_path / "bad.csv"
    p.write_text(text)
    assert main(["passband", "--points", str(p)]) == 1
    err = capsys.readouterr().err
    assert err.startswith("Error: ") and "freq_mhz,level_db" in err and "Traceback" not in err


def test_db_path_json(tmp_path, capsys):
    stages = [TunedStage(94.5e6, 47.0)] * 2
    db = build_db(tmp_path / "s.db", preamp_gain_db(stages, 20.0), inputs=("noise-hot", "noise-cold", "antenna"))
    assert main(["passband", "--db", str(db), "--base", "bare", "--test", "preamp", "--target", "88-100", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["source"] == "noise-source" and out["dense"] is True
    assert abs(out["peak_hz"] - 94.5e6) < 0.2e6
    assert abs(out["peak_gain_db"] - 20.0) < 0.3
    assert out["target_covered"] is False
    assert out["uncovered_stations_hz"]  # stations received but outside the -3 dB passband
    assert all(88e6 <= f <= 100e6 for f in out["uncovered_stations_hz"])
    assert np.all(np.diff([s["f0_hz"] for s in out["stagger_plan"]]) > 0)


def test_db_unknown_label_exit_1(tmp_path, capsys):
    db = build_db(tmp_path / "s.db", preamp_gain_db([TunedStage(94.5e6, 47.0)], 20.0), inputs=("noise-hot",))
    assert main(["passband", "--db", str(db), "--base", "bare", "--test", "other"]) == 1
    assert "no complete sweeps of configuration 'other'" in capsys.readouterr().err


def test_help_text():
    assert main(["passband", "--help"]) == 0


SCENE = """
[scene]
name = "Invented Vale (simulated)"

[[station]]
freq_mhz = 94.5
level_dbm = -95

[[station]]
freq_mhz = 90.2
level_dbm = -95

[receiver]
full_scale_dbm = {full_scale_dbm}

[outside_noise]
environment = "rural"

[preamp.peaked]
circuits = [{f0_hz = 94.5e6, q = 47}, {f0_hz = 94.5e6, q = 47}]
gain_db = 20
nf_db = 1.5
"""


def _simulate_peaked(tmp_path, full_scale_dbm):
    # simulated scene: two synchronous circuits, Q 47 at 94.5 MHz, 20 dB; noise-source sweeps
    scene = tmp_path / "scene.toml"
    scene.write_text(SCENE.replace("{full_scale_dbm}", str(full_scale_dbm)))
    db = tmp_path / "sim.db"
    for cfg in ("bare", "peaked"):
        for inp in ("noise-hot", "noise-cold", "antenna"):
            assert main(["simulate", str(scene), "--db", str(db), "--config", cfg, "--input", inp,
                         "--dwell-ms", "20", "--seed", "3"]) == 0
    return db


@pytest.mark.slow
def test_end_to_end_simulated_peaked_preamp(tmp_path, capsys):
    # receiver scaled 11 dB hotter than the scene default: the quietest spectrum is ~15 dB above
    # the quantisation floor, and the stations do not clip
    db = _simulate_peaked(tmp_path, -68.0)
    capsys.readouterr()
    assert main(["passband", "--db", str(db), "--base", "bare", "--test", "peaked", "--target", "88-100", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    true_bw_hz = 94.5e6 / 47 * np.sqrt(np.sqrt(2) - 1)  # BW_1 * shrinkage (REFERENCES.md)
    assert out["source"] == "noise-source" and out["n_circuits"] == 2
    assert abs(out["peak_hz"] - 94.5e6) < 0.2e6
    assert abs(out["bw_3db_hz"] - true_bw_hz) < 0.05 * true_bw_hz
    assert abs(out["peak_gain_db"] - 20.0) < 0.5
    assert out["target_covered"] is False
    assert not any("quantisation" in n for n in out["notes"])
    # stations received on the antenna: 94.5 MHz inside the -3 dB passband, 90.2 MHz outside
    # (census stations, at their measured carriers: each within 25 kHz of the scene's carrier)
    assert [abs(f - 94_500_000) <= 25_000 for f in out["stations_in_target_hz"]].count(True) == 1
    assert len(out["uncovered_stations_hz"]) == 1 and abs(out["uncovered_stations_hz"][0] - 90_200_000) <= 25_000
    # the same passband from the two stations alone is refused: 2 points cannot be fitted
    assert main(["passband", "--db", str(db), "--base", "bare", "--test", "peaked", "--source", "stations"]) == 1
    assert "Error: " in capsys.readouterr().err


@pytest.mark.slow
def test_end_to_end_low_receiver_gain_is_flagged(tmp_path, capsys):
    # the scene's default receiver scaling puts the cold floor ~5 dB above the 8-bit quantisation
    # floor: the skirts read high, and the output must say so
    db = _simulate_peaked(tmp_path, -57.0)
    capsys.readouterr()
    assert main(["passband", "--db", str(db), "--base", "bare", "--test", "peaked", "--target", "88-100", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert any("quantisation floor" in n for n in out["notes"])


def test_csv_of_the_curve_has_a_header_and_rounded_cells(readings, capsys):
    """Measured points and the fitted gain as CSV: 1 Hz for frequencies, 0.01 dB for levels
    (the precision they carry; bandcensus/commands/_csv.py)."""
    assert main(["passband", "--points", str(readings), "--target", "88-100", "--csv"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0] == "freq_hz,gain_db,sigma_db,fitted_gain_db,in_target"
    assert len(lines) == 1 + 5
    for line in lines[1:]:
        freq, gain, sigma, fitted, inside = line.split(",")
        assert freq.isdigit() and inside in ("true", "false")
        for cell in (gain, sigma, fitted):
            assert len(cell.split(".")[1]) == 2, line
    # the weighted fit passes each reading within twice that reading's stated standard uncertainty
    for line in lines[1:]:
        _, gain, sigma, fitted, _ = (line.split(",")[i] for i in range(5))
        assert abs(float(gain) - float(fitted)) <= 2 * float(sigma), line


def test_short_output_then_the_plan_with_explain(readings, capsys):
    assert main(["passband", "--points", str(readings), "--target", "88-100"]) == 0
    short = capsys.readouterr().out
    assert main(["passband", "--points", str(readings), "--target", "88-100", "--explain"]) == 0
    full = capsys.readouterr().out
    assert len(short.splitlines()) <= 4 < len(full.splitlines())
    assert "Fitted tuned circuits" in full and "Fitted tuned circuits" not in short
