"""The CLI skeleton: `benchlab --help` and the help of every subcommand, at every level, are complete.

Complete means: each subcommand has a one-line help in its parent's list and a description in its own
``--help``, and every argument and option says what it is for. Walks the real parser, so a new option added
without help fails here.
"""

from __future__ import annotations

import argparse

import pytest

from benchlab import cli


def _walk(parser: argparse.ArgumentParser, path: tuple[str, ...]):
    """Yield ``(path, parser, subcommand help)`` for every subcommand below ``parser``."""
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            helps = {choice.dest: choice.help for choice in action._choices_actions}
            for name, sub in action.choices.items():
                yield path + (name,), sub, helps.get(name)
                yield from _walk(sub, path + (name,))


def _all_subcommands():
    return list(_walk(cli.build_parser(), ()))


def test_every_command_module_is_listed_in_top_level_help(capsys):
    with pytest.raises(SystemExit) as info:
        cli.main(["--help"])
    assert info.value.code == 0
    listed = capsys.readouterr().out
    for name in cli.COMMAND_MODULES:
        assert f"\n    {name} " in listed


def test_every_subcommand_has_help_and_description():
    found = _all_subcommands()
    assert len(found) > len(cli.COMMAND_MODULES)  # nested actions (parts add, export spice, ...) are walked too
    missing = [" ".join(path) for path, sub, short_help in found if not short_help or not sub.description]
    assert missing == []


def test_every_argument_says_what_it_is_for():
    missing = []
    for path, sub, _ in _all_subcommands():
        for action in sub._actions:
            if isinstance(action, (argparse._HelpAction, argparse._SubParsersAction)):
                continue
            if not action.help or action.help == argparse.SUPPRESS:
                missing.append(f"{' '.join(path)} {'/'.join(action.option_strings) or action.dest}")
    assert missing == []


@pytest.mark.parametrize("path", [path for path, _, _ in _all_subcommands()], ids=" ".join)
def test_each_subcommand_help_prints_and_exits_cleanly(path, capsys):
    with pytest.raises(SystemExit) as info:
        cli.main([*path, "--help"])
    assert info.value.code == 0
    out = capsys.readouterr().out
    assert out.startswith(f"usage: benchlab {' '.join(path)}")
