"""Crafted session and import files, and names outside the rule, on every way in and out (CLI in a subprocess).

Each test reproduces a probe with crafted files: path traversal from session files, labels that inject lines into
SPICE or break tables, spreadsheet formulas in CSV exports, a trailing newline passing the name check.
"""

from __future__ import annotations

import csv
import io
import json
import re
import sqlite3
from pathlib import Path

import pytest
from newuser_cli import assert_one_clear_error, run
from session_builder import demo_bag, write_session

from benchlab.names import csv_cell


def _victim(tmp_path: Path) -> tuple[Path, Path, str]:
    """A valid sweep record OUTSIDE the session folder (``victim/data.csv`` + ``.json``), and its sidecar text."""
    outside = write_session(tmp_path, "victim-src", "bag", demo_bag(1))
    victim = tmp_path / "victim"
    victim.mkdir()
    (victim / "data.csv").write_bytes((outside / "Q01.csv").read_bytes())
    (victim / "data.json").write_bytes((outside / "Q01.json").read_bytes())
    return victim / "data.csv", victim / "data.json", (victim / "data.json").read_text()


def _with_parts(session: Path, parts: list[str]) -> None:
    meta = json.loads((session / "session.json").read_text())
    meta["parts"] = parts
    (session / "session.json").write_text(json.dumps(meta))


def test_fit_save_never_follows_a_session_entry_out_of_its_folder(tmp_path):
    _, victim_json, before = _victim(tmp_path)
    session = write_session(tmp_path, "20261202-101500-bag", "bag", demo_bag(2))
    _with_parts(session, ["Q01", "../victim/data"])
    result = run("fit", "--save", session)
    assert_one_clear_error(result, "../victim/data", "part label")
    assert victim_json.read_text() == before  # the file outside was not rewritten
    assert json.loads((session / "Q01.json").read_text())["fits"][-1]["fitter_version"] == "stored"  # nor inside


def test_plain_fit_never_reads_a_csv_outside_the_session(tmp_path):
    (tmp_path / "outside.csv").write_text("vgs,id\n3.0,0.001\n3.1,0.002\n3.2,0.004\n3.3,0.006\n3.4,0.009\n")
    session = write_session(tmp_path / "s", "20261202-101500-bag", "bag", demo_bag(1))
    _with_parts(session, ["../../outside"])
    result = run("fit", session)
    assert_one_clear_error(result, "outside", "part label")
    assert "3.0" not in result.stdout


@pytest.mark.parametrize("label", ["Q1\n.include /tmp/evil.inc", "Q1\x00", "../Q1",
                                   pytest.param("Q" * 5000, id="5000-chars"), "Q1\n"])
def test_library_import_refuses_labels_outside_the_rule(tmp_path, label):
    session = write_session(tmp_path, "20261202-101500-bag", "bag", demo_bag(2))
    sidecar = json.loads((session / "Q02.json").read_text())
    sidecar["label"] = label
    (session / "Q02.json").write_text(json.dumps(sidecar))
    db = tmp_path / "lib.db"
    result = run("library", "import", session, "--library", db)
    assert_one_clear_error(result, "bad part label", "Q02.json")
    assert len(result.stderr.strip().splitlines()) == 1  # the newline in the label is shown escaped
    if db.exists():  # nothing was imported
        assert sqlite3.connect(db).execute("SELECT count(*) FROM parts").fetchone()[0] == 0


@pytest.mark.parametrize("lot", ["bag\n", " bag", "../bag", "a/b"])
def test_library_import_refuses_lots_outside_the_rule_from_the_file_and_the_option(tmp_path, lot):
    session = write_session(tmp_path, "20261202-101500-bag", "bag", demo_bag(2))
    db = tmp_path / "lib.db"
    result = run("library", "import", session, "--lot", lot, "--library", db)
    assert_one_clear_error(result, "bad lot name")
    meta = json.loads((session / "session.json").read_text())
    meta["lot"] = lot
    (session / "session.json").write_text(json.dumps(meta))
    for name in ("Q01.json", "Q02.json"):
        sidecar = json.loads((session / name).read_text())
        sidecar.pop("lot")
        (session / name).write_text(json.dumps(sidecar))
    result = run("library", "import", session, "--library", db)
    assert_one_clear_error(result, "bad lot name", "session.json")  # the file the lot is written in
    if db.exists():
        assert sqlite3.connect(db).execute("SELECT count(*) FROM parts").fetchone()[0] == 0


def test_reimporting_never_doubles_a_part(tmp_path):
    # a lot trimmed on import but not in the already-imported check added one more sweep and fit each time
    session = write_session(tmp_path, "20261202-101500-bag", "bag", demo_bag(2))
    db = tmp_path / "lib.db"
    for _ in range(2):
        assert run("library", "import", session, "--library", db).returncode == 0
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT count(*) FROM sweeps").fetchone()[0] == 2
    assert conn.execute("SELECT count(*) FROM fits").fetchone()[0] == 2


def test_trailing_newline_lot_is_refused_by_bag_and_creates_nothing(tmp_path):
    result = run("bag", "--sim", "--lot", "F\n", "--count", "1", "--sessions", tmp_path / "sessions")
    assert_one_clear_error(result, "bad lot name")
    assert not (tmp_path / "sessions").exists() or not any((tmp_path / "sessions").iterdir())


def test_parts_add_refuses_a_label_with_a_newline(tmp_path):
    db = tmp_path / "lib.db"
    result = run("parts", "add", "Q1\n.include /tmp/evil.inc", "--vth", "3", "--kp", "1", "--library", db)
    assert_one_clear_error(result, "bad part label")


def _legacy_library(tmp_path: Path, label: str, notes: str = "") -> Path:
    """A library holding ``label`` as an older benchlab could have stored it (before names were checked)."""
    db = tmp_path / "lib.db"
    result = run("parts", "add", "Q1", "--lot", "bag", "--vth", "3", "--kp", "1", "--notes", notes, "--library", db)
    assert result.returncode == 0, result.stderr
    conn = sqlite3.connect(db)
    conn.execute("UPDATE parts SET label = ? WHERE label = 'Q1'", (label,))
    conn.commit()
    conn.close()
    return db


def test_spice_export_never_turns_a_stored_label_into_a_live_line(tmp_path):
    label = "Q1\n.include /tmp/evil.inc\n*"
    db = _legacy_library(tmp_path, label)
    result = run("export", "spice", "bag/" + label, "--library", db)
    assert result.returncode == 0, result.stderr
    # SPICE reads every line not starting with '*' as part of the deck (ngspice manual, "comments")
    live = [line for line in result.stdout.splitlines() if line.strip() and not line.startswith("*")]
    assert len(live) == 1 and live[0].startswith(".model ")
    assert not any(line.lstrip().lower().startswith(".include") for line in result.stdout.splitlines())


def test_csv_export_neutralizes_formulas_and_keeps_one_row_per_part(tmp_path):
    db = _legacy_library(tmp_path, '=HYPERLINK("http://198.51.100.7/x","click")', notes="+1+cmd|' /C calc'!A0")
    result = run("export", "csv", "--state", "all", "--library", db)
    assert result.returncode == 0, result.stderr
    rows = list(csv.DictReader(io.StringIO(result.stdout)))
    assert len(rows) == 1
    # cells starting with = + - @ are prefixed with an apostrophe so a spreadsheet shows them as text (common practice)
    assert rows[0]["label"].startswith("'=") and rows[0]["notes"].startswith("'+")
    assert float(rows[0]["vth"]) == 3.0
    assert csv_cell("-0.5") == "-0.5" and csv_cell("-x") == "'-x" and csv_cell(-2.0) == -2.0  # numbers stay numbers
    for row in rows:
        for value in row.values():
            assert not re.match(r"[=+@]", value or "")
