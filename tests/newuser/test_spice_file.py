"""`export spice PARTS --design ID --out FILE`: one .model name, one card per file, and the file run in ngspice
gives the currents the design printed (CLI in subprocesses)."""

from __future__ import annotations

import json
import re
import subprocess

import pytest
from newuser_cli import run

from benchlab.design.spice import parse_ngspice_print


@pytest.mark.ngspice
def test_parts_and_design_in_one_spice_file_run_in_ngspice_as_designed(tmp_path, ngspice_path):
    db = tmp_path / "lib.db"
    # linear-model parts (invented values): their stand-alone cards are exact at 10 mA, the design runs at 20 mA,
    # so a netlist that picked up the stand-alone card would miss the design's currents
    for label, vth, gm in (("Q01", 3.90, 0.544), ("Q02", 3.93, 0.530), ("Q03", 3.88, 0.551)):
        result = run("parts", "add", label, "--lot", "rack", "--vth", vth, "--gm", gm, "--library", db)
        assert result.returncode == 0, result.stderr
    result = run("design", "sink", "--library", db, "--supply", "12", "--at-current", "0.02", "--outputs", "2",
                 "--load-voltage", "6", "--save", "--json")
    assert result.returncode == 0, result.stderr
    design = json.loads(result.stdout.splitlines()[0])
    deck = tmp_path / "all.cir"
    result = run("export", "spice", "Q01", "Q02", "Q03", "--design", design["design_id"], "--out", deck,
                 "--library", db)
    assert result.returncode == 0, result.stderr
    text = deck.read_text()
    names = [n.lower() for n in re.findall(r"^\.model\s+(\S+)", text, flags=re.M)]
    assert len(names) == 6 and len(set(names)) == 6  # three part cards, three netlist cards, no name twice
    # every transistor of the netlist uses one of the netlist's own cards (the ones after its title)
    netlist_cards = names[3:]
    used = [m.group(1).lower() for m in re.finditer(r"^M\w+ \S+ \S+ \S+ \S+ (\S+)", text, flags=re.M)]
    assert used and all(name in netlist_cards for name in used)
    # ngspice (outside reference) on the written file: the design's reference and output currents
    out = subprocess.run([ngspice_path, "-b", str(deck)], capture_output=True, text=True, timeout=60).stdout
    values = parse_ngspice_print(out)
    assert values["i_ref"] == pytest.approx(design["i_ref"], rel=1e-3)
    for k, output in enumerate(design["outputs"], start=1):
        assert values[f"i_out_{k}"] == pytest.approx(output["i_out"], rel=1e-3)
