"""The ``bandcensus`` console command: a thin click group over the library.

Each subcommand lives in its own module under :mod:`bandcensus.commands` and exposes a
``command`` attribute (a :class:`click.Command`); they are discovered here in name order and
imported only when run: ``--help`` lists them from the first line of each module's docstring,
read from the source file, so start-up does not pay for scipy.stats, pandas or matplotlib.
Errors of the library become one line ``Error: ...`` and exit code 1 (a traceback only with
``--debug``); bad usage exits 2.
"""

from __future__ import annotations

import importlib
import pkgutil
import re
import signal
import sqlite3
import sys
import threading
import time
import traceback
from pathlib import Path
from typing import Sequence

import click

from analysis.errors import AnalysisError
from bandcensus import __version__
from bandcensus.commands._common import finite_float_options
from survey.errors import SurveyError
from survey.text import plain_text

import bandcensus.commands as _commands_pkg


class _Group(click.Group):
    """Click group that loads subcommands from :mod:`bandcensus.commands`."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        names = []
        for info in pkgutil.iter_modules(_commands_pkg.__path__):
            if not info.name.startswith("_"):
                names.append(info.name.replace("_", "-"))
        return sorted(names)

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        module_name = name.replace("-", "_")
        if name.startswith("_") or module_name not in {i.name for i in pkgutil.iter_modules(_commands_pkg.__path__)}:
            return None
        module = importlib.import_module(f"bandcensus.commands.{module_name}")
        return finite_float_options(getattr(module, "command"))

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        """The command list of ``--help``, from module docstrings (no command module imported)."""
        rows = [(name, _summary(name.replace("-", "_"))) for name in self.list_commands(ctx)]
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)


_SUMMARY = re.compile(r'^\s*(?:[rR])?(?:"""|\'\'\')\s*(?:``bandcensus [\w-]+``:\s*)?(.*?)\s*(?:"""|\'\'\'|$)', re.M)


def _summary(module_name: str) -> str:
    """First line of a command module's docstring without its ``bandcensus NAME``: prefix."""
    for folder in _commands_pkg.__path__:
        try:
            with open(f"{folder}/{module_name}.py", encoding="utf-8") as fh:
                head = fh.read(2000)
        except OSError:
            continue
        found = _SUMMARY.search(head)
        if found:
            text = found.group(1).rstrip(".")
            return text[:1].upper() + text[1:] + "."
    return ""


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="bandcensus")
@click.option("--debug", is_flag=True, help="Show a full traceback when something fails.")
@click.pass_context
def cli(ctx: click.Context, debug: bool) -> None:
    """Logging measurement receiver for the FM broadcast band.

    Survey the band with a USB receiver (scan), replay SigMF recordings (replay) or a simulated
    scene (simulate) into an SQLite database, then analyse it: per-channel tables (channels),
    preamp A/B comparisons (compare), noise figures (noise), passbands (passband), faults
    (diagnose) and a one-file HTML report (report). Try 'bandcensus demo' first.
    """
    ctx.ensure_object(dict)
    ctx.obj["debug"] = debug


class _Terminated(KeyboardInterrupt):
    """SIGTERM outside a capture run (which handles it itself): unwind like Ctrl-C."""


def _raise_terminated(signum, frame) -> None:
    raise _Terminated()


_OUTPUT_SUFFIXES = (".html", ".htm", ".png", ".svg", ".pdf", ".csv", ".json")


def _output_paths(args: Sequence[str]) -> list[Path]:
    out = []
    for token in args:
        value = token.split("=", 1)[1] if token.startswith("--") and "=" in token else token
        if value.lower().endswith(_OUTPUT_SUFFIXES):
            out.append(Path(value))
    return out


def _remove_leftovers(args: Sequence[str], started: float) -> None:
    """After a failed or interrupted command: remove ``FILE.part`` files and empty output files
    it created (a figure or report cut off half-way), never a file older than the command."""
    for path in _output_paths(args):
        for candidate in (path.with_name(path.name + ".part"), path):
            try:
                st = candidate.stat()
            except OSError:
                continue
            if candidate.is_file() and st.st_mtime >= started - 1.0 and (candidate != path or st.st_size == 0):
                try:
                    candidate.unlink()
                except OSError:
                    pass


def _db_argument(args: Sequence[str]) -> str:
    for k, token in enumerate(args):
        if token == "--db" and k + 1 < len(args):
            return args[k + 1]
        if token.startswith("--db="):
            return token[5:]
    return "the database"


def _one_line(text: object) -> str:
    """A message on one line, without control characters (it may quote hostile input)."""
    line = " ".join(plain_text(" ".join(str(text).split())).split())
    return line if len(line) <= 400 else line[:397] + "..."


def _describe_failure(exc: BaseException, args: Sequence[str]) -> str:
    """The one-line text of a failure that reached the command line, with a remedy."""
    if isinstance(exc, (SurveyError, AnalysisError)):
        return str(exc)
    if isinstance(exc, sqlite3.DatabaseError):
        # imported here, on the failure path only: the store package pulls in numpy, which
        # listing the commands (--help) does not need
        from survey.store import open_error

        db = Path(_db_argument(args))
        return str(open_error(exc, db))
    if isinstance(exc, RecursionError):
        return ("input nested too deeply to read (e.g. JSON nested thousands of levels); "
                "check the file given")
    if isinstance(exc, MemoryError):
        return "not enough memory for this input; give a smaller recording, dwell or FFT size"
    if isinstance(exc, OSError):
        name = f" {exc.filename}" if getattr(exc, "filename", None) else ""
        return f"{exc.strerror or exc}{name}"
    return (f"unexpected {type(exc).__name__}: {exc}; this is a bandcensus bug, please report it "
            "with the output of --debug")


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 ok, 1 failure, 2 bad usage).

    This is the one error boundary: every failure becomes one line ``Error: ...`` (a traceback
    only with ``--debug``), and outputs cut off half-way are removed.
    """
    args = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in args
    started = time.time()
    previous = None
    if threading.current_thread() is threading.main_thread():
        previous = signal.signal(signal.SIGTERM, _raise_terminated)
    try:
        cli.main(args=args, prog_name="bandcensus", standalone_mode=False)
    except click.exceptions.Exit as exc:
        return int(exc.exit_code)
    except click.exceptions.Abort as exc:  # click turns KeyboardInterrupt into Abort
        _remove_leftovers(args, started)
        how = "SIGTERM" if isinstance(exc.__cause__, _Terminated) else "Ctrl-C"
        click.echo(f"Error: interrupted by {how}; nothing half-written was kept", err=True)
        return 1
    except click.ClickException as exc:
        exc.show()
        return int(exc.exit_code)
    except KeyboardInterrupt as exc:
        _remove_leftovers(args, started)
        how = "SIGTERM" if isinstance(exc, _Terminated) else "Ctrl-C"
        click.echo(f"Error: interrupted by {how}; nothing half-written was kept", err=True)
        return 1
    except Exception as exc:  # the boundary: one line, whatever failed
        _remove_leftovers(args, started)
        if debug:
            traceback.print_exc()
        click.echo(f"Error: {_one_line(_describe_failure(exc, args))}", err=True)
        return 1
    finally:
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
