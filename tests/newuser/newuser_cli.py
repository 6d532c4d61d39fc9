"""Run the ``benchlab`` CLI as a user would: a separate process, this checkout's code first on the path."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests" / "library"))  # session_builder


def env() -> dict:
    """The environment of a CLI run: this checkout first on PYTHONPATH, no colour, no library of the user's."""
    return {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""),
            "PYTHONUNBUFFERED": "1", "NO_COLOR": "1"}


def run(*args, cwd=None, timeout: float = 120, input: str | None = "") -> subprocess.CompletedProcess:
    """``benchlab ARGS`` in a subprocess; stdout and stderr as text; stdin empty unless ``input`` (a prompt meets
    the end of input at once instead of waiting for the test's terminal)."""
    return subprocess.run([sys.executable, "-m", "benchlab", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd, env=env(), timeout=timeout, input=input)


def start(*args, cwd=None) -> subprocess.Popen:
    """``benchlab ARGS`` started in the background (stdout/stderr piped), e.g. to interrupt it."""
    return subprocess.Popen([sys.executable, "-m", "benchlab", *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, cwd=cwd, env=env())


def interrupt(proc: subprocess.Popen) -> None:
    proc.send_signal(signal.SIGINT)


def assert_one_clear_error(result: subprocess.CompletedProcess, *needles: str) -> None:
    """Non-zero exit, no traceback, a message in stderr that names each of ``needles``."""
    assert result.returncode != 0, result.stdout + result.stderr
    assert "Traceback" not in result.stderr, result.stderr
    for needle in needles:
        assert needle in result.stderr, result.stderr
