"""The bundled SIMULATED identification recording (recordings_demo/identify/): reproducible from
its generator, and replayed through the survey it names the demo scene's strongest RDS stations
with the scene's own (invented) PI codes and PS names, never a wrong character."""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

from bandcensus.cli import main
from survey.scene import load_scene

DEMO = Path(__file__).resolve().parents[1] / "recordings_demo"
META = DEMO / "identify" / "identification-bare.sigmf-meta"


def _generator():
    spec = importlib.util.spec_from_file_location("identification", DEMO / "identification.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_bundled_recording_is_what_the_generator_writes(tmp_path):
    meta = _generator().generate(tmp_path)
    assert meta.name == META.name
    assert meta.with_suffix(".sigmf-data").read_bytes() == META.with_suffix(".sigmf-data").read_bytes()
    assert META.with_suffix(".sigmf-data").stat().st_size <= 3_100_000  # three 0.5 s captures, cu8, 1.024 MS/s


def test_replayed_recording_names_the_strongest_stations(tmp_path, capsys):
    db = tmp_path / "identify.db"
    assert main(["replay", str(META), "--db", str(db), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["stations", "--db", str(db), "--json"]) == 0
    found = json.loads(capsys.readouterr().out)["stations"]
    truth = {round(s.freq_hz, -5): s for s in load_scene(DEMO / "quorrelby_hill.toml").stations}
    named = 0
    for st in found:
        sent = truth[round(st["freq_hz"], -5)]
        if st["rds_pi"] is None:
            continue
        assert st["rds_pi"] == f"{sent.rds_pi:04X}"
        ps = sent.rds_ps.ljust(8)
        assert all(c == "_" or c == ps[k] for k, c in enumerate(st["rds_ps"] or ""))
        if st["rds_ps"] == ps:
            named += 1
            assert st["name"] == f"{sent.rds_ps} (PI {sent.rds_pi:04X})"
    # the two stations above 20 dB C/N (102.4 and 106.1 MHz) get their whole name from 0.5 s
    assert named >= 2
