"""The report's summary judges a design as ``design sink`` does: against the default 5 % mismatch target when none
was given, and never as meeting it while the junctions run away. It said 'MEETS the target ... (no mismatch target
was set)' for a design the CLI had just called NOT USABLE (10.3 % error, thermal runaway)."""

from __future__ import annotations

import json

from benchlab.cli import main


def _design(tmp_path, capsys, outputs: list[tuple[str, float]], supply: str, current: str) -> tuple[str, dict]:
    lib = str(tmp_path / "lib.db")
    # hand-entered parts of the invented demo stock: a reference and outputs with the given thresholds
    assert main(["parts", "add", "R1", "--lot", "stock", "--vth", "2.50", "--kp", "3", "--library", lib]) == 0
    for label, vth in outputs:
        assert main(["parts", "add", label, "--lot", "stock", "--vth", f"{vth}", "--kp", "3", "--library", lib]) == 0
    capsys.readouterr()
    assert main(["design", "sink", "--supply", supply, "--at-current", current, "--ref", "R1", "--outputs-from",
                 ",".join(label for label, _ in outputs), "--save", "--json", "--library", lib]) == 0
    return lib, json.loads(capsys.readouterr().out)


def _summary(tmp_path, capsys, lib: str, design_id: int) -> str:
    assert main(["report", "--lot", "stock", "--design", str(design_id), "--out", str(tmp_path / "r"),
                 "--library", lib]) == 0
    return capsys.readouterr().out


def test_a_design_outside_the_default_target_misses_it(tmp_path, capsys):
    # square law (Sedra & Smith): 10 mV of threshold at 0.2 V of overdrive is a 10 % current error, over 5 %
    lib, design = _design(tmp_path, capsys, [("O1", 2.51)], "12", "60m")
    worst = max(abs(o["error"]) for o in design["outputs"])
    assert worst > 0.05 and design["verdict"].startswith("NOT USABLE")
    printed = _summary(tmp_path, capsys, lib, design["design_id"])
    assert "MISSES the target" in printed and "default target of 5 %" in printed and "MEETS" not in printed


def test_a_design_in_thermal_runaway_never_meets_the_target(tmp_path, capsys):
    # twin parts (no mismatch) dissipating watts free-standing at 62 K/W: the loop gain passes 1
    lib, design = _design(tmp_path, capsys, [("O1", 2.50)], "24", "300m")
    assert design["runaway"]["runaway"] and max(abs(o["error"]) for o in design["outputs"]) <= 0.05
    printed = _summary(tmp_path, capsys, lib, design["design_id"])
    assert "MISSES the target" in printed and "THERMAL RUNAWAY" in printed


def test_a_good_design_still_meets_it(tmp_path, capsys):
    lib, design = _design(tmp_path, capsys, [("O1", 2.50)], "5", "5m")
    assert design["verdict"].startswith("usable")
    assert "MEETS the target" in _summary(tmp_path, capsys, lib, design["design_id"])
