"""The parts / library / export commands end to end through benchlab.cli.main."""

from __future__ import annotations

import csv
import io
import json
import re
import subprocess

import pytest

from benchlab.cli import main
from benchlab.library import Library
from benchlab.models import DeviceParams
from session_builder import demo_bag, write_session


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_parts_commands(capsys, library_target):
    db = library_target
    # an invented hand-entered part of the grow-rack scenario
    code, out, _ = run(capsys, "parts", "add", "Q07", "--lot", "demo-bag", "--vth", "2.95", "--gm", "0.8",
                       "--library", db)
    assert code == 0 and "demo-bag/Q07" in out and "linear" in out
    code, out, _ = run(capsys, "parts", "add", "Q08", "--lot", "demo-bag", "--vth", "2.8", "--kp", "1.1",
                       "--theta", "0.09", "--library", db, "--json")
    assert json.loads(out)["params"] == DeviceParams("theta", vth=2.8, kp=1.1, theta=0.09).to_dict()
    run(capsys, "parts", "add", "Q07", "--lot", "other", "--library", db)

    code, out, err = run(capsys, "parts", "show", "Q07", "--library", db)
    assert code == 2 and out == "" and err.count("\n") == 1  # one line, no traceback
    assert "ambiguous" in err and "demo-bag/Q07" in err and "other/Q07" in err
    code, out, _ = run(capsys, "parts", "show", "demo-bag/Q07", "--library", db, "--json")
    assert json.loads(out)["part"]["params"]["gm"] == 0.8
    code, out, _ = run(capsys, "parts", "show", "demo-bag/Q07", "--library", db)
    assert code == 0 and "curve (linear): vth=2.95 V, gm=0.8 A/V" in out and "hand" in out

    code, _, err = run(capsys, "parts", "add", "Q09", "--vth", "3", "--gm", "0.5", "--kp", "1", "--library", db)
    assert code == 2 and "not both" in err
    code, _, err = run(capsys, "parts", "add", "Q09", "--gm", "0.5", "--library", db)
    assert code == 2 and "--vth" in err
    code, _, err = run(capsys, "parts", "add", "Q09", "--vth", "3", "--library", db)
    assert code == 2 and "needs --gm" in err and "not both" not in err
    # a NaN or infinity was stored as null and then every later listing of the library was a traceback
    for bad in (["--vth", "nan", "--kp", "0.5"], ["--vth", "3", "--kp", "inf"], ["--vth", "3", "--kp", "1",
                                                                             "--theta", "nan"]):
        with pytest.raises(SystemExit) as stop:  # refused by the option's quantity type, before the library opens
            main(["parts", "add", "Q09", *bad, "--library", db])
        err = capsys.readouterr().err
        assert stop.value.code == 2 and "finite" in err and len(err.strip().splitlines()) == 1
    code, out, err = run(capsys, "parts", "list", "--library", db)
    assert code == 0 and "Q09" not in out and "Traceback" not in err

    assert run(capsys, "parts", "reject", "Q08", "--reason", "bent leg", "--library", db)[0] == 0
    code, out, _ = run(capsys, "parts", "list", "--state", "rejected", "--json", "--library", db)
    listed = [json.loads(line) for line in out.splitlines()]  # one object per line
    assert [(p["label"], p["reason"]) for p in listed] == [("Q08", "bent leg")]
    assert run(capsys, "parts", "state", "demo-bag/Q08", "in_stock", "--library", db)[0] == 0
    code, out, _ = run(capsys, "parts", "list", "--lot", "demo-bag", "--library", db)
    assert "demo-bag/Q07" in out and "demo-bag/Q08" in out and "2 part(s)" in out
    with Library.open(db) as lib:
        assert lib.info()["parts"] == 3  # the refused adds wrote nothing


def test_library_import_and_exports(capsys, tmp_path, monkeypatch, library_target, new_library_target):
    db = library_target
    monkeypatch.setenv("BENCHLAB_LIBRARY", str(db))  # no --library: the environment picks the file
    session = write_session(tmp_path, "20261202-101500-demo-bag", "demo-bag", demo_bag(5, duds=(1,)))
    code, out, _ = run(capsys, "library", "import", str(session), "--no-refit", "--json")
    summary = json.loads(out)
    assert code == 0 and summary["fitted"] == 4 and summary["rejected"] == 1
    with Library.open(db) as lib:  # the environment's library holds the import
        assert len(lib.parts(state=None)) == 5

    code, out, _ = run(capsys, "library", "lots")
    assert re.search(r"demo-bag\s+5\s+4\s+0\s+0\s+1", out)
    code, out, _ = run(capsys, "library", "info")
    assert "parts: 5" in out and f"backend: {'postgresql' if '://' in db else 'sqlite'}" in out
    assert ("journal_mode: wal" in out) == ("://" not in db)

    out_csv = tmp_path / "parts.csv"
    assert run(capsys, "export", "csv", "--state", "in_stock", "--out", str(out_csv))[0] == 0
    rows = list(csv.DictReader(io.StringIO(out_csv.read_text())))
    assert [r["label"] for r in rows] == ["Q01", "Q03", "Q04", "Q05"]

    code, out, _ = run(capsys, "export", "json")
    data = json.loads(out)
    assert len(data["parts"]) == 5
    dump = tmp_path / "dump.json"
    dump.write_text(out)
    other = new_library_target()
    code, out, _ = run(capsys, "library", "import-json", str(dump), "--library", str(other))
    assert code == 0 and "5 parts" in out
    code, _, err = run(capsys, "library", "import-json", str(dump), "--library", str(other))
    assert code == 2 and "already exists" in err
    code, _, err = run(capsys, "library", "import", str(tmp_path / "missing"), "--no-refit")
    assert code == 2 and "no such folder" in err
    write_session(tmp_path / "more", "s2", "bag-2", demo_bag(2, seed=2))
    write_session(tmp_path / "more", "s3", "bag-3", demo_bag(3, seed=3))
    code, out, _ = run(capsys, "library", "import", str(tmp_path / "more"), "--no-refit")
    assert code == 0 and "5 sweep(s): 5 fitted" in out  # a folder of sessions imports each of them


@pytest.mark.ngspice
def test_exported_spice_cards_reproduce_the_stored_curves_in_ngspice(capsys, tmp_path, ngspice_path, library_target):
    db = library_target
    run(capsys, "parts", "add", "Q-1", "--lot", "bag", "--vth", "2.9", "--kp", "1.3", "--library", db)
    run(capsys, "parts", "add", "Q+2", "--lot", "bag", "--vth", "3.1", "--kp", "0.9", "--theta", "0.12",
        "--library", db)
    cards = tmp_path / "cards.lib"
    code, out, _ = run(capsys, "export", "spice", "Q-1", "Q+2", "--out", str(cards), "--library", db)
    assert code == 0
    text = cards.read_text()
    names = re.findall(r"^\.model\s+(\S+)\s+NMOS\s+\(LEVEL=(\d)", text, flags=re.M)
    assert [level for _, level in names] == ["1", "3"]  # THETA only in a level-3 card
    with Library.open(db) as lib:
        parts = [lib.get_part("Q-1"), lib.get_part("Q+2")]
    for (name, _), part in zip(names, parts):
        for current in (1e-3, 0.05):
            deck = tmp_path / f"{name}.cir"
            deck.write_text(f"* VGS of a diode-connected part forced with a current\nI1 0 d DC {current}\n"
                            f"M1 d d 0 0 {name} W=1 L=1\n.include {cards}\n"
                            ".options RELTOL=1e-7 VNTOL=1e-9 ABSTOL=1e-15\n"
                            ".control\nop\nprint v(d)\n.endc\n.end\n")
            result = subprocess.run([ngspice_path, "-b", str(deck)], capture_output=True, text=True, timeout=60)
            vgs = float(re.search(r"v\(d\)\s*=\s*([-+0-9.eE]+)", result.stdout).group(1))
            # ngspice (level 1: ID = KP/2 (VGS-VTO)^2; level 3 with THETA) as the outside reference:
            # the stored curve and the exported card agree within 1 mV
            assert vgs == pytest.approx(float(part.params.vgs_at(current)), abs=1e-3)


def test_read_commands_do_not_create_a_library(capsys, tmp_path):
    missing = tmp_path / "nowhere" / "lib.db"
    for argv in (["parts", "list"], ["parts", "show", "Q1"], ["export", "csv"], ["library", "info"],
                 ["report", "--lot", "x", "--out", str(tmp_path / "r")]):
        code, out, err = run(capsys, *argv, "--library", str(missing))
        assert code == 2 and "no library here yet" in err and err.count("\n") == 1
    assert not missing.exists() and not missing.parent.exists() and not (tmp_path / "r").exists()


def test_spice_export_keeps_polarity_and_names_by_label(capsys, library_target):
    db = library_target
    run(capsys, "parts", "add", "QP1", "--polarity", "P", "--vth", "2.2", "--kp", "0.7", "--library", db)
    run(capsys, "parts", "add", "QN1", "--vth", "2.4", "--kp", "0.8", "--library", db)
    run(capsys, "parts", "add", "BARE", "--library", db)
    code, out, _ = run(capsys, "export", "spice", "QP1", "QN1", "--library", db)
    assert code == 0
    cards = dict(re.findall(r"^\.model\s+(\S+)\s+(\w+MOS)", out, flags=re.M))
    assert cards == {"QP1": "PMOS", "QN1": "NMOS"}
    # SPICE convention (ngspice manual, MOSFET models): a P-channel VTO is negative
    assert re.search(r"\.model QP1 PMOS \(LEVEL=1 VTO=-2\.2 ", out)
    code, _, err = run(capsys, "export", "spice", "BARE", "--library", db)
    assert code == 2 and "no fitted or hand-entered curve for default/BARE" in err
