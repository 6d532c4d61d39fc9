"""Signals in a real process: SIGKILL keeps the CSV intact, SIGTERM / Ctrl-C leave the output off."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from benchlab.sim.log import BenchLog
from benchlab.sweep.session import read_sweep

ROOT = Path(__file__).resolve().parents[2]


def start_sweep(tmp_path: Path) -> tuple[subprocess.Popen, Path, Path]:
    """``benchlab sweep --sim`` in a child process, simulator at real time scale, logging to a file."""
    sessions, log = tmp_path / "sessions", tmp_path / "sim.jsonl"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    child = subprocess.Popen([sys.executable, "-m", "benchlab", "sweep", "--sim", "--part", "Q01", "--sessions",
                              str(sessions), "--sim-time-scale", "1", "--sim-log", str(log)],
                             cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    return child, sessions, log


def wait_for_points(child: subprocess.Popen, sessions: Path, count: int, timeout_s: float = 60.0) -> Path:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        for csv_path in sessions.glob("*/Q01.csv"):
            if len(csv_path.read_text().splitlines()) > count:
                return csv_path
        if child.poll() is not None:
            pytest.fail(f"the sweep ended early: {child.communicate()}")
        time.sleep(0.05)
    child.kill()
    pytest.fail("no points appeared")


def test_sigkill_mid_sweep_leaves_the_csv_intact_up_to_the_last_point(tmp_path):
    child, sessions, log_path = start_sweep(tmp_path)
    csv_path = wait_for_points(child, sessions, 6)
    child.send_signal(signal.SIGKILL)
    child.communicate(timeout=30)
    data = read_sweep(csv_path)
    # every point written before the kill is whole and in order; at most the point in flight is lost
    assert len(data.vgs) >= 6 and not data.truncated
    assert list(data.point) == list(range(len(data.point)))
    # the simulator (in the killed process) logged every setpoint the sweep applied, flushed per line:
    # each applied setpoint but the last has its point on disk, with that very setpoint
    commands = BenchLog.read_file(log_path).commands("supply")
    applied = [float(c.split()[1]) for c in commands[commands.index("OUTP ON") + 1:] if c.startswith("VOLT ")]
    assert len(applied) - 1 <= len(data.vgs) <= len(applied)
    assert list(data.v_source) == pytest.approx(applied[:len(data.vgs)], rel=1e-5, abs=1e-9)
    assert all(s in ("ok", "unsettled", "compliance", "over_range") for s in data.status)
    assert data.complete is False and data.meta["ended"] is None  # the sidecar still says "in progress"


# SIGHUP: the terminal window closed or the remote login dropped
@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT, signal.SIGHUP], ids=lambda s: signal.Signals(s).name)
def test_sigterm_and_ctrl_c_switch_the_output_off_and_mark_the_sweep_incomplete(tmp_path, sig):
    child, sessions, log_path = start_sweep(tmp_path)
    csv_path = wait_for_points(child, sessions, 4)
    child.send_signal(sig)
    _, err = child.communicate(timeout=30)
    assert child.returncode == 130
    log = BenchLog.read_file(log_path)  # written by the simulator inside the child, flushed per entry
    assert log.output_was_ever_on("supply") and log.last_output_state("supply") is False
    data = read_sweep(csv_path)
    assert data.complete is False and data.meta["ended"] and len(data.vgs) == data.meta["points"] >= 4
    assert err.strip().splitlines()[-1].startswith("benchlab: ")  # one line, no traceback
    assert "Traceback" not in err
