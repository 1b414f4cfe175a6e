"""``bandcensus simulate`` through the command line: exit codes, database rows, kept IQ."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from bandcensus.cli import main
from bandcensus.commands.simulate import parse_interval_s

SCENE = """
[scene]
name = "cli-test"
[outside_noise]
environment = "rural"
[receiver]
nf_db = 9.0
full_scale_dbm = -60.0
[preamp.preamp-a]
gain_db = 15.0
nf_db = 1.5
circuits = [{ f0_hz = 98.0e6, q = 10.0 }]
[[station]]
name = "Test One"
freq_mhz = 98.0
level_dbm = -85.0
"""


@pytest.fixture()
def scene_file(tmp_path: Path) -> Path:
    p = tmp_path / "scene.toml"
    p.write_text(SCENE)
    return p


def _custom_band() -> list[str]:
    return ["--band", "custom:97.0-99.0:100"]


def test_alternating_sweeps_are_stored_with_seed(scene_file, tmp_path, capsys):
    db = tmp_path / "sim.db"
    code = main(["simulate", str(scene_file), "--db", str(db), "--alternate", "bare,preamp-a",
                 "--sweeps", "3", "--every", "2m", "--seed", "42", "--dwell-ms", "5", *_custom_band(), "--json"])
    assert code == 0
    payload = json.loads(capsys.readouterr().out)
    assert payload["simulated"] is True and payload["seed"] == 42
    assert [s["configuration"] for s in payload["sweeps"]] == ["bare", "preamp-a", "bare"]
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT seed, source_kind, status FROM runs").fetchone() == (42, "simulated", "finished")
    starts = [r[0] for r in conn.execute("SELECT started_utc FROM sweeps ORDER BY sequence")]
    assert starts[0].startswith("2026-06-01T20:00:00") and starts[1].startswith("2026-06-01T20:02:00")
    assert conn.execute("SELECT COUNT(*) FROM channels WHERE freq_hz = 98000000 AND received = 1").fetchone()[0] == 3


def test_keep_iq_writes_one_recording_per_sweep(scene_file, tmp_path, capsys):
    iq = tmp_path / "iq"
    code = main(["simulate", str(scene_file), "--db", str(tmp_path / "k.db"), "--config", "bare",
                 "--sweeps", "2", "--dwell-ms", "2", *_custom_band(), "--keep-iq", str(iq)])
    assert code == 0
    metas = sorted(iq.glob("*.sigmf-meta"))
    assert len(metas) == 2
    meta = json.loads(metas[0].read_text())
    assert "SIMULATED" in meta["global"]["core:hw"] and meta["global"]["bandcensus:seed"] == 0
    out = capsys.readouterr().out.splitlines()
    assert out[1] == f"kept the IQ of 2 sweeps in {iq}" and out[-1].startswith("stored 2 sweeps (bare) in ")


def test_unknown_configuration_fails_with_choices(scene_file, tmp_path, capsys):
    code = main(["simulate", str(scene_file), "--db", str(tmp_path / "x.db"), "--config", "preamp-z"])
    assert code == 1
    err = capsys.readouterr().err
    assert err.startswith("Error: ") and "bare, preamp-a" in err


def test_missing_scene_fails_cleanly(tmp_path, capsys):
    code = main(["simulate", str(tmp_path / "none.toml"), "--db", str(tmp_path / "x.db"), "--config", "bare"])
    assert code == 1
    assert "does not exist" in capsys.readouterr().err


def test_config_or_alternate_is_required(scene_file, tmp_path, capsys):
    assert main(["simulate", str(scene_file), "--db", str(tmp_path / "x.db")]) == 2
    assert "--config" in capsys.readouterr().err


def test_bad_interval_is_usage_error(scene_file, tmp_path, capsys):
    assert main(["simulate", str(scene_file), "--db", str(tmp_path / "x.db"), "--config", "bare",
                 "--every", "soon"]) == 2


@pytest.mark.parametrize("text, seconds", [("60s", 60.0), ("5m", 300.0), ("1h", 3600.0), ("90", 90.0), ("0.5s", 0.5)])
def test_parse_interval(text, seconds):
    assert parse_interval_s(text) == seconds


def test_help_text():
    assert main(["simulate", "--help"]) == 0
