"""The command line entry point: --help, --version, banner."""

import pytest

from shapedesc import __version__
from shapedesc.cli.main import COMMANDS, main


def test_version(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    assert __version__ in capsys.readouterr().out


def test_help_lists_registered_commands_only(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--help"])
    assert exc.value.code == 0
    out = capsys.readouterr().out
    assert "Research use only" in out
    for name in COMMANDS:
        assert name in out


def test_no_command_prints_help_and_fails(capsys):
    assert main([]) == 2
