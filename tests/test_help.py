"""Every command has help text and appears in the README (issue 7 item 4)."""

from __future__ import annotations

import argparse
from pathlib import Path

import pytest

from budget.cli import build_parser, main

README = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")


def _commands(parser: argparse.ArgumentParser, prefix: str = ""):
    """(name, parser, help) of every leaf subcommand, nested ones as 'pump fit'."""
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            helps = {a.dest: a.help for a in action._choices_actions}
            for name, sub in action.choices.items():
                full = f"{prefix}{name}"
                nested = [a for a in sub._actions if isinstance(a, argparse._SubParsersAction)]
                if nested:
                    yield from _commands(sub, full + " ")
                else:
                    yield full, sub, helps.get(name)


COMMANDS = list(_commands(build_parser()))


def test_the_commands_the_issues_ask_for_exist():
    names = {c[0] for c in COMMANDS}
    assert {"run", "validate", "report", "explain", "compare", "pump fit", "identity create",
            "sign", "verify"} <= names


@pytest.mark.parametrize("name,sub,short", COMMANDS, ids=[c[0] for c in COMMANDS])
def test_command_has_help_and_is_in_readme(name, sub, short):
    # lengths are a floor against empty or placeholder text (a few words; a sentence), not a
    # style rule
    assert short and len(short) > 10, f"'{name}' has no one-line help"
    assert sub.description and len(sub.description) > 40, f"'{name}' has no description"
    for action in sub._actions:
        if action.dest != "help" and action.option_strings:
            assert action.help, f"option {action.option_strings} of '{name}' has no help"
    assert f"budget {name}" in README, f"'budget {name}' is not shown in the README"


@pytest.mark.parametrize("name", [c[0] for c in COMMANDS])
def test_help_exits_0(name, capsys):
    with pytest.raises(SystemExit) as info:
        main(name.split() + ["--help"])
    assert info.value.code == 0
    assert "usage: budget" in capsys.readouterr().out
