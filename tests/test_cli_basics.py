"""Command-line conventions every subcommand follows: help text, exit codes, one-line errors."""

import pytest

from bandcensus.cli import cli, main


def _commands():
    return cli.list_commands(None)


def test_every_command_has_help(capsys):
    names = _commands()
    for expected in ("replay", "runs", "channels", "demo"):
        assert expected in names
    for name in names:
        assert main([name, "--help"]) == 0
        out = capsys.readouterr().out
        assert "Usage:" in out and len(out.strip().splitlines()) > 3, name
        command = cli.get_command(None, name)
        assert command.help and len(command.help) > 20, f"{name} lacks help text"


def test_version_and_unknown_command(capsys):
    assert main(["--version"]) == 0
    assert "bandcensus" in capsys.readouterr().out
    assert main(["no-such-command"]) == 2


def test_missing_database_is_one_line_error(tmp_path, capsys):
    code = main(["runs", "--db", str(tmp_path / "missing.db")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 1
    assert len(err) == 1 and err[0].startswith("Error: ") and "missing.db" in err[0]


def test_missing_required_option_is_usage_error(capsys):
    assert main(["runs"]) == 2
    assert "--db" in capsys.readouterr().err
