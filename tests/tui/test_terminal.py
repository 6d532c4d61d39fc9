"""``benchlab ui --sim`` in a real terminal (tmux): first screen, one part swept by keys, quit, output off."""

from __future__ import annotations

import json
import os
import shlex
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def _tmux(socket: str, *args: str) -> str:
    return subprocess.run(["tmux", "-L", socket, "-f", "/dev/null", *args], check=True, capture_output=True, text=True).stdout


def _wait_for(socket: str, needle: str, timeout_s: float = 40.0) -> str:
    deadline = time.monotonic() + timeout_s
    screen = ""
    while time.monotonic() < deadline:
        screen = _tmux(socket, "capture-pane", "-p", "-t", "ui")
        if needle in screen:
            return screen
        time.sleep(0.2)
    pytest.fail(f"'{needle}' never appeared on the terminal; last screen:\n{screen}")


def _running(pid: int) -> bool:
    """True while the process runs; a zombie (exited, not yet reaped by a parent that may never wait) is gone."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return False
    return stat.rsplit(")", 1)[1].split()[0] not in ("Z", "X")


@pytest.fixture
def tmux_socket():
    if shutil.which("tmux") is None:
        if os.environ.get("CI"):
            pytest.fail("tmux is required in CI (.ci/run installs it)")
        pytest.skip("tmux not installed")
    # one server per test: a name reused right after the last test's kill-server can meet that server exiting
    # ("server exited unexpectedly")
    socket = f"benchlab-test-{os.getpid()}-{time.monotonic_ns()}"
    yield socket
    subprocess.run(["tmux", "-L", socket, "kill-server"], capture_output=True)


def test_ui_sweeps_a_part_in_tmux_and_quits_with_the_output_off(tmp_path, tmux_socket):
    log = tmp_path / "sim.jsonl"
    done = tmp_path / "exit-code"
    command = [sys.executable, "-m", "benchlab", "ui", "--sim", "--sim-log", str(log), "--library",
               str(tmp_path / "lib.db"), "--sessions", str(tmp_path / "sessions"), "--points", "12"]
    shell = (f"unset COLUMNS LINES; cd {shlex.quote(str(tmp_path))} && PYTHONPATH={shlex.quote(str(ROOT))} TERM=xterm-256color "
             f"{shlex.join(command)}; echo $? > {shlex.quote(str(done))}; sleep 30")
    _tmux(tmux_socket, "new-session", "-d", "-s", "ui", "-x", "150", "-y", "46", shell)
    _wait_for(tmux_socket, "connected to the simulated bench")
    _tmux(tmux_socket, "send-keys", "-t", "ui", "F2")
    _wait_for(tmux_socket, "Acceptance window")
    _tmux(tmux_socket, "send-keys", "-t", "ui", "Escape")  # leave any text field, then run
    time.sleep(0.3)
    _tmux(tmux_socket, "send-keys", "-t", "ui", "r")
    screen = _wait_for(tmux_socket, "a accept, t retest, x reject")
    assert "Q01" in screen and ("PASS" in screen or "FAIL" in screen)
    _tmux(tmux_socket, "send-keys", "-t", "ui", "C-q")
    deadline = time.monotonic() + 30
    while not done.exists() and time.monotonic() < deadline:
        time.sleep(0.2)
    assert done.read_text().strip() == "0"
    outputs = [json.loads(line) for line in log.read_text().splitlines()]
    changes = [e["text"] for e in outputs if e.get("kind") == "output"]
    assert changes and changes[-1] == "OFF" and "ON" in changes  # swept, and left off (the simulator's own log)
    assert list((tmp_path / "sessions").glob("*/Q01.csv"))


@pytest.mark.parametrize("how", ["SIGTERM", "terminal closed (SIGHUP)"])
def test_ui_stopped_mid_sweep_by_a_signal_leaves_the_output_off(tmp_path, tmux_socket, how):
    import signal

    log = tmp_path / "sim.jsonl"
    command = [sys.executable, "-m", "benchlab", "ui", "--sim", "--sim-log", str(log), "--library",
               str(tmp_path / "lib.db"), "--sessions", str(tmp_path / "sessions"), "--points", "80",
               "--sim-time-scale", "1", "--sim-fault", "slow=0.02"]
    shell = (f"unset COLUMNS LINES; cd {shlex.quote(str(tmp_path))} && PYTHONPATH={shlex.quote(str(ROOT))} "
             f"TERM=xterm-256color exec {shlex.join(command)}")
    _tmux(tmux_socket, "new-session", "-d", "-s", "ui", "-x", "150", "-y", "46", shell)
    _wait_for(tmux_socket, "connected to the simulated bench")
    pid = int(_tmux(tmux_socket, "display", "-p", "-t", "ui", "#{pane_pid}").strip())  # exec: the pane runs benchlab
    _tmux(tmux_socket, "send-keys", "-t", "ui", "F2")
    _wait_for(tmux_socket, "Acceptance window")
    _tmux(tmux_socket, "send-keys", "-t", "ui", "Escape")
    time.sleep(0.3)
    _tmux(tmux_socket, "send-keys", "-t", "ui", "r")
    _wait_for(tmux_socket, "SWEEPING")
    time.sleep(1.0)
    if how == "SIGTERM":
        os.kill(pid, signal.SIGTERM)
    else:
        _tmux(tmux_socket, "kill-session", "-t", "ui")  # the terminal goes away: the process gets SIGHUP
    deadline = time.monotonic() + 30
    while _running(pid) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert not _running(pid)
    changes = [json.loads(line)["text"] for line in log.read_text().splitlines()
               if json.loads(line).get("kind") == "output"]
    assert "ON" in changes and changes[-1] == "OFF"  # it was sweeping, and the simulator saw the output go off
    sidecar = json.loads(next((tmp_path / "sessions").glob("*/Q01.json")).read_text())
    assert sidecar["complete"] is False and Path(next((tmp_path / "sessions").glob("*/Q01.csv"))).read_text()
