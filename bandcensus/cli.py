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
import sys
import traceback
from typing import Sequence

import click

from analysis.errors import AnalysisError
from bandcensus import __version__
from survey.errors import SurveyError

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
        return getattr(module, "command")

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


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 ok, 1 failure, 2 bad usage)."""
    args = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in args
    try:
        cli.main(args=args, prog_name="bandcensus", standalone_mode=False)
    except click.exceptions.Exit as exc:
        return int(exc.exit_code)
    except click.exceptions.Abort:
        click.echo("Aborted.", err=True)
        return 1
    except click.ClickException as exc:
        exc.show()
        return int(exc.exit_code)
    except (SurveyError, AnalysisError) as exc:
        if debug:
            traceback.print_exc()
        click.echo(f"Error: {exc}", err=True)
        return 1
    except KeyboardInterrupt:
        click.echo("Error: interrupted", err=True)
        return 1
    except OSError as exc:
        if debug:
            traceback.print_exc()
        name = f" {exc.filename}" if getattr(exc, "filename", None) else ""
        click.echo(f"Error: {exc.strerror or exc}{name}", err=True)
        return 1
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
