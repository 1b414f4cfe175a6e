"""``bandcensus compare`` as the user sees it: JSON, CSV, terminal text, figure, exit codes."""

from __future__ import annotations

import csv
import io
import json

import pytest

from bandcensus.cli import main
import numpy as np

from compare_truth import CN0_DB, FREQS_HZ, make_truth, write_db
from survey.records import SweepSettings

ROW_KEYS = {"freq_hz", "base_cn_db", "test_cn_db", "delta_cn_db", "ci_low_db", "ci_high_db", "gain_db",
            "noise_rise_db", "verdict", "pairs"}
#: Station rows add the RDS name and block error rates (None: not decoded, as in this fixture).
STATION_ROW_KEYS = ROW_KEYS | {"name", "base_block_error_rate", "test_block_error_rate", "delta_block_error_rate",
                               "bler_ci_low", "bler_ci_high"}
COUNT_KEYS = ("helped", "hurt", "unchanged", "undetermined", "gained", "lost")


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = tmp_path_factory.mktemp("cli") / "ab.db"
    write_db(path, make_truth(17, n_per_side=20))
    return str(path)


def _reject_nan(text):
    raise AssertionError(f"non-JSON constant {text} in output")


def test_json_shape(db, capsys):
    assert main(["compare", "--db", db, "--base", "bare", "--test", "preamp-a", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out, parse_constant=_reject_nan)
    assert {"base", "test", "method", "thresholds", "summary", "headlines", "warnings"} <= set(doc)
    assert doc["base"] == "bare" and doc["test"] == "preamp-a" and doc["warnings"] == []
    assert doc["method"].startswith("paired") and doc["unit"] == "station"
    assert doc["thresholds"]["min_change_db"] == 0.5
    # one row per census station: the fixture's 17 transmitters, each on its carrier; the
    # unoccupied raster channels are no station and have no row
    rows = doc["stations"]
    assert "channels" not in doc
    for row in rows:
        assert set(row) == STATION_ROW_KEYS and row["name"] is None and row["delta_block_error_rate"] is None
        assert row["verdict"] != "not received" and row["delta_cn_db"] is not None
    assert [r["freq_hz"] for r in rows] == FREQS_HZ[np.isfinite(CN0_DB)].tolist()
    s = doc["summary"]
    assert all(isinstance(s[k], int) for k in COUNT_KEYS) and "not_received" not in s
    assert sum(s[k] for k in COUNT_KEYS) == len(rows) and s["helped"] >= 8
    for k, verdict in zip(COUNT_KEYS, ("improved", "worse", "unchanged", "undetermined", "gained", "lost")):
        assert s[k] == sum(r["verdict"] == verdict for r in rows)
    assert len(doc["headlines"]) == 4 and doc["headlines"][0].startswith("Stations helped")
    assert doc["headlines"][0].endswith(f"(of {len(rows)} stations).")


def test_json_channels_option_gives_raster_rows(db, capsys):
    assert main(["compare", "--db", db, "--base", "bare", "--test", "preamp-a", "--json", "--channels"]) == 0
    doc = json.loads(capsys.readouterr().out, parse_constant=_reject_nan)
    assert doc["unit"] == "channel" and "stations" not in doc
    rows = doc["channels"]
    assert [r["freq_hz"] for r in rows] == FREQS_HZ.tolist()
    for row in rows:
        if row["verdict"] == "not received":
            assert row["delta_cn_db"] is None and row["base_cn_db"] is None
    s = doc["summary"]
    assert sum(s[k] for k in COUNT_KEYS) + s["not_received"] == len(rows) == FREQS_HZ.size
    assert s["not_received"] == int(np.sum(~np.isfinite(CN0_DB)))
    assert doc["headlines"][0].startswith("Channels helped")


def test_time_range_options(db, capsys):
    # sweeps every 10 s from 18:00:00 alternating; 18:00:00-18:01:40 holds 5 of each
    assert main(["compare", "--db", db, "--base", "bare", "--test", "preamp-a", "--json",
                 "--since", "2026-05-01T18:00:00Z", "--until", "2026-05-01T18:01:40Z"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["sweeps"] == {"base": 5, "test": 5, "pairs": 5}


def test_csv_rows(db, capsys):
    assert main(["compare", "--db", db, "--base", "bare", "--test", "preamp-a", "--csv",
                 "--min-change-db", "1", "--confidence", "0.9"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    # station rows: 88.1 MHz (truth +5 dB) first; no row for the empty 88.7 MHz channel
    assert len(rows) == int(np.isfinite(CN0_DB).sum()) and set(rows[0]) == STATION_ROW_KEYS
    assert list(rows[0])[:2] == ["freq_hz", "verdict"]
    assert int(rows[0]["freq_hz"]) == 88_100_000 and "88700000" not in [r["freq_hz"] for r in rows]
    assert float(rows[0]["delta_cn_db"]) == pytest.approx(5.0, abs=0.5)
    # dB to 0.01 dB, Hz as integers (bandcensus/commands/_csv.py); no 17-digit floats
    for row in rows:
        for key in ("base_cn_db", "test_cn_db", "delta_cn_db", "gain_db", "noise_rise_db"):
            assert row[key] == "" or len(row[key].split(".")[-1]) <= 2, (key, row[key])
        assert row["freq_hz"].isdigit()
    assert main(["compare", "--db", db, "--base", "bare", "--test", "preamp-a", "--csv", "--channels"]) == 0
    raster = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert len(raster) == FREQS_HZ.size and set(raster[0]) == ROW_KEYS
    assert raster[3]["verdict"] == "not received" and raster[3]["delta_cn_db"] == ""


def test_terminal_summary_then_rows(db, capsys, tmp_path):
    png = tmp_path / "cmp.png"
    assert main(["compare", "--db", db, "--base", "bare", "--test", "preamp-a", "--plot", str(png),
                 "--explain"]) == 0
    out = capsys.readouterr().out
    assert out.count("C/N = (P - N) / N") == 1 and "SNR" not in out
    assert out.index("Stations helped") < out.index("Listenable") < out.index("Could any preamp help") \
        < out.index("Trouble") < out.index("│ 88.10") < out.index("│ 88.30") < out.index("│ 92.70")
    assert "no source" not in out and "Verdicts:" in out   # provenance of thresholds: JSON and README
    assert "listenable mono" in out and "(C/N >= 12 dB)" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 20_000


def _one_line_error(capsys, argv):
    code = main(argv)
    err = capsys.readouterr().err.strip().splitlines()
    return code, err


def test_no_data_is_one_line_exit_1(db, capsys):
    code, err = _one_line_error(capsys, ["compare", "--db", db, "--base", "bare", "--test", "preamp-q"])
    assert code == 1 and len(err) == 1 and err[0].startswith("Error: ") and "it holds: bare (antenna" in err[0]
    code, err = _one_line_error(capsys, ["compare", "--db", db + ".missing", "--base", "a", "--test", "b"])
    assert code == 1 and len(err) == 1 and "does not exist" in err[0]


def test_mismatch_is_one_line_exit_1(tmp_path, capsys):
    path = tmp_path / "mm.db"
    write_db(path, make_truth(2, n_per_side=3), base_settings=SweepSettings(band="simulated-europe"),
             test_settings=SweepSettings(band="simulated-japan"))
    code, err = _one_line_error(capsys, ["compare", "--db", str(path), "--base", "bare", "--test", "preamp-a"])
    assert code == 1 and len(err) == 1 and "band plan differs" in err[0]


@pytest.mark.parametrize(
    "extra",
    [
        ["--base", "bare"],                                              # --test missing
        ["--base", "bare", "--test", "preamp-a", "--json", "--csv"],     # two output formats
        ["--base", "bare", "--test", "bare"],                            # same label twice
        ["--base", "bare", "--test", "preamp-a", "--confidence", "1.5"],
        ["--base", "bare", "--test", "preamp-a", "--min-change-db", "-1"],
        ["--base", "bare", "--test", "preamp-a", "--since", "yesterday"],
        ["--base", "bare", "--test", "preamp-a", "--plot", "figure.jpg"],
    ],
)
def test_bad_usage_exit_2(db, capsys, extra):
    code = main(["compare", "--db", db, *extra])
    err = capsys.readouterr().err
    assert code == 2 and "Usage" in err and "Error" in err


def test_help_names_the_definitions(capsys):
    assert main(["compare", "--help"]) == 0
    out = capsys.readouterr().out
    for opt in ("--base", "--test", "--json", "--csv", "--plot", "--since", "--until", "--min-change-db",
                "--confidence", "--channels", "--enr-db", "--enr-table", "--cold-k"):
        assert opt in out
    assert "Student t" in out and "Welch" in out


def test_method_paragraph_only_with_explain(db, capsys):
    assert main(["compare", "--db", db, "--base", "bare", "--test", "preamp-a", "--no-diagnosis"]) == 0
    quiet = capsys.readouterr().out
    assert "Stations helped" in quiet and "--explain for the method" in quiet
    assert "Method:" not in quiet and "Verdicts:" not in quiet and "(P - N) / N" not in quiet
    assert main(["compare", "--db", db, "--base", "bare", "--test", "preamp-a", "--no-diagnosis", "--explain"]) == 0
    full = capsys.readouterr().out
    assert "Method: paired" in full and "Verdicts:" in full and "(P - N) / N" in full
    assert len(full.splitlines()) > len(quiet.splitlines())
