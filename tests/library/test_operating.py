"""gm stored at the part's operating current (or the library's default) beside VGS at 250 uA: computed once, shown
by parts list, export csv/json, the API rows and the report, never a placeholder 0."""

from __future__ import annotations

import csv
import io
import json
import math
import re
import subprocess

import pytest

from benchlab.cli import main
from benchlab.library import Library
from benchlab.services.tables import part_rows


def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_gm_is_stored_at_the_operating_current_and_shown_everywhere(capsys, library_target):
    db = library_target
    assert _run(capsys, "parts", "add", "Q1", "--vth", "3.0", "--kp", "1.2", "--library", db)[0] == 0
    assert _run(capsys, "parts", "add", "Q2", "--vth", "2.8", "--kp", "0.9", "--theta", "0.2", "--library", db)[0] == 0
    assert _run(capsys, "parts", "add", "Q3", "--library", db)[0] == 0  # no curve: nothing computed
    code, out, err = _run(capsys, "parts", "set-current", "Q1", "350mA", "--library", db)
    assert code == 0, err
    with Library.open(db) as lib:
        q1, q2, q3 = lib.get_part("Q1"), lib.get_part("Q2"), lib.get_part("Q3")
    # square law ID = (KP/2) (VGS - Vth)^2, so gm = sqrt(2 KP ID) (handbook fact: Sedra & Smith, Microelectronic
    # Circuits, the MOSFET's saturation transconductance) and VGS = Vth + sqrt(2 ID / KP)
    assert q1.gm_current == pytest.approx(0.35, rel=1e-12) and q1.gm_op == pytest.approx(math.sqrt(2 * 1.2 * 0.35), rel=1e-9)
    assert q1.vgs_ref == pytest.approx(3.0 + math.sqrt(2 * 250e-6 / 1.2), abs=1e-12)
    # Q2 has no current of its own: the library's default (250 uA unless set); THETA law ID = (KP/2) Vov^2 /
    # (1 + THETA Vov), whose derivative is gm = KP Vov (2 + THETA Vov) / (2 (1 + THETA Vov)^2) (derived)
    vov = q2.vgs_ref - 2.8
    assert (0.9 / 2) * vov**2 / (1 + 0.2 * vov) == pytest.approx(250e-6, rel=1e-9)  # the stored VGS is on the law
    assert q2.gm_current == 250e-6
    assert q2.gm_op == pytest.approx(0.9 * vov * (2 + 0.2 * vov) / (2 * (1 + 0.2 * vov) ** 2), rel=1e-9)
    assert (q3.vgs_ref, q3.gm_op, q3.gm_current) == (None, None, None)

    code, out, _ = _run(capsys, "library", "set-current", "100mA", "--library", db)
    assert code == 0 and "1 part(s)" in out  # Q1 keeps its own current; Q3 has no curve
    code, out, _ = _run(capsys, "parts", "list", "--library", db)
    rows = {line.split()[0]: line for line in out.splitlines() if line.startswith("default/")}
    assert re.search(rf"{math.sqrt(2 * 1.2 * 0.35):9.4g}\s+350 mA", rows["default/Q1"])
    with Library.open(db) as lib:
        q2 = lib.get_part("Q2")
        assert q2.gm_current == pytest.approx(0.1, rel=1e-12)
        vov = float(q2.params.vgs_at(0.1)) - 2.8
        assert q2.gm_op == pytest.approx(0.9 * vov * (2 + 0.2 * vov) / (2 * (1 + 0.2 * vov) ** 2), rel=1e-9)
        api_rows = {r["label"]: r for r in part_rows(lib)}
    assert re.search(rf"{q2.gm_op:9.4g}\s+100 mA", rows["default/Q2"])
    assert rows["default/Q3"].split()[-3:] == ["-", "-", "-"]  # VGS, gm and its current: not computed
    assert api_rows["Q1"]["gm"] == q1.gm_op and api_rows["Q2"]["gm_current"] == pytest.approx(0.1) and api_rows["Q3"]["gm"] is None

    code, out, _ = _run(capsys, "export", "csv", "--library", db)
    table = {r["label"]: r for r in csv.DictReader(io.StringIO(out))}
    assert float(table["Q1"]["gm_op"]) == q1.gm_op and float(table["Q1"]["operating_current"]) == pytest.approx(0.35)
    assert table["Q2"]["operating_current"] == "" and float(table["Q2"]["gm_current"]) == pytest.approx(0.1)
    assert table["Q3"]["gm_op"] == table["Q3"]["vgs_ref"] == ""  # empty, never 0
    code, out, _ = _run(capsys, "export", "json", "--library", db)
    exported = json.loads(out)
    by_label = {p["label"]: p for p in exported["parts"]}
    assert by_label["Q1"]["gm_op"] == q1.gm_op and by_label["Q3"]["gm_op"] is None
    assert exported["settings"] == {"operating_current_a": pytest.approx(0.1)}

    # clearing the part's own current falls back to the library's default
    assert _run(capsys, "parts", "set-current", "Q1", "--library", db)[0] == 0
    with Library.open(db) as lib:
        q1 = lib.get_part("Q1")
    assert q1.operating_current is None and q1.gm_op == pytest.approx(math.sqrt(2 * 1.2 * 0.1), rel=1e-9)


def test_a_bad_operating_current_is_one_error(capsys, library_target):
    assert _run(capsys, "parts", "add", "Q1", "--vth", "3.0", "--kp", "1.2", "--library", library_target)[0] == 0
    with pytest.raises(SystemExit) as stop:  # refused by the command line's quantity rule, before the library opens
        main(["parts", "set-current", "Q1", "-5mA", "--library", library_target])
    err = capsys.readouterr().err
    assert stop.value.code != 0 and len(err.strip().splitlines()) == 1 and "above 0" in err
    with Library.open(library_target) as lib:
        assert lib.get_part("Q1").operating_current is None


@pytest.mark.ngspice
def test_stored_gm_matches_ngspice_at_the_operating_current(capsys, tmp_path, ngspice_path, library_target):
    # an ngspice level-1 / level-3 sweep imported with the real fitter; the stored gm at 50 mA against ngspice's own
    # small-signal gm of the same card biased at 50 mA by a current source (.op, @m1[gm])
    from test_import_ngspice import CARDS, _simulate
    from session_builder import write_session

    parts = [{"label": name, **dict(zip(("vgs", "id"), _simulate(ngspice_path, tmp_path, name)))} for name in CARDS]
    session = write_session(tmp_path, "20261202-101500-spice", "spice-bag", parts)
    assert main(["library", "import", str(session), "--library", library_target]) == 0
    assert main(["library", "set-current", "50mA", "--library", library_target]) == 0
    capsys.readouterr()
    with Library.open(library_target) as lib:
        stored = {name: lib.get_part(name) for name in CARDS}
    for name, card in CARDS.items():
        deck = tmp_path / f"{name}-op.cir"
        deck.write_text(f"* diode-connected part at 50 mA\nI1 0 d DC 0.05\nM1 d d 0 0 {name} W=1 L=1\n{card}\n"
                        ".options RELTOL=1e-9\n.control\nop\nprint @m1[gm]\n.endc\n.end\n")
        run = subprocess.run([ngspice_path, "-b", str(deck)], capture_output=True, text=True, timeout=60)
        spice_gm = float(re.search(r"@m1\[gm\]\s*=\s*(\S+)", run.stdout).group(1))
        # the fit of 60 noisy points (0.1 % meter noise) recovers the card within a percent or so
        assert stored[name].gm_current == pytest.approx(0.05)
        assert stored[name].gm_op == pytest.approx(spice_gm, rel=0.02), name
