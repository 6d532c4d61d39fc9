"""Shared CLI argument helpers: the same refusal wherever a count or the library option is taken."""

from __future__ import annotations

import pytest

from benchlab.cli import build_parser, main


@pytest.mark.parametrize("argv", [["fit", "x.csv", "--bootstrap", "-1"], ["fit", "x.csv", "--curve", "two"],
                                  ["design", "match", "--at-current", "0.02", "--outputs", "-3"],
                                  ["design", "sink", "--supply", "12", "--at-current", "0.02", "--monte-carlo", "1.5"]])
def test_bad_counts_are_refused_before_anything_runs(argv, tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "whole number" in err or "0 or more" in err or "1 or more" in err
    assert list(tmp_path.iterdir()) == []  # nothing written


@pytest.mark.parametrize("command", [["parts", "list"], ["library", "info"], ["export", "json"],
                                     ["report", "--lot", "x", "--out", "o"], ["design", "bin", "--at-current", "1",
                                                                                 "--width", "0.1"]])
def test_every_library_command_takes_the_library_option(command):
    args = build_parser().parse_args([*command, "--library", "/tmp/somewhere.db"])
    assert args.library == "/tmp/somewhere.db"
