"""``bandcensus scan`` and ``bandcensus devices`` as the user sees them: text and exit codes.

The receiver is the librtlsdr stub (tests/fakes_driver.py); the watchdog's child is forked, so
it inherits the stub.
"""

from __future__ import annotations

import json
import sqlite3
import sys
from pathlib import Path

import pytest

from bandcensus.cli import main
from fakes_driver import FakeDevice, FakeLib, install

SCENE = Path(__file__).resolve().parents[1] / "recordings_demo" / "quorrelby_hill.toml"
FAST = ["--band", "custom:88-92:100", "--dwell-ms", "5", "--settle-ms", "0", "--quiet"]


def _run(capsys, *args):
    rc = main(list(args))
    out, err = capsys.readouterr()
    return rc, out, err


def test_no_receiver_one_line_and_exit_1(monkeypatch, capsys, tmp_path):
    install(monkeypatch, FakeLib(devices=[]))
    db = tmp_path / "s.db"
    rc, out, err = _run(capsys, "scan", "--db", str(db), "--config", "bare", "--gain-db", "29.7")
    assert rc == 1
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: no receiver found")
    assert "udev" in lines[0] and "DVB driver" in lines[0] and "plug" in lines[0]
    assert not db.exists()  # nothing created when there is nothing to measure


def test_scan_on_stub_receiver_stores_complete_sweeps(monkeypatch, capsys, tmp_path):
    install(monkeypatch, FakeLib(noise=True, devices=[FakeDevice(serial="SN42")]))
    db = tmp_path / "s.db"
    rc, out, err = _run(capsys, "scan", "--db", str(db), "--config", "bare", "--gain-db", "29.7",
                        "--ppm", "3", "--sweeps", "2", *FAST[:-1])
    assert rc == 0, err
    assert "Run 1 finished: 2 sweeps stored (bare 2), 0 incomplete, 0 gaps, 0 clock jumps" in out
    assert out.splitlines()[-1].startswith(f"stored 2 sweeps (bare) in {db}: ")
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT COUNT(*) FROM sweeps WHERE complete = 1").fetchone()[0] == 2
    kind, device, settings = conn.execute("SELECT source_kind, device, settings FROM runs").fetchone()
    d = json.loads(device)
    assert kind == "rtl" and d["tuner"] == "R820T" and d["gain_db"] == pytest.approx(29.7) and d["ppm"] == 3
    assert json.loads(settings)["configurations"] == ["bare"]
    assert conn.execute("SELECT gain_db, ppm FROM sweeps").fetchall() == [(29.7, 3)] * 2


def test_invalid_gain_lists_steps(monkeypatch, capsys, tmp_path):
    install(monkeypatch, FakeLib())
    rc, out, err = _run(capsys, "scan", "--db", str(tmp_path / "s.db"), "--config", "bare", "--gain-db", "30",
                        *FAST)
    assert rc == 1 and "gain 30.0 dB is not a step of this tuner" in err and "29.7, 32.8" in err


@pytest.mark.parametrize("args, text", [
    ([], "--config"),
    (["--config", "a", "--sweeps", "2", "--for", "1h"], "only one of"),
    (["--config", "a", "--for", "8x"], "not a duration"),
    (["--config", "a", "--until", "25:00"], "HH:MM"),
    (["--config", "a", "--switch", "nocommand"], "LABEL=COMMAND"),
    (["--alternate", "a"], "at least two labels"),
    (["--alternate", "a,b", "--config", "c"], "not among"),
])
def test_usage_errors_exit_2(capsys, tmp_path, args, text):
    rc, out, err = _run(capsys, "scan", "--db", str(tmp_path / "s.db"), *args)
    assert rc == 2 and text in err


def test_alternating_simulated_scan(capsys, tmp_path):
    db = tmp_path / "s.db"
    rc, out, err = _run(capsys, "scan", "--db", str(db), "--simulate-scene", str(SCENE), "--alternate", "bare,b",
                        "--sweeps", "4", *FAST)
    assert rc == 0, err
    labels = [r[0] for r in sqlite3.connect(db).execute("SELECT configuration FROM sweeps ORDER BY sequence")]
    assert labels == ["bare", "b", "bare", "b"]
    # --quiet: the closing line only
    assert out.count("\n") == 1 and out.startswith(f"stored 4 sweeps (2 configurations) in {db}: ") and err == ""


def test_progress_lines_on_stderr(capsys, tmp_path):
    rc, out, err = _run(capsys, "scan", "--db", str(tmp_path / "s.db"), "--simulate-scene", str(SCENE),
                        "--config", "bare", "--sweeps", "2", "--band", "custom:88-92:100", "--dwell-ms", "5")
    assert rc == 0
    assert "sweep 1 of 2 [bare] took" in err and "floor" in err and "strongest" in err
    # stdout carries only the summary: stations per configuration, the run, what was stored
    lines = out.splitlines()
    assert len(lines) == 3 and lines[0].endswith(" detected in 2 antenna sweeps") and lines[1].startswith("Run 1 finished")
    assert "hop" not in err and "\x1b" not in err  # off a terminal: log lines, no progress bar


def test_devices_lists_receivers(monkeypatch, capsys):
    install(monkeypatch, FakeLib(devices=[FakeDevice(serial="AB12"), FakeDevice(serial="CD34", tuner_type=4)]))
    rc, out, err = _run(capsys, "devices")
    assert rc == 0 and "0  serial AB12  tuner R820T" in out and "1  serial CD34  tuner FC2580" in out
    rc, out, err = _run(capsys, "devices", "--json")
    assert [d["serial"] for d in json.loads(out)] == ["AB12", "CD34"]


def test_devices_none_found(monkeypatch, capsys):
    install(monkeypatch, FakeLib(devices=[]))
    rc, out, err = _run(capsys, "devices")
    assert rc == 0 and out.startswith("No receiver found") and "udev" in out


def test_devices_library_missing_exit_1(monkeypatch, capsys):
    for name in [m for m in sys.modules if m == "rtlsdr" or m.startswith("rtlsdr.")]:
        monkeypatch.delitem(sys.modules, name)
    monkeypatch.setitem(sys.modules, "rtlsdr", None)
    rc, out, err = _run(capsys, "devices")
    assert rc == 1 and err.startswith("Error: the receiver library librtlsdr cannot be loaded")


@pytest.mark.parametrize("name", ["scan", "devices"])
def test_help(capsys, name):
    rc, out, err = _run(capsys, name, "--help")
    assert rc == 0 and len(out) > 200
    if name == "scan":
        assert "CAUTION: DC" in out and "--simulate-scene" not in out
