"""Every command says what each of its arguments is for, and the command says its version."""

from __future__ import annotations

import argparse
from importlib import metadata

import pytest

from windvane.cli.main import _parser, main


def test_every_argument_of_every_command_has_help() -> None:
    parser = _parser()
    commands = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    assert len(commands.choices) >= 12
    silent = [
        f"{name} {action.option_strings or action.dest}"
        for name, command in commands.choices.items()
        for action in command._actions
        if not action.help and not isinstance(action, argparse._HelpAction)
    ]
    assert silent == []


def test_version_is_the_installed_one(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as done:
        main(["--version"])
    assert done.value.code == 0
    assert capsys.readouterr().out.strip() == f"windvane {metadata.version('windvane')}"
