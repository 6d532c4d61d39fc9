"""The README's test command runs without warnings of its own: a new user's first run printed a
PytestDeprecationWarning from pytest-asyncio (the fixture loop scope was unset) before any test."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_collecting_the_suite_prints_no_deprecation_warning():
    run = subprocess.run([sys.executable, "-m", "pytest", "--co", "-p", "no:cacheprovider",
                          "tests/test_units.py"], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "DeprecationWarning" not in run.stdout + run.stderr  # (pytest 9.2 prints it, 9.0 does not)
    assert "asyncio_default_fixture_loop_scope=function" in run.stdout  # the plugin's header: the scope is set
