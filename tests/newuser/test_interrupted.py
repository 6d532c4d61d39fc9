"""A bag interrupted (Ctrl-C, SIGKILL) mid-part as a user would meet it: the part is 'interrupted', never a dud, never
imported; the resume command is printed; the resumed good sweep reaches the library; fit copes (CLI in subprocesses)."""

from __future__ import annotations

import json
import signal
import sqlite3
import time
from pathlib import Path

import pytest
from newuser_cli import assert_one_clear_error, run, start
from session_builder import demo_bag, write_session

from benchlab.library import Library


def _wait_for_points(root: Path, label: str, points: int, proc, timeout: float = 60.0) -> Path:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        assert proc.poll() is None, proc.communicate()
        for csv_path in root.glob(f"*/{label}.csv"):
            if csv_path.read_text().count("\n") > points:
                return csv_path.parent
        time.sleep(0.05)
    raise AssertionError(f"{label} never reached {points} points")


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGKILL])
def test_interrupted_part_is_never_a_dud_and_its_resumed_sweep_reaches_the_library(tmp_path, sig):
    sessions, db = tmp_path / "sessions", tmp_path / "lib.db"
    # real-time simulator so the signal lands inside Q02's sweep
    proc = start("bag", "--sim", "--lot", "cc", "--count", "3", "--sim-time-scale", "0.5", "--sessions", sessions)
    session = _wait_for_points(sessions, "Q02", 4, proc)
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode != 0
    sidecar = json.loads((session / "Q02.json").read_text())
    assert sidecar["complete"] is False
    if sig == signal.SIGINT:
        assert sidecar["classification"] == "interrupted"  # was 'open' / 'unstable' for a good part
        assert "Traceback" not in err
        # the exact command that finishes the bag, naming the part
        assert "Q02" in err and f"benchlab bag --resume {session} --sim" in err

    # import: Q01 in, Q02 neither imported nor rejected
    result = run("library", "import", session, "--library", db)
    assert result.returncode == 0, result.stderr
    assert "interrupted sweep, not imported" in result.stdout
    with Library.open(db) as lib:
        assert [p.label for p in lib.parts(state=None)] == ["Q01"]
    # fit of the whole session fits the finished part and names the interrupted one (was: exit 2, nothing printed;
    # after a SIGKILL sometimes a KeyError traceback)
    result = run("fit", session)
    assert result.returncode == 0 and "Traceback" not in result.stderr
    assert "Q01" in result.stdout and "skipped Q02" in result.stderr and "--resume" in result.stderr

    result = run("bag", "--resume", session, "--sim")
    assert result.returncode == 0, result.stderr
    assert json.loads((session / "Q02.json").read_text())["classification"] == "good"
    result = run("library", "import", session, "--library", db)
    assert result.returncode == 0, result.stderr
    with Library.open(db) as lib:
        parts = {p.label: p for p in lib.parts(state=None)}
        assert sorted(parts) == ["Q01", "Q02", "Q03"]
        assert parts["Q02"].state == "in_stock" and parts["Q02"].params is not None
        assert len(lib.sweeps("Q02")) == 1  # the complete sweep only
    conn = sqlite3.connect(db)
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"  # SQLite documentation: "ok" when intact
    if sig == signal.SIGKILL:
        return
    # a finished session says so, and --sessions with --resume is refused (it was silently ignored)
    result = run("bag", "--resume", session, "--sim")
    assert result.returncode == 0 and "session already complete" in result.stdout
    assert_one_clear_error(run("bag", "--resume", session, "--sim", "--sessions", tmp_path / "x"), "--sessions")


def test_reimport_replaces_an_interrupted_sweep_an_older_benchlab_stored_as_a_dud(tmp_path):
    db = tmp_path / "lib.db"
    session = write_session(tmp_path, "20261202-101500-cc", "cc", demo_bag(2))
    sidecar_path = session / "Q02.json"
    good = json.loads(sidecar_path.read_text())
    # what an older benchlab wrote and imported for a good part stopped by Ctrl-C: complete, 'open', rejected
    old = dict(good, classification="open", reason="no current above 50 uA (sweep interrupted: Ctrl-C)",
               started="2026-12-02T10:16:00+00:00")
    sidecar_path.write_text(json.dumps(old))
    assert run("library", "import", session, "--library", db).returncode == 0
    with Library.open(db) as lib:
        assert lib.get_part("Q02").state == "rejected"
    # the resumed sweep (same session, same label, a later start)
    sidecar_path.write_text(json.dumps(dict(good, started="2026-12-02T10:25:00+00:00")))
    result = run("library", "import", session, "--library", db)
    assert result.returncode == 0, result.stderr
    with Library.open(db) as lib:
        part = lib.get_part("Q02")
        assert part.state == "in_stock" and part.classification == "good" and part.params is not None
        assert "replaces the interrupted sweep" in lib.history(part)[-1]["reason"]
        assert lib.get_part("Q01").state == "in_stock" and len(lib.sweeps("Q01")) == 1  # Q01 skipped as imported
    # and a third import changes nothing
    result = run("library", "import", session, "--library", db)
    assert "0 fitted" in result.stdout
