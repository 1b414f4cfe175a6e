"""The command line's one error boundary: every failure is one line ``Error: ...`` with the
file or option and a remedy, never a traceback; numbers are finite; labels are shown as stored.

One test per case of bad input met in trials: damaged database pages, rich markup and control
characters in labels, mathtext in plot titles, NaN/inf/huge option values, recordings with
out-of-calendar times, absurd metadata numbers or deeply nested JSON, a binary scene file,
another program's database, locks, read-only files and missing folders.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import sqlite3
from pathlib import Path

import pytest

from bandcensus.cli import _remove_leftovers, cli, main
from bandcensus.commands._common import FiniteFloat
from survey.errors import StoreError
from survey.store import APPLICATION_ID, SurveyStore, open_error

ROOT = Path(__file__).resolve().parents[1]
SCENE = ROOT / "recordings_demo" / "quorrelby_hill.toml"
DEMO = sorted((ROOT / "recordings_demo" / "sigmf").glob("*.sigmf-meta"))
BAND = "custom:88-90:100"


def _one_error_line(capsys, code, expected_code=1) -> str:
    cap = capsys.readouterr()
    assert code == expected_code, cap.err
    assert "Traceback" not in cap.err
    errors = [line for line in cap.err.splitlines() if line.startswith("Error:")]
    assert len(errors) == 1, cap.err
    if expected_code == 1:
        assert cap.err.strip() == errors[0]  # nothing but the one line
    return errors[0]


@pytest.fixture
def two_labels_db(tmp_path):
    db = tmp_path / "two.db"
    assert main(["replay", str(DEMO[0]), "--db", str(db), "--quiet", "--config", "bare"]) == 0
    assert main(["replay", str(DEMO[1]), "--db", str(db), "--quiet", "--config", "preamp"]) == 0
    return db


def _damage(db: Path) -> None:
    conn = sqlite3.connect(db)
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    page, count = conn.execute("PRAGMA page_size").fetchone()[0], conn.execute("PRAGMA page_count").fetchone()[0]
    conn.close()
    data = bytearray(db.read_bytes())
    for k in range(2, count, 2):  # b-tree page headers overwritten with nonsense
        data[k * page:k * page + 12] = b"\x0d" + b"\xff" * 11
    db.write_bytes(bytes(data))


@pytest.mark.parametrize("args", [
    ["channels"],
    ["compare", "--base", "bare", "--test", "preamp"],
    ["report", "--base", "bare", "--test", "preamp", "--out", "{tmp}/r.html"],
    ["runs"],
])
def test_damaged_database_pages(two_labels_db, tmp_path, capsys, args):
    _damage(two_labels_db)
    capsys.readouterr()
    args = [a.replace("{tmp}", str(tmp_path)) for a in args]
    line = _one_error_line(capsys, main([args[0], "--db", str(two_labels_db), *args[1:]]))
    assert "is damaged" in line and str(two_labels_db) in line and ".recover" in line
    assert not list(tmp_path.glob("r.html*"))


def test_markup_and_control_characters_in_labels_are_shown_as_stored(tmp_path, capsys):
    db = tmp_path / "l.db"
    label = "[/]"
    styled = "\x1b[31m[bold red]X[/bold red]\x07"
    assert main(["replay", str(DEMO[0]), "--db", str(db), "--quiet", "--config", label]) == 0
    assert main(["replay", str(DEMO[1]), "--db", str(db), "--quiet", "--config", styled]) == 0
    capsys.readouterr()
    assert main(["runs", "--db", str(db)]) == 0
    out = capsys.readouterr().out
    assert "[/]" in out and "?[31m[bold red]X[/bold red]?" in out  # verbatim text, no styling
    assert "\x1b" not in out and "\x07" not in out
    conn = sqlite3.connect(db)  # stored verbatim
    stored = {r[0] for r in conn.execute("SELECT configuration FROM sweeps")}
    conn.close()
    assert stored == {label, styled}


def test_mathtext_in_a_plot_title_is_drawn_literally(tmp_path, capsys):
    db = tmp_path / "m.db"
    odd = r"$\undefinedcmd{x}$"
    assert main(["replay", str(DEMO[0]), "--db", str(db), "--quiet", "--config", "bare"]) == 0
    assert main(["replay", str(DEMO[1]), "--db", str(db), "--quiet", "--config", odd]) == 0
    png = tmp_path / "c.png"
    assert main(["compare", "--db", str(db), "--base", "bare", "--test", odd, "--plot", str(png)]) == 0
    assert png.stat().st_size > 1000


def test_plot_label_escapes_dollars():
    from survey.text import plain_text, plot_label, terminal_label

    assert plot_label(r"$\undefinedcmd{x}$") == r"\$\undefinedcmd{x}\$"
    assert plain_text("a\x1b[2Jb\x9bc\td") == "a?[2Jb?c?d"
    assert terminal_label("[/]") == r"\[/]"


@pytest.mark.parametrize("value", ["nan", "inf", "-inf", "1e9"])
def test_dwell_not_finite_or_huge(tmp_path, capsys, value):
    code = main(["simulate", str(SCENE), "--db", str(tmp_path / "d.db"), "--config", "bare",
                 "--dwell-ms", value])
    assert "--dwell-ms" in _one_error_line(capsys, code, 2)
    assert not (tmp_path / "d.db").exists()


@pytest.mark.parametrize("option,value", [("--seed", "-1"), ("--seed", "1e23"),
                                          ("--seed", str(10**23)), ("--every", "9" * 400 + "s")])
def test_simulate_numbers_out_of_range(tmp_path, capsys, option, value):
    code = main(["simulate", str(SCENE), "--db", str(tmp_path / "d.db"), "--config", "bare", option, value])
    line = _one_error_line(capsys, code, 2)
    assert option in line and len(line) < 200


@pytest.mark.parametrize("option,value", [("--ppm", "1e23"), ("--ppm", str(10**23)), ("--every", "9" * 300 + "h"),
                                          ("--for", "9" * 300 + "h"), ("--stall-timeout-s", "nan"),
                                          ("--gain-db", "nan"), ("--sample-rate", "inf")])
def test_scan_numbers_out_of_range(tmp_path, capsys, option, value):
    code = main(["scan", "--db", str(tmp_path / "d.db"), "--config", "bare", "--simulate-scene", str(SCENE),
                 "--band", BAND, option, value])
    line = _one_error_line(capsys, code, 2)
    assert option in line and len(line) < 200
    assert not (tmp_path / "d.db").exists()


def test_compare_min_change_nan(two_labels_db, capsys):
    code = main(["compare", "--db", str(two_labels_db), "--base", "bare", "--test", "preamp",
                 "--min-change-db", "nan"])
    assert "--min-change-db" in _one_error_line(capsys, code, 2)


def test_every_float_option_of_every_command_is_finite():
    for name in cli.list_commands(None):
        command = cli.get_command(None, name)
        for param in command.params:
            assert not isinstance(param.type, (type(__import__("click").FLOAT), __import__("click").FloatRange)) \
                or isinstance(param.type, FiniteFloat), (name, param.name)
    with pytest.raises(Exception, match="not a finite"):
        FiniteFloat(0.0).convert("nan", None, None)
    assert FiniteFloat(0.0, 1.0).convert("0.5", None, None) == 0.5


def _bad_recording(tmp_path: Path, name: str, change) -> Path:
    meta = json.loads(DEMO[0].read_text())
    meta["global"].pop("core:sha512", None)
    change(meta)
    out = tmp_path / f"{name}.sigmf-meta"
    out.write_text(json.dumps(meta))
    shutil.copy(DEMO[0].with_suffix(".sigmf-data"), tmp_path / f"{name}.sigmf-data")
    return out


@pytest.mark.parametrize("name,change,text", [
    ("year9999", lambda m: m["captures"][-1].__setitem__("core:datetime", "9999-12-31T23:59:59.999Z"),
     "outside the calendar"),
    ("ppm", lambda m: m["global"].__setitem__("bandcensus:ppm", 10**30), "bandcensus:ppm"),
    ("seed", lambda m: m["global"].__setitem__("bandcensus:seed", 10**30), "bandcensus:seed"),
    ("ppmfloat", lambda m: m["global"].__setitem__("bandcensus:ppm", 1e30), "bandcensus:ppm"),
])
def test_bad_recording_metadata(tmp_path, capsys, name, change, text):
    meta = _bad_recording(tmp_path, name, change)
    db = tmp_path / "r.db"
    line = _one_error_line(capsys, main(["replay", str(meta), "--db", str(db), "--quiet"]))
    assert text in line and str(meta) in line
    assert not db.exists()  # refused before the database was created


def test_json_nested_200000_deep(tmp_path, capsys):
    meta = tmp_path / "deep.sigmf-meta"
    meta.write_text('{"global":' + "[" * 200_000 + "]" * 200_000 + "}")
    shutil.copy(DEMO[0].with_suffix(".sigmf-data"), tmp_path / "deep.sigmf-data")
    line = _one_error_line(capsys, main(["replay", str(meta), "--db", str(tmp_path / "r.db")]))
    assert "nested too deeply" in line and str(meta) in line


def test_binary_file_as_scene(tmp_path, capsys):
    scene = tmp_path / "scene.toml"
    scene.write_bytes(bytes(range(256)) * 20)
    line = _one_error_line(capsys, main(["simulate", str(scene), "--db", str(tmp_path / "s.db"),
                                         "--config", "bare"]))
    assert "not a text scene file" in line and str(scene) in line


def test_another_programs_database_is_left_untouched(tmp_path, capsys):
    other = tmp_path / "other.db"
    conn = sqlite3.connect(other)
    conn.execute("CREATE TABLE runs (id INTEGER PRIMARY KEY, who TEXT)")
    conn.execute("INSERT INTO runs (who) VALUES ('someone')")
    conn.commit()
    conn.close()
    before = hashlib.sha256(other.read_bytes()).hexdigest()
    line = _one_error_line(capsys, main(["replay", str(DEMO[0]), "--db", str(other), "--quiet", "--fft-size", "512"]))
    assert "another program" in line and "untouched" in line
    assert hashlib.sha256(other.read_bytes()).hexdigest() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["other.db"]  # no -wal, no -shm
    conn = sqlite3.connect(other)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == 0
    conn.close()


def test_application_id_set_on_create_and_older_databases_still_open(tmp_path):
    db = tmp_path / "ours.db"
    SurveyStore(db).close()
    conn = sqlite3.connect(db)
    assert conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    conn.execute("PRAGMA application_id = 0")  # as written before the marker existed
    conn.commit()
    conn.close()
    store = SurveyStore(db)  # v1 tables + user_version: ours
    assert store.conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    store.close()
    conn = sqlite3.connect(db)
    conn.execute("PRAGMA application_id = 7")  # another program's marker
    conn.commit()
    conn.close()
    with pytest.raises(StoreError, match="another program"):
        SurveyStore(db)


def test_missing_folder_lock_and_read_only_each_have_their_own_message(tmp_path):
    with pytest.raises(StoreError, match="folder .* does not exist"):
        SurveyStore(tmp_path / "no" / "such" / "s.db")
    db = tmp_path / "s.db"
    SurveyStore(db).close()
    holder = sqlite3.connect(db, isolation_level=None)
    holder.execute("PRAGMA locking_mode = EXCLUSIVE")
    holder.execute("BEGIN EXCLUSIVE")
    try:
        with pytest.raises(StoreError, match="locked by another program"):
            SurveyStore(db, busy_timeout_s=0.05)
    finally:
        holder.execute("COMMIT")
        holder.close()
    # read-only media cannot be mounted in a test; the message for SQLite's own error text:
    text = str(open_error(sqlite3.OperationalError("attempt to write a readonly database"), db))
    assert "read-only" in text and "not a bandcensus" not in text
    if os.geteuid() != 0:  # root may write anyway
        os.chmod(db, 0o444)
        try:
            with pytest.raises(StoreError, match="read-only"):
                SurveyStore(db)
        finally:
            os.chmod(db, 0o644)


def test_unexpected_failure_is_one_line(tmp_path, capsys, monkeypatch):
    import bandcensus.commands.runs as runs_cmd

    def boom(conn):
        raise ValueError("something odd\nwith a second line")

    monkeypatch.setattr(runs_cmd, "list_runs", boom)
    db = tmp_path / "u.db"
    SurveyStore(db).close()
    line = _one_error_line(capsys, main(["runs", "--db", str(db)]))
    assert "unexpected ValueError: something odd with a second line" in line


def test_leftovers_of_a_cut_off_output_are_removed(tmp_path):
    import time

    started = time.time()
    report, part, empty_png, old_png = (tmp_path / n for n in ("r.html", "r.html.part", "f.png", "old.png"))
    part.write_text("<html>half")
    empty_png.write_bytes(b"")
    old_png.write_bytes(b"")
    os.utime(old_png, (started - 3600, started - 3600))
    _remove_leftovers(["report", "--out", str(report), "--plot", str(empty_png), f"--x={old_png}"], started)
    assert not part.exists() and not empty_png.exists() and old_png.exists()


def test_html_label_escapes_and_drops_controls():
    from survey.text import html_label

    assert html_label('<b a="1">\x1b[31m</b>\nx') == "&lt;b a=&quot;1&quot;&gt;?[31m&lt;/b&gt;\nx"
