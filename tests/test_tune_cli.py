"""``bandcensus tune`` as the user sees it, on simulated scenes and on the stub receiver.

Time in these tests is the source's own sample clock (the simulated clock, ``--unpaced``): the
refresh rate is counted as refreshes per simulated second, never against the wall clock.
"""

from __future__ import annotations

import json
import math
import os
import signal
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from analysis.passband import TunedStage, cascade_response_db
from bandcensus.cli import main
from fakes_driver import FakeDevice, FakeLib, install
from survey.tuning_session import DEFAULT_DWELL_S, DEFAULT_SETTLE_S

ROOT = Path(__file__).resolve().parents[1]
TRIMMER = ROOT / "recordings_demo" / "trimmer.toml"
KEYS = ("t_s", "peak_hz", "peak_gain_db", "edge_low_hz", "edge_high_hz", "target_within_3db_fraction")
#: Receiver time of one refresh over 88-100 MHz plus 1.2 MHz margins: 12 hops of settle + dwell.
REFRESH_S = 12 * (DEFAULT_SETTLE_S + DEFAULT_DWELL_S)

STEP_SCENE = """
[scene]
name = "step"
[receiver]
nf_db = 7.0
full_scale_dbm = -60.0
[noise_source]
enr_db = 15.0
[preamp.p]
gain_db = 20.0
nf_db = 1.5
trimmer = [
  { t_s = 0.0,   circuits = [{ f0_hz = 92.0e6, q = 30.0 }] },
  { t_s = 2.0,   circuits = [{ f0_hz = 92.0e6, q = 30.0 }] },
  { t_s = 2.001, circuits = [{ f0_hz = 96.5e6, q = 15.0 }] },
]
"""


def _run(capsys, *args):
    rc = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return rc, out, err


def _lines(out: str) -> list[dict]:
    return [json.loads(line) for line in out.splitlines() if line.strip()]


def _exact(f0: float, q: float) -> tuple[float, float, float]:
    """Peak and -3 dB edges of one tuned circuit (solving Q (f/f0 - f0/f) = -+1)."""
    a = math.sqrt(1 + 1 / (4 * q * q))
    return f0, f0 * (a - 1 / (2 * q)), f0 * (a + 1 / (2 * q))


def test_json_lines_follow_the_trimmer_schedule_at_the_stated_rate(capsys, tmp_path):
    db = tmp_path / "t.db"
    rc, out, err = _run(capsys, "tune", "--simulate", TRIMMER, "--target", "88-100", "--db", db, "--json",
                        "--for", "12s", "--unpaced")
    assert rc == 0, err
    rows = _lines(out)
    assert all(set(KEYS) <= set(r) for r in rows)
    t = np.array([r["t_s"] for r in rows])
    # rate on the source's sample clock: every refresh is 12 hops of settle + dwell
    assert np.diff(t) == pytest.approx(REFRESH_S, abs=1e-4)  # t_s is printed to 0.1 ms
    assert len(rows) / t[-1] >= 2.0 and len(rows) == math.ceil(12.0 / REFRESH_S)
    for r in rows:
        # the sweep ended at t_s and began one refresh earlier: the displayed peak lies between the
        # schedule's peak at those two times (92 -> 97 MHz over 10 s), give or take 40 kHz
        lo = 92e6 + 0.5e6 * min(max(r["t_s"] - REFRESH_S, 0.0), 10.0)
        hi = 92e6 + 0.5e6 * min(r["t_s"], 10.0)
        assert lo - 40e3 <= r["peak_hz"] <= hi + 40e3, r
    settled = [r for r in rows if r["t_s"] - REFRESH_S >= 10.0]
    assert settled
    f0, e_lo, e_hi = _exact(97e6, 30.0)
    # the noise rise (G (Th + Tp) + Tr)/(Th + Tr) narrows the -3 dB width by about 1 % against G alone
    for r in settled:
        assert r["peak_hz"] == pytest.approx(f0, abs=40e3)
        assert r["edge_low_hz"] == pytest.approx(e_lo, abs=60e3) and r["edge_high_hz"] == pytest.approx(e_hi, abs=60e3)
        assert r["target_within_3db_fraction"] == pytest.approx((min(e_hi, 100e6) - max(e_lo, 88e6)) / 12e6, abs=0.01)
        assert "stagger" in r["hint"] and "MHz wide at -3 dB, target 12 MHz" in r["hint"]
    assert "SIMULATED tuning session finished after" in err and f"run 1 in {db}" in err


def test_peak_and_edges_follow_a_step_within_two_refreshes(capsys, tmp_path):
    scene = tmp_path / "step.toml"
    scene.write_text(STEP_SCENE)
    rc, out, err = _run(capsys, "tune", "--simulate", scene, "--target", "88-100", "--db", tmp_path / "s.db",
                        "--json", "--for", "4s", "--unpaced")
    assert rc == 0, err
    rows = _lines(out)
    first_after = next(k for k, r in enumerate(rows) if r["t_s"] > 2.001)  # first refresh the change reaches
    f0, e_lo, e_hi = _exact(96.5e6, 15.0)
    before = rows[first_after - 1]
    assert before["peak_hz"] == pytest.approx(92e6, abs=40e3)
    follow = rows[first_after + 1]  # two refreshes after the change: wholly measured after it
    assert follow["peak_hz"] == pytest.approx(f0, abs=60e3)
    assert follow["edge_low_hz"] == pytest.approx(e_lo, abs=80e3)
    assert follow["edge_high_hz"] == pytest.approx(e_hi, abs=80e3)


def test_session_is_stored_thinned_and_comparable(capsys, tmp_path):
    db = tmp_path / "t.db"
    rc, out, err = _run(capsys, "tune", "--simulate", TRIMMER, "--target", "88-100", "--db", db, "--json",
                        "--for", "4s", "--unpaced", "--store-every-s", "1")
    assert rc == 0, err
    rows = _lines(out)
    conn = sqlite3.connect(db)
    status, kind, settings, notes = conn.execute("SELECT status, source_kind, settings, notes FROM runs").fetchone()
    assert status == "finished" and kind == "simulated" and json.loads(settings)["mode"] == "tune"
    assert notes.startswith("SIMULATED")
    counts = dict(conn.execute("SELECT configuration, COUNT(*) FROM sweeps GROUP BY configuration").fetchall())
    stored = [r for r in rows if r["stored_sweep_id"] is not None]
    assert counts == {"bare": 8, "preamp-single": len(stored)}
    assert len(stored) == math.ceil(4.0 / (math.ceil(1.0 / REFRESH_S) * REFRESH_S))  # one per second of session
    n_channels = conn.execute("SELECT COUNT(*) FROM channels WHERE sweep_id = ?", (stored[0]["stored_sweep_id"],))
    assert n_channels.fetchone()[0] == 73  # 86.8-101.2 MHz on 200 kHz
    # the usual per-channel table reads the session: the power rise over the reference at 93 MHz
    # (the circuit passes 93 MHz between 1 and 3 s) against the gain the display showed there
    tables = {}
    for label in ("bare", "preamp-single"):
        rc, out, err = _run(capsys, "channels", "--db", db, "--config", label, "--input", "noise-hot", "--json")
        assert rc == 0, err
        tables[label] = {c["freq_hz"]: c["power_dbfs"] for c in json.loads(out)["channels"]}
    assert len(tables["bare"]) == 73
    rise = tables["preamp-single"][93_000_000] - tables["bare"][93_000_000]
    assert 16.0 < rise < 19.5


def test_reference_from_the_database(capsys, tmp_path):
    db = tmp_path / "ref.db"
    rc, out, err = _run(capsys, "simulate", TRIMMER, "--db", db, "--config", "bare", "--input", "noise-hot",
                        "--band", "custom:86-102:200", "--sweeps", "2", "--dwell-ms", "20", "--json")
    assert rc == 0, err
    rc, out, err = _run(capsys, "tune", "--simulate", TRIMMER, "--target", "88-100", "--db", db, "--reference", "bare",
                        "--json", "--for", "1s", "--unpaced")
    assert rc == 0, err
    rows = _lines(out)
    assert rows and abs(rows[0]["peak_hz"] - 92.1e6) < 150e3 and rows[0]["peak_gain_db"] == pytest.approx(19.4, abs=0.5)
    assert "Warning" not in err
    rc, out, err = _run(capsys, "tune", "--simulate", TRIMMER, "--target", "88-100", "--db", db, "--reference", "bare",
                        "--gain-db", "20", "--json", "--for", "0.5s", "--unpaced")
    assert rc == 0 and "Warning: the reference was measured at a receiver gain of 29.7 dB, this session at 20 dB" in err
    rc, out, err = _run(capsys, "tune", "--simulate", TRIMMER, "--target", "88-100", "--db", db, "--reference", "bare",
                        "--input", "antenna", "--for", "1s", "--unpaced")
    assert rc == 1 and err.startswith("Error: no complete sweeps labelled 'bare' with input 'antenna'")
    assert "bare/noise-hot" in err


def test_antenna_input_lists_the_stations_inside_the_passband(capsys, tmp_path):
    rc, out, err = _run(capsys, "tune", "--simulate", TRIMMER, "--target", "88-100", "--db", tmp_path / "a.db",
                        "--input", "antenna", "--json", "--for", "1.5s", "--unpaced")
    assert rc == 0, err
    rows = _lines(out)
    assert rows
    for r in rows:
        inside = set(r["stations_inside_hz"])
        # stations of the scene in the target: 89.6, 93.2, 95.9, 97.3, 99.1 MHz
        lo = -math.inf if r["edge_low_hz"] is None else r["edge_low_hz"]
        hi = math.inf if r["edge_high_hz"] is None else r["edge_high_hz"]
        expected = {f for f in (89_600_000, 93_200_000, 95_900_000, 97_300_000, 99_100_000) if lo <= f <= hi}
        assert inside == expected
        assert 93_200_000 in inside  # the circuit sits at 92-92.8 MHz, 3 MHz wide


@pytest.mark.parametrize("args, text", [
    (["--target", "100-88"], "start must be below stop"),
    (["--target", "88-100"], "give --reference LABEL"),
    (["--target", "88-100", "--for", "soon"], "is not a duration"),
])
def test_usage_errors_exit_2(capsys, tmp_path, args, text):
    rc, out, err = _run(capsys, "tune", "--db", tmp_path / "x.db", *args)
    assert rc == 2 and text in err


def test_terminal_view_without_a_terminal_prints_summary_lines(capsys, tmp_path):
    rc, out, err = _run(capsys, "tune", "--simulate", TRIMMER, "--target", "88-100", "--db", tmp_path / "v.db",
                        "--for", "3s", "--unpaced")
    assert rc == 0, err
    lines = [line for line in out.splitlines() if line.startswith("peak ")]
    assert 2 <= len(lines) <= 4  # one a second of session time
    assert "-3 dB edges" in lines[0] and "% within 3 dB" in lines[0]


def test_view_plot_marks_peak_edges_and_target():
    from analysis.tuning.curve import measure_curve
    from analysis.tuning.tracker import TuneFrame
    from bandcensus.commands._tune_view import plot_lines, summary_lines

    f = np.arange(86.8e6, 101.2e6 + 1, 200e3)
    g = cascade_response_db(f, [TunedStage(94e6, 30.0)], 20.0)
    m = measure_curve(f, g, (88e6, 100e6))
    frame = TuneFrame(1.0, 3, f, g, m, None, None, 2.48, None, "noise")
    lines = [t for t, _ in plot_lines(frame, width=145)]
    axis = next(t for t in lines if "└" in t)[11:]
    col = lambda hz: int(round((hz - f[0]) / (f[-1] - f[0]) * 144))  # noqa: E731
    assert axis[col(m.peak_hz)] == "^" and axis[col(m.edge_low_hz)] == "[" and axis[col(m.edge_high_hz)] == "]"
    assert axis[col(88.5e6)] == "═" and axis[col(87.5e6)] == "─" and axis[col(100.5e6)] == "─"
    text = "\n".join(t for t, _ in summary_lines(frame, simulated=True))
    assert "SIMULATED refresh 3" in text and f"peak {m.peak_hz / 1e6:.3f} MHz" in text


def test_sigterm_ends_the_session_cleanly(tmp_path):
    db = tmp_path / "sig.db"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen([sys.executable, "-m", "bandcensus", "tune", "--simulate", str(TRIMMER), "--target", "88-100",
                             "--db", str(db), "--json"], cwd=tmp_path, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        first = proc.stdout.readline()  # the session is running once a refresh is out
        assert json.loads(first)["refresh"] == 1
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    assert "SIMULATED tuning session stopped by SIGTERM" in err and str(db) in err
    status = sqlite3.connect(db).execute("SELECT status FROM runs").fetchone()[0]
    assert status == "stopped"


def test_receiver_path_on_the_stub_driver(monkeypatch, capsys, tmp_path):
    lib = install(monkeypatch, FakeLib(noise=True, devices=[FakeDevice(serial="SN7")]))
    db = tmp_path / "r.db"
    rc, out, err = _run(capsys, "scan", "--db", db, "--config", "bare", "--input", "noise-hot", "--gain-db", "29.7",
                        "--band", "custom:86.6-101.4:200", "--dwell-ms", "20", "--settle-ms", "0", "--sweeps", "1",
                        "--quiet")
    assert rc == 0, err
    lib.calls.clear()
    rc, out, err = _run(capsys, "tune", "--target", "88-100", "--reference", "bare", "--db", db, "--gain-db", "29.7",
                        "--json", "--for", "0.5s", "--bias-tee")
    assert rc == 0, err
    assert "Caution: bias tee on" in err and "noise source" in err
    rows = _lines(out)
    assert rows and all(set(KEYS) <= set(r) for r in rows)
    # the stub delivers the same white noise as the reference: a flat curve near 0 dB
    assert abs(rows[-1]["peak_gain_db"]) < 1.0
    tuned = [c[1] for c in lib.calls if c[0] == "set_center_freq" and 86e6 < c[1] < 102e6]
    assert len(tuned) >= 12 and len(set(tuned)) == 12  # the tuning plan's 12 hops, again and again
    assert ("set_bias_tee", 1) in lib.calls and lib.calls[-1] == ("close",)
    kind, status = sqlite3.connect(db).execute("SELECT source_kind, status FROM runs ORDER BY id DESC").fetchone()
    assert kind == "rtl" and status == "finished"


def test_help_text(capsys):
    rc, out, err = _run(capsys, "tune", "--help")
    assert rc == 0 and "--target" in out and "--reference" in out and "--serve" in out
