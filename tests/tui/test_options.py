"""``benchlab ui`` options: checked and completed before the app starts (no app, no bench)."""

from __future__ import annotations

from benchlab.cli import build_parser
from benchlab.commands.ui import options_from


def test_operator_defaults_to_the_login_name_as_for_sweep_and_bag(monkeypatch):
    # Python's getpass.getuser() takes the login name from LOGNAME first (Python library docs)
    monkeypatch.setenv("LOGNAME", "ana-at-the-bench")
    assert options_from(build_parser().parse_args(["ui", "--sim"])).operator == "ana-at-the-bench"
    assert options_from(build_parser().parse_args(["ui", "--sim", "--operator", "kim"])).operator == "kim"


def test_the_help_names_every_view_with_its_key_and_the_burn_caution():
    # the help once named F1-F6 and six views while the app had a seventh (Thermal, F7)
    from benchlab.tui.app import VIEW_TITLES, VIEWS

    parser = build_parser()
    ui = parser._subparsers._group_actions[0].choices["ui"]
    text = ui.description
    assert f"F1-F{len(VIEWS)} switch views" in text
    for view in VIEWS:
        assert VIEW_TITLES[view] in text
    # the Thermal view heats parts: the usual caution (common practice)
    assert "hot enough to burn" in text and "cool before touching" in text
