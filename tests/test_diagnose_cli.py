"""``bandcensus diagnose`` as the user sees it: text, JSON, exit codes (SIMULATED data)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from bandcensus.cli import main

SCENE_TOML = """
# SIMULATED scene, invented stations
[scene]
name = "diagnose-cli"
[outside_noise]
temp_k = 5000.0
[receiver]
nf_db = 7.0
full_scale_dbm = -62.7
[preamp.peaked]
gain_db = 10.0
nf_db = 1.0
circuits = [{ f0_hz = 97.0e6, q = 30.0 }, { f0_hz = 97.0e6, q = 30.0 }]
[preamp.noisy-supply]
based_on = "peaked"
supply_noise_k = 20000.0
[[station]]
name = "Strong One"
freq_mhz = 96.0
level_dbm = -86.0
[[station]]
name = "Strong Two"
freq_mhz = 96.8
level_dbm = -86.0
[[station]]
name = "Weak North"
freq_mhz = 94.3
level_dbm = -98.0
[[station]]
name = "Weak South"
freq_mhz = 99.5
level_dbm = -98.0
"""

DEMO_DIR = Path(__file__).resolve().parent.parent / "recordings_demo" / "sigmf"


@pytest.fixture(scope="module")
def sim_db(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    scene = folder / "scene.toml"
    scene.write_text(SCENE_TOML)
    db = folder / "survey.db"
    for config in ("bare", "peaked", "noisy-supply"):
        for inp in ("antenna", "terminated"):
            code = main(["simulate", str(scene), "--db", str(db), "--config", config, "--input", inp,
                         "--sweeps", "2", "--band", "custom:94-100:100", "--dwell-ms", "20", "--seed", "3"])
            assert code == 0
    return db


def test_supply_noise_in_json(sim_db, capsys):
    assert main(["diagnose", "--db", str(sim_db), "--base", "bare", "--test", "noisy-supply", "--json",
                 "--receiver-nf-db", "7"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert set(out) == {"base", "test", "findings", "checked", "notes"}
    assert [f["kind"] for f in out["findings"]] == ["added-noise"]
    f = out["findings"][0]
    assert set(f) == {"kind", "freq_hz", "severity", "evidence", "advice"} and f["freq_hz"] is None
    assert f["evidence"]["added_noise_k"] == pytest.approx(20000.0, rel=0.05)


def test_text_output_one_block_per_finding(sim_db, capsys):
    assert main(["diagnose", "--db", str(sim_db), "--base", "bare", "--test", "noisy-supply"]) == 0
    text = capsys.readouterr().out
    assert "PROBLEM: added-noise broadband" in text
    assert "battery" in text and "Checked:" in text


def test_clean_preamp_says_what_was_checked(sim_db, capsys):
    assert main(["diagnose", "--db", str(sim_db), "--base", "bare", "--test", "peaked"]) == 0
    text = capsys.readouterr().out
    assert "No fault found. Checked:" in text and "clipping: 0 of" not in text   # evidence behind --explain
    assert len(text.splitlines()) == 2
    assert main(["diagnose", "--db", str(sim_db), "--base", "bare", "--test", "peaked", "--explain"]) == 0
    text = capsys.readouterr().out
    assert "No fault found. Checked:" in text
    assert "clipping: 0 of" in text and "added-noise:" in text and "oscillation:" in text


def test_csv_of_the_findings_rounds_by_unit(sim_db, capsys):
    """One row per finding: fixed columns, then its evidence rounded by the unit in the key
    (``_db`` 0.01 dB, ``_k`` 0.1 K, ``_hz`` 1 Hz; bandcensus/commands/_csv.py)."""
    import csv
    import io

    assert main(["diagnose", "--db", str(sim_db), "--base", "bare", "--test", "peaked", "--csv"]) == 0
    text = capsys.readouterr().out
    header = text.splitlines()[0].split(",")
    assert header[:4] == ["severity", "kind", "freq_hz", "advice"]
    for row in csv.DictReader(io.StringIO(text)):
        for key, cell in row.items():
            if cell and key.endswith("_db"):
                assert len(cell.split(".")[1]) == 2, (key, cell)
            if cell and key.endswith("_hz"):
                assert "." not in cell, (key, cell)
            if cell and key.endswith("_k"):
                assert len(cell.split(".")[1]) == 1, (key, cell)


def test_finding_rows_carry_every_evidence_key_and_safe_labels():
    from analysis.findings import Finding
    from bandcensus.commands._csv import csv_text
    from bandcensus.commands.diagnose import finding_rows

    findings = [Finding(kind="added-noise", severity="problem", freq_hz=None, advice="=SUM(A1) is not a formula",
                        evidence={"added_noise_k": 32068.94, "excess_db": 11.8449}),
                Finding(kind="passband", severity="problem", freq_hz=94_517_123.4, advice="retune",
                        evidence={"covered_stations_count": 1})]
    rows, fields = finding_rows(findings)
    assert fields == ["severity", "kind", "freq_hz", "advice", "added_noise_k", "excess_db",
                      "covered_stations_count"]
    lines = csv_text(rows, fields).splitlines()
    assert lines[1] == "problem,added-noise,,'=SUM(A1) is not a formula,32068.9,11.84,"
    assert lines[2] == "problem,passband,94517123,retune,,,1"


def test_unknown_label_fails_with_one_line(sim_db, capsys):
    assert main(["diagnose", "--db", str(sim_db), "--base", "bare", "--test", "nope"]) == 1
    err = capsys.readouterr().err
    assert err.startswith("Error: no complete sweeps of configuration 'nope'") and err.count("\n") == 1


def test_bad_usage_exits_2(sim_db, capsys):
    assert main(["diagnose", "--db", str(sim_db), "--base", "bare", "--test", "peaked",
                 "--attenuated", "peaked"]) == 2
    assert "--attenuation-db" in capsys.readouterr().err
    assert main(["diagnose", "--db", str(sim_db), "--test", "peaked"]) == 2


def test_help_text(capsys):
    assert main(["diagnose", "--help"]) == 0
    text = capsys.readouterr().out
    assert "four ways a preamp" in " ".join(text.split()) and "--attenuation-db" in text


@pytest.mark.skipif(not DEMO_DIR.is_dir(), reason="the demo recordings have not been generated")
def test_demo_bench_supply_is_diagnosed_as_added_noise(tmp_path, capsys):
    wanted = [p for p in sorted(DEMO_DIR.glob("*.sigmf-meta"))
              if "_bare_" in p.name or "preamp-bench-supply" in p.name]
    db = tmp_path / "demo.db"
    assert main(["replay", *map(str, wanted), "--db", str(db), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["diagnose", "--db", str(db), "--base", "bare", "--test", "preamp-bench-supply", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    kinds = [f["kind"] for f in out["findings"]]
    assert kinds == ["added-noise"]
    ev = out["findings"][0]["evidence"]
    # truth (recordings_demo/quorrelby_hill.toml): 30 000 K at the output over a receiver of NF 9 dB
    # (2013 K) and a 290 K termination: beta / N_bt = 32 013 / 2303, i.e. 11.4 dB
    assert ev["excess_db"] == pytest.approx(11.4, abs=1.0)
    assert ev["added_noise_min_k"] <= 30000.0
