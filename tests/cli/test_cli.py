"""The command group itself: every error a user can make is one line, with a non-zero exit."""

import pytest
from click.testing import CliRunner

from harmony.cli import COMMAND_MODULES, main


@pytest.mark.parametrize(
    "args, needle",
    [
        (["nosuch"], "No such command 'nosuch'"),
        (["palette"], "Missing argument"),
        (["palette", "--colours", "x", "a.jpg"], "'--colours'"),
        (["feed", "--db", "x.db"], "Missing option '--out'"),
    ],
)
def test_usage_errors_are_one_line(args, needle):
    result = CliRunner().invoke(main, args)
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("error: ") and needle in lines[0]
    assert "Traceback" not in result.output


def test_help_and_version_exit_zero():
    runner = CliRunner()
    assert runner.invoke(main, ["--help"]).exit_code == 0
    version = runner.invoke(main, ["--version"])
    assert version.exit_code == 0 and "0.1.0" in version.output


def test_every_command_module_registers_a_command():
    names = set(main.commands)
    assert len(COMMAND_MODULES) == 12
    for expected in ("palette", "score", "rules", "extract", "palettes", "feed", "suggest",
                     "bundle", "evaluate", "tune", "report", "demo", "clicks", "serve"):
        assert expected in names
