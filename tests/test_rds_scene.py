"""RDS in the simulated scene: TOML fields, the demo scene's invented identities, and the
identification recordings (0.5 s per RDS station) decoded back to PI and PS."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

from survey.errors import SceneError
from survey.scene import load_scene, parse_scene

DEMO = Path(__file__).resolve().parents[1] / "recordings_demo"


def _station(**extra) -> dict:
    return {"scene": {"name": "t"}, "station": [{"name": "S", "freq_mhz": 95.0, "level_dbm": -80.0, **extra}]}


def test_rds_fields_parse_and_default_to_none():
    plain = parse_scene(_station()).stations[0]
    assert plain.rds_pi is None and plain.rds is None
    s = parse_scene(_station(rds_pi="E5B1", rds_ps="TOWER", rds_pty=4)).stations[0]
    assert (s.rds_pi, s.rds_ps, s.rds_pty) == (0xE5B1, "TOWER", 4)
    assert s.rds.pi == 0xE5B1 and s.rds.ps == "TOWER"
    assert parse_scene(_station(rds_pi=0x1234)).stations[0].rds_pty == 0


@pytest.mark.parametrize("extra, message", [
    ({"rds_pi": "XYZ"}, "16-bit code"),
    ({"rds_pi": "12345"}, "16-bit code"),
    ({"rds_pi": True}, "16-bit code"),
    ({"rds_pi": "1234", "rds_ps": "NINECHARS"}, "at most 8"),
    ({"rds_pi": "1234", "rds_pty": 32}, "0..31"),
    ({"rds_ps": "ALONE"}, "without rds_pi"),
])
def test_bad_rds_fields_are_refused_with_the_fix(extra, message):
    with pytest.raises(SceneError, match=message):
        parse_scene(_station(**extra))


def test_demo_scene_gives_the_stronger_stations_invented_identities():
    scene = load_scene(DEMO / "quorrelby_hill.toml")
    with_rds = [s for s in scene.stations if s.rds_pi is not None]
    assert len(with_rds) == 6
    assert len({s.rds_pi for s in with_rds}) == 6
    assert all(s.level_dbm >= -96.0 for s in with_rds)
    assert all(s.rds_pi is None for s in scene.without_rds().stations)


def test_identification_recording_names_the_strong_stations(tmp_path):
    spec = importlib.util.spec_from_file_location("demo_identification", DEMO / "identification.py")
    tool = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(tool)
    meta = tool.generate(tmp_path, 0.5, "bare", strongest=None)
    scene = load_scene(DEMO / "quorrelby_hill.toml")
    sent = {round(s.freq_hz): s for s in tool.rds_stations(scene)}
    results = {round(f): r for f, r in tool.decode_recording(meta)}
    assert set(results) == set(sent)
    for f, r in results.items():
        s = sent[f]
        # never a wrong name, whatever the level
        assert r.pi in (None, s.rds_pi)
        assert all(text == s.rds_ps.ljust(8)[2 * k:2 * k + 2] for k, text in r.ps_segments)
    # the two strongest (C/N above 20 dB without a preamp) are named in full from 0.5 s
    for freq_mhz in (102.4, 106.1):
        r, s = results[round(freq_mhz * 1e6)], sent[round(freq_mhz * 1e6)]
        assert (r.pi, r.ps, r.pty) == (s.rds_pi, s.rds_ps.ljust(8), s.rds_pty)
        assert r.block_error_rate == 0.0
