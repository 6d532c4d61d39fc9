"""The CI rule of tests/conftest.py: under CI=true a skip of any kind is a failure (the project's rule: tests
never skip in CI), locally it stays a skip. Checked on a throw-away test folder run by a child pytest."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

CONFTEST = Path(__file__).with_name("conftest.py")
SKIPPING = '''
import pytest

pytest.importorskip("no_such_module_for_the_ci_rule")
'''
TESTS = '''
import pytest

def test_skips_at_run_time():
    pytest.skip("a tool is missing")

@pytest.mark.skip(reason="marked")
def test_marked_skip():
    pass

@pytest.fixture
def tool():
    pytest.skip("fixture finds no tool")

def test_skips_in_a_fixture(tool):
    pass

@pytest.mark.xfail(reason="known", strict=True)
def test_expected_failure():
    assert False

def test_passes():
    pass
'''


def _run(folder: Path, ci: str | None) -> str:
    env = {k: v for k, v in os.environ.items() if k != "CI"}
    if ci is not None:
        env["CI"] = ci
    env["PYTEST_DISABLE_PLUGIN_AUTOLOAD"] = "1"
    done = subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider",
                           "--continue-on-collection-errors",
                           str(folder)],
                          cwd=folder, env=env, capture_output=True, text=True, timeout=120)
    return done.stdout.strip().splitlines()[-1]


@pytest.fixture
def folder(tmp_path):
    (tmp_path / "conftest.py").write_text(CONFTEST.read_text(encoding="utf-8"), encoding="utf-8")
    (tmp_path / "test_a.py").write_text(TESTS, encoding="utf-8")
    (tmp_path / "test_b.py").write_text(SKIPPING, encoding="utf-8")
    return tmp_path


@pytest.mark.parametrize("ci", [None, "false"])
def test_a_skip_stays_a_skip_off_ci(folder, ci):
    assert _run(folder, ci).startswith("1 passed, 4 skipped, 1 xfailed")


def test_every_kind_of_skip_fails_in_ci(folder):
    summary = _run(folder, "true")
    # the skip in the test body fails; the ones in set-up (a skip marker, a fixture) and at collection
    # (importorskip; without --continue-on-collection-errors that stops the whole run) are errors; the expected
    # failure stays expected
    assert summary.startswith("1 failed, 1 passed, 1 xfailed, 3 errors"), summary
