"""What the capture commands print: the answer first, a closing line, progress only on a terminal."""

from __future__ import annotations

import functools
import io
import re
import sqlite3
from pathlib import Path

from rich.console import Console

from bandcensus.cli import main
from bandcensus.commands import _progress, replay

ROOT = Path(__file__).resolve().parents[1]
DEMO = sorted((ROOT / "recordings_demo" / "sigmf").glob("*.sigmf-meta"))
_ESCAPES = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")
_CLOSING = re.compile(r"^stored (\d+) sweeps? \((.+)\) in (\S+): (\d+) stations? heard$")


def _sweeps_per_configuration(db: Path) -> dict[str, dict[str, int]]:
    out: dict[str, dict[str, int]] = {}
    with sqlite3.connect(db) as conn:
        for label, inp, n in conn.execute("SELECT configuration, input, COUNT(*) FROM sweeps WHERE complete = 1 "
                                          "GROUP BY configuration, input"):
            out.setdefault(label, {})[inp] = n
    return out


def test_replaying_the_demo_prints_a_few_lines_and_no_paths(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert len(DEMO) == 48
    assert main(["replay", *map(str, DEMO), "--db", "survey.db"]) == 0
    captured = capsys.readouterr()
    out = captured.out.splitlines()
    assert len(out) <= 5
    assert not any(".sigmf" in line or "site-packages" in line for line in out)
    closing = _CLOSING.match(out[-1])
    assert closing, out[-1]
    assert closing.group(1) == "48" and closing.group(2) == "4 configurations" and closing.group(3) == "survey.db"
    heard = int(closing.group(4))
    # one line per configuration, with the sweep counts the database holds
    per_config = _sweeps_per_configuration(tmp_path / "survey.db")
    assert sum(sum(v.values()) for v in per_config.values()) == 48
    for label, inputs in per_config.items():
        line = next(line for line in out if line.startswith(f"{label}: "))
        detected = int(re.search(r"(\d+) stations? detected", line).group(1))
        n = inputs["antenna"]
        assert line.startswith(f"{label}: {detected} station{'s' if detected != 1 else ''} detected in "
                               f"{n} antenna sweep{'s' if n != 1 else ''}")
        others = sum(v for k, v in inputs.items() if k != "antenna")
        assert (f"; also {others} sweeps of noise-cold, noise-hot, terminated" in line) == bool(others)
        assert detected <= heard
    # heard: detected in at least one sweep of any configuration, so at least the best configuration's count
    assert heard >= max(int(re.search(r"(\d+) stations? detected", line).group(1)) for line in out[:-1]) > 0
    # the few-averages warning is one line for all 48 recordings; no progress line off a terminal
    err = captured.err.splitlines()
    assert err == [err[0]] and err[0].startswith("Warning: 48 recordings: 18 of 18 captures give only 5 FFT "
                                                 "averages at fft size 2048")
    assert "elapsed" not in captured.err and "sweep 1 of" not in captured.err


def test_replay_quiet_prints_only_the_closing_line(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["replay", *map(str, DEMO[:3]), "--db", "q.db", "--quiet"]) == 0
    captured = capsys.readouterr()
    assert captured.err == ""
    assert captured.out.splitlines() == [captured.out.strip()]
    closing = _CLOSING.match(captured.out.strip())
    assert closing and closing.group(1) == "3" and closing.group(2) == "2 configurations"
    # the warning stays in each sweep's notes
    with sqlite3.connect(tmp_path / "q.db") as conn:
        notes = [n for (n,) in conn.execute("SELECT notes FROM sweeps")]
    assert len(notes) == 3 and all("FFT averages" in n for n in notes)


def test_one_sweep_is_singular(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["replay", str(DEMO[0]), "--db", "one.db", "--config", "bare"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert re.fullmatch(r"bare: \d+ stations? detected in 1 antenna sweep", out[-2])
    assert _CLOSING.match(out[-1]).group(2) == "bare" and out[-1].startswith("stored 1 sweep (bare) in one.db: ")


def test_replay_progress_on_a_fake_terminal(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    buffer = io.StringIO()
    terminal = Console(file=buffer, force_terminal=True, width=120, color_system=None)
    monkeypatch.setattr(replay, "sweep_progress",
                        functools.partial(_progress.sweep_progress, console=terminal, auto_refresh=False))
    assert main(["replay", *map(str, DEMO[:2]), "--db", "p.db"]) == 0
    shown = _ESCAPES.sub("", buffer.getvalue())
    assert "sweep 1 of 2 [bare]" in shown and "sweep 2 of 2 [preamp-peaked]" in shown
    assert re.search(r"hop \d+ of \d+", shown) and "elapsed" in shown
    # the same run with --quiet draws nothing, even on a terminal
    buffer.truncate(0)
    buffer.seek(0)
    capsys.readouterr()
    assert main(["replay", *map(str, DEMO[:2]), "--db", "p2.db", "--quiet"]) == 0
    assert buffer.getvalue() == ""


SCENE = ROOT / "recordings_demo" / "quorrelby_hill.toml"
SMALL = ["--band", "custom:88-92:100", "--dwell-ms", "5"]


def _fake_terminal(monkeypatch, module) -> io.StringIO:
    buffer = io.StringIO()
    terminal = Console(file=buffer, force_terminal=True, width=120, color_system=None)
    monkeypatch.setattr(module, "sweep_progress",
                        functools.partial(_progress.sweep_progress, console=terminal, auto_refresh=False))
    return buffer


def test_simulate_prints_the_answer_and_progress_only_on_a_terminal(tmp_path, capsys, monkeypatch):
    from bandcensus.commands import simulate

    monkeypatch.chdir(tmp_path)
    assert main(["simulate", str(SCENE), "--db", "s.db", "--alternate", "bare,preamp-peaked", "--sweeps", "3",
                 *SMALL]) == 0
    captured = capsys.readouterr()
    out = captured.out.splitlines()
    assert out[0].startswith("SIMULATED scene ") and re.search(r": run 1, 3 sweeps of \d+ hops$", out[0])
    assert re.fullmatch(r"bare: \d+ stations? detected in 2 antenna sweeps", out[1])
    assert re.fullmatch(r"preamp-peaked: \d+ stations? detected in 1 antenna sweep", out[2])
    assert _CLOSING.match(out[3]).group(1, 2, 3) == ("3", "2 configurations", "s.db") and len(out) == 4
    assert captured.err == ""  # not a terminal: no progress
    buffer = _fake_terminal(monkeypatch, simulate)
    assert main(["simulate", str(SCENE), "--db", "t.db", "--config", "bare", "--sweeps", "2", *SMALL]) == 0
    shown = _ESCAPES.sub("", buffer.getvalue())
    assert re.search(r"sweep 1 of 2 \[bare, antenna\] hop 1 of \d", shown)
    assert re.search(r"sweep 2 of 2 \[bare, antenna\] hop (\d) of \1", shown)
    assert "elapsed" in shown and " left" in shown
    capsys.readouterr()
    assert main(["simulate", str(SCENE), "--db", "u.db", "--config", "bare", "--quiet", *SMALL]) == 0
    captured = capsys.readouterr()
    assert captured.out.startswith("stored 1 sweep (bare) in u.db: ") and captured.out.count("\n") == 1


def test_scan_progress_line_on_a_fake_terminal(tmp_path, capsys, monkeypatch):
    from bandcensus.commands import scan

    monkeypatch.chdir(tmp_path)
    buffer = _fake_terminal(monkeypatch, scan)
    assert main(["scan", "--db", "s.db", "--simulate-scene", str(SCENE), "--config", "bare", "--sweeps", "2",
                 "--settle-ms", "0", *SMALL]) == 0
    shown = _ESCAPES.sub("", buffer.getvalue())
    assert re.search(r"sweep 1 of 2 \[bare\] hop 1 of \d", shown)
    assert re.search(r"sweep 2 of 2 \[bare\] hop (\d) of \1", shown)
    assert "elapsed" in shown
    captured = capsys.readouterr()
    assert "took" not in captured.err  # on a terminal the progress line replaces the per-sweep log
    assert captured.out.splitlines()[-1].startswith("stored 2 sweeps (bare) in s.db: ")


def test_runs_json_names_each_device_once(tmp_path, capsys, monkeypatch):
    import json

    monkeypatch.chdir(tmp_path)
    for k in range(3):
        assert main(["replay", str(DEMO[k]), "--db", "r.db", "--quiet"]) == 0
    assert main(["simulate", str(SCENE), "--db", "r.db", "--config", "bare", "--quiet", *SMALL]) == 0
    capsys.readouterr()
    assert main(["runs", "--db", "r.db", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    runs, devices = data["runs"], data["devices"]
    assert len(runs) == 4 and len(devices) == 2  # three replays of one receiver, one simulation
    assert [r["device_ref"] for r in runs] == ["d1", "d1", "d1", "d2"]
    assert all("device" not in r for r in runs)
    assert "SIMULATED" in json.dumps(devices["d1"]) and devices["d1"] != devices["d2"]
    for key in ("id", "status", "complete_sweeps", "incomplete_sweeps", "configurations", "inputs"):
        assert key in runs[0]
    # one replay of many recordings of one receiver names it once
    assert main(["replay", *map(str, DEMO[:4]), "--db", "m.db", "--quiet"]) == 0
    capsys.readouterr()
    assert main(["runs", "--db", "m.db", "--json"]) == 0
    (device,) = json.loads(capsys.readouterr().out)["devices"].values()
    assert ";" not in str(device)


def test_replay_notes_name_one_recording_and_count_many(tmp_path, capsys, monkeypatch):
    import numpy as np
    from test_recording import write_foreign

    monkeypatch.chdir(tmp_path)
    raw = (0.05 * np.random.default_rng(3).standard_normal(2 * 200_000)).astype("<f4")
    metas = [write_foreign(tmp_path, f"n{k}", "cf32_le", [{"core:sample_start": 0, "core:frequency": 98e6}], raw)
             for k in range(2)]
    band = ["--band", "custom:97.4-98.6:100", "--config", "x", "--skip-ms", "3"]
    assert main(["replay", str(metas[0]), "--db", "a.db", *band]) == 0
    out = capsys.readouterr().out.splitlines()
    assert "note: n0.sigmf-meta: first 3.00 ms of capture 0 skipped by hand" in out
    assert main(["replay", *map(str, metas), "--db", "b.db", *band]) == 0
    out = capsys.readouterr().out.splitlines()
    assert "note: 2 recordings: start-up samples left out of 2 captures (each sweep's notes say how much)" in out
    assert not any("n0.sigmf" in line or "n1.sigmf" in line for line in out)
    assert main(["replay", *map(str, metas), "--db", "c.db", *band, "--quiet"]) == 0
    assert capsys.readouterr().out.count("\n") == 1


def test_sweeps_without_the_antenna_count_no_stations(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["simulate", str(SCENE), "--db", "n.db", "--config", "bare", "--input", "noise-hot",
                 "--sweeps", "2", *SMALL]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-2] == "bare: 2 sweeps of noise-hot"
    assert out[-1] == "stored 2 sweeps (bare) in n.db: no antenna sweeps, so no stations counted"
