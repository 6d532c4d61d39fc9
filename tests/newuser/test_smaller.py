"""Smaller defects a new user met (CLI in subprocesses): messages that repeat or mislead, duds treated alike."""

from __future__ import annotations

import re
from pathlib import Path

from newuser_cli import assert_one_clear_error, run
from session_builder import demo_bag, write_session

ROOT = Path(__file__).resolve().parents[2]


def test_import_of_a_folder_that_does_not_exist_says_so(tmp_path):
    assert_one_clear_error(run("library", "import", tmp_path / "nope", "--library", tmp_path / "l.db"),
                           "no such folder")


def test_an_unknown_profile_is_named_once(tmp_path):
    text = (ROOT / "docs" / "examples" / "bench-resistor.toml").read_text()
    text = text.replace('profile = "generic-scpi-meter"', 'profile = "nope-meter"')
    (tmp_path / "b.toml").write_text(text)
    result = run("bench", "check", tmp_path / "b.toml")
    assert_one_clear_error(result, "instruments.meter.profile", "no profile named 'nope-meter'")
    assert result.stderr.count("key ") == 1


def test_duds_print_no_threshold_and_fit_skips_every_dud_alike(tmp_path):
    result = run("bag", "--sim", "--count", "3", "--sessions", tmp_path / "s")  # the seed-1 bag's Q03 is a dud
    assert result.returncode == 0, result.stderr
    duds = [line for line in result.stdout.splitlines() if re.match(r"Q\d+: (open|shorted|leaky|unstable),", line)]
    assert duds and all("VGS=" not in line and "no threshold" in line for line in duds)
    bag = demo_bag(3)
    bag[1].update(classification="shorted", reason="carries 250 mA with 12 mV across it")  # still has a curve
    bag[2].update(classification="open", reason="no current")
    session = write_session(tmp_path, "20261202-101500-bag", "bag", bag)
    result = run("fit", session)
    assert result.returncode == 0, result.stderr
    assert "Q01" in result.stdout and "Q02" not in result.stdout and "Q03" not in result.stdout
    assert "skipped Q02 (classified shorted)" in result.stderr and "skipped Q03 (classified open)" in result.stderr
