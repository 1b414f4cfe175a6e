"""``bandcensus replay`` and ``bandcensus channels`` end to end, as a user runs them.

A foreign recording (written with the sigmf reference library, not our writer) holds several
cu8 captures at arbitrary centres with complex tones of known amplitude in white noise of known
power, so the truthful per-channel numbers are known in advance (Parseval: a complex exponential
of amplitude A has power A**2; white noise of total power s2 has s2 * B / fs in bandwidth B).
"""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pytest
import sigmf

from bandcensus.cli import main
from test_recording import encode, write_foreign

FS_HZ = 2_400_000.0
NOISE_POWER = 0.01            # total complex noise power, -20 dBFS over the whole 2.4 MHz
CENTERS_HZ = (88.95e6, 97.45e6, 101.05e6)
#: tone frequency (Hz) -> amplitude (full-scale units)
TONES = {89.3e6: 0.1, 97.1e6: 0.06, 101.5e6: 0.3}  # C/N 10.8, 6.3 and 20.3 dB
N_SAMPLES = 48_000


def _truth_cn_db(amplitude: float, bw_hz: float = 200e3) -> float:
    noise_in_channel = NOISE_POWER * bw_hz / FS_HZ
    return 10 * np.log10(amplitude**2 / noise_in_channel)


def foreign_cu8(directory, name="foreign_cu8", seed=3):
    rng = np.random.default_rng(seed)
    t = np.arange(N_SAMPLES) / FS_HZ
    parts, caps = [], []
    for k, fc in enumerate(CENTERS_HZ):
        z = np.sqrt(NOISE_POWER / 2) * (rng.standard_normal(N_SAMPLES) + 1j * rng.standard_normal(N_SAMPLES))
        for f, a in TONES.items():
            if abs(f - fc) < 0.9e6:
                z = z + a * np.exp(2j * np.pi * (f - fc) * t + 1j * rng.uniform(0, 2 * np.pi))
        parts.append(encode(z, "cu8"))
        caps.append({sigmf.SAMPLE_START_KEY: k * N_SAMPLES, sigmf.FREQUENCY_KEY: fc,
                     sigmf.DATETIME_KEY: f"2026-03-01T12:00:0{k}Z"})
    return write_foreign(directory, name, "cu8", caps, np.concatenate(parts))


def _replay_json(capsys, *args) -> dict:
    code = main(["replay", *map(str, args), "--json"])
    out = capsys.readouterr()
    assert code == 0, out.err
    return json.loads(out.out)


def test_foreign_multi_capture_cu8_replay_is_truthful(tmp_path, capsys):
    meta = foreign_cu8(tmp_path)
    db = tmp_path / "s.db"
    payload = _replay_json(capsys, meta, "--db", db, "--config", "bare", "--input", "antenna")
    (sweep,) = payload["sweeps"]
    rows = {r["freq_hz"]: r for r in sweep["channels"]}
    assert len(rows) + len(sweep["uncovered_hz"]) == 206  # the europe plan, 87.5-108 MHz
    assert len(sweep["uncovered_hz"]) > 100               # three captures cover only part of it
    for f, a in TONES.items():
        r = rows[int(f)]
        assert r["received"]
        assert r["power_dbfs"] == pytest.approx(10 * np.log10(a**2 + NOISE_POWER * 200e3 / FS_HZ), abs=0.1)
        assert r["cn_db"] == pytest.approx(_truth_cn_db(a), abs=0.5), f
    empty = [r for f, r in rows.items() if all(abs(f - t) > 300e3 for t in TONES)]
    assert empty and all(not r["received"] and r["cn_db"] is None for r in empty)
    noise_truth_dbfs = 10 * np.log10(NOISE_POWER * 200e3 / FS_HZ)
    assert np.median([r["noise_dbfs"] for r in empty]) == pytest.approx(noise_truth_dbfs, abs=0.3)

    # the stored rows are what the table showed; channels reads them back
    assert main(["channels", "--db", str(db), "--config", "bare", "--json"]) == 0
    stored = {r["freq_hz"]: r for r in json.loads(capsys.readouterr().out)["channels"]}
    for key in ("freq_hz", "power_dbfs", "noise_dbfs", "cn_db", "received", "sweeps"):
        assert key in stored[int(89.3e6)]
    assert stored[int(89.3e6)]["cn_db"] == pytest.approx(rows[int(89.3e6)]["cn_db"], abs=1e-3)
    assert stored[int(89.3e6)]["sweeps"] == 1


def test_terminal_table_and_csv(tmp_path, capsys):
    meta = foreign_cu8(tmp_path)
    db = tmp_path / "s.db"
    assert main(["replay", str(meta), "--db", str(db), "--config", "bare"]) == 0
    out = capsys.readouterr().out
    assert "89.30" not in out  # the per-channel table only on request
    assert main(["replay", str(meta), "--db", str(tmp_path / "t.db"), "--config", "bare", "--channels"]) == 0
    out = capsys.readouterr().out
    assert "89.30" in out and "not received" in out and "not covered" in out
    assert main(["channels", "--db", str(db), "--csv"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0].startswith("freq_hz,power_dbfs,noise_dbfs,cn_db,received")
    with sqlite3.connect(db) as c:
        n_channels = c.execute("SELECT COUNT(DISTINCT freq_hz) FROM channels").fetchone()[0]
    assert n_channels > 0 and len(lines) == 1 + n_channels  # header + one row per channel
    assert any(line.startswith("89300000,") for line in lines[1:])


def test_own_recording_carries_its_labels(tmp_path, capsys):
    """A sweep kept with --keep-iq replays with its configuration and input, same channel rows."""
    from survey.bandplan import parse_band
    from survey.records import RunInfo, SweepSettings
    from survey.runner import record_sweep
    from survey.sources.recording import open_recording
    from survey.store import SurveyStore
    from survey.sweep import plan_for_source

    db1 = tmp_path / "first.db"
    source = open_recording(foreign_cu8(tmp_path))
    settings = SweepSettings(band="europe", dwell_s=N_SAMPLES / FS_HZ, settle_s=0.0)
    plan = plan_for_source(parse_band("europe"), source, settings)
    with SurveyStore(db1) as store:
        run = store.begin_run(RunInfo("recording", "test", "0", {}))
        outcome = record_sweep(store, run, source, plan, settings, "preamp-x", "terminated",
                               keep_iq_dir=tmp_path / "iq")
    payload = _replay_json(capsys, outcome.recording_path, "--db", tmp_path / "second.db")
    (sweep,) = payload["sweeps"]
    assert sweep["configuration"] == "preamp-x" and sweep["input"] == "terminated"
    original = {c.freq_hz: c for c in outcome.result.channels}
    for r in sweep["channels"]:
        assert r["power_dbfs"] == pytest.approx(original[r["freq_hz"]].power_dbfs, abs=1e-6)


def _count_sweeps(db) -> int:
    with sqlite3.connect(db) as c:
        return c.execute("SELECT COUNT(*) FROM sweeps").fetchone()[0]


@pytest.mark.parametrize("case, expect", [
    ("missing", "absent.sigmf-meta"),
    ("not-json", "not JSON"),
    ("datatype", "not supported"),
    ("no-rate", "core:sample_rate is missing"),
    ("no-frequency", "no core:frequency"),
    ("truncated", "data ends at sample"),
    ("band", "no channel of band 'oirt'"),
])
def test_bad_input_is_one_line_and_keeps_the_database(tmp_path, capsys, case, expect):
    db = tmp_path / "s.db"
    good = foreign_cu8(tmp_path, name="good")
    assert main(["replay", str(good), "--db", str(db), "--config", "bare", "--quiet"]) == 0
    capsys.readouterr()
    before = _count_sweeps(db)
    bad = foreign_cu8(tmp_path, name="bad")
    doc = json.loads(bad.read_text())
    extra: list[str] = []
    if case == "missing":
        bad = tmp_path / "absent.sigmf-meta"
    elif case == "not-json":
        bad.write_text("{ not json")
    elif case == "datatype":
        doc["global"]["core:datatype"] = "cu12_le"
    elif case == "no-rate":
        doc["global"].pop("core:sample_rate")
    elif case == "no-frequency":
        doc["captures"][1].pop("core:frequency")
    elif case == "truncated":
        data = bad.with_suffix(".sigmf-data")
        data.write_bytes(data.read_bytes()[: 2 * N_SAMPLES * 2])
    elif case == "band":
        extra = ["--band", "oirt"]
    if case in ("datatype", "no-rate", "no-frequency"):
        doc["global"].pop("core:sha512", None)
        bad.write_text(json.dumps(doc))
    code = main(["replay", str(bad), "--db", str(db), "--config", "bare", *extra])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1
    assert len(err) == 1 and err[0].startswith("Error: ") and expect in err[0]
    if case != "band":
        assert bad.name in err[0]
    assert _count_sweeps(db) == before
    with sqlite3.connect(db) as c:
        assert c.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_foreign_recording_without_labels_needs_config(tmp_path, capsys):
    meta = foreign_cu8(tmp_path)
    assert main(["replay", str(meta), "--db", str(tmp_path / "s.db")]) == 2
    assert "--config" in capsys.readouterr().err
    assert not (tmp_path / "s.db").exists()
