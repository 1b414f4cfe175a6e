"""Start-up stays light: listing the commands or the runs imports no heavy analysis library.

Each check runs in a fresh interpreter (``sys.executable``), so modules imported by other tests
cannot hide or fake an import. This is a behaviour check (which modules load), not a timing.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from survey.records import RunInfo
from survey.store import SurveyStore

ROOT = Path(__file__).resolve().parents[1]
HEAVY = ("pandas", "scipy.stats", "matplotlib", "sqlite_utils")

_PROBE = """
import contextlib, io, json, sys
from bandcensus.cli import main
out = io.StringIO()
with contextlib.redirect_stdout(out), contextlib.redirect_stderr(out):
    code = main(json.loads(sys.argv[1]))
heavy = [m for m in json.loads(sys.argv[2]) if m in sys.modules]
print(json.dumps({"code": code, "heavy": heavy, "text": out.getvalue()}))
"""


def _run(args: list[str], watched: tuple[str, ...] = HEAVY) -> dict:
    proc = subprocess.run([sys.executable, "-c", _PROBE, json.dumps(args), json.dumps(watched)],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


def test_help_lists_every_command_without_importing_them():
    result = _run(["--help"])
    assert result["code"] == 0
    assert result["heavy"] == []
    rows = result["text"].split("Commands:")[1].splitlines()
    listed = [line for line in rows if line.startswith("  ") and not line.startswith("   ")]  # not wrapped parts
    from bandcensus.cli import cli

    names = cli.list_commands(None)
    assert [line.split()[0] for line in listed] == names
    for line, name in zip(listed, names):
        # the one-line help comes from the module docstring, without its "bandcensus NAME:" prefix
        summary = line.split(None, 1)[1]
        assert len(summary) > 15 and "bandcensus" not in summary and summary[0].isupper(), line


def test_runs_imports_no_analysis_library(tmp_path):
    db = tmp_path / "s.db"
    with SurveyStore(db) as store:
        store.begin_run(RunInfo(source_kind="simulated", device="sim", tool_version="0", settings={}))
    result = _run(["runs", "--db", str(db)])
    assert result["code"] == 0 and "simulated" in result["text"]
    assert result["heavy"] == []


def test_the_probe_does_see_an_import():
    # the same probe, watching a module this command does load (the command-line library) and one
    # it does not: an empty list above therefore means something
    result = _run(["--help"], watched=("click", "matplotlib"))
    assert result["code"] == 0 and result["heavy"] == ["click"]
