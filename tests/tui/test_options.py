"""``benchlab ui`` options: checked and completed before the app starts (no app, no bench)."""

from __future__ import annotations

from benchlab.cli import build_parser
from benchlab.commands.ui import options_from


def test_operator_defaults_to_the_login_name_as_for_sweep_and_bag(monkeypatch):
    # Python's getpass.getuser() takes the login name from LOGNAME first (Python library docs)
    monkeypatch.setenv("LOGNAME", "ana-at-the-bench")
    assert options_from(build_parser().parse_args(["ui", "--sim"])).operator == "ana-at-the-bench"
    assert options_from(build_parser().parse_args(["ui", "--sim", "--operator", "kim"])).operator == "kim"
