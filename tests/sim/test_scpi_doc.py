"""docs/scpi.md names, for every command the simulator serves, where the command comes from.

The rule (DEVELOPERS.md, docs/scpi.md): IEEE 488.2 for the common commands, SCPI-1999 where it defines
the command (with its volume and subsystem), the simulator's own SIMulation: tree for the rest.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from benchlab.sim.instrument import COMMON_COMMANDS
from benchlab.sim.meter import SimMeter
from benchlab.sim.smu import SimSmu
from benchlab.sim.supply import SimSupply

DOC = Path(__file__).resolve().parents[2] / "docs" / "scpi.md"
SOURCE = re.compile(r"^(IEEE 488\.2.*|SCPI-1999 vol\. [12] [A-Za-z].*|simulator's own)$")
ROWS = [line.replace("\\|", "/") for line in DOC.read_text(encoding="utf-8").splitlines() if line.startswith("| `")]
PATTERNS = sorted({spec.pattern for cls in (SimSupply, SimMeter, SimSmu)
                   for spec in (*cls.COMMANDS, *COMMON_COMMANDS)})


def test_every_row_has_a_source():
    assert len(ROWS) > 40
    for row in ROWS:
        cells = [c.strip() for c in row.strip("|").split("|")]
        assert len(cells) == 3 and SOURCE.match(cells[2]), row


@pytest.mark.parametrize("pattern", PATTERNS)
def test_every_served_command_is_documented_with_its_source(pattern):
    rows = [row for row in ROWS if f"`{pattern}" in row or f"/ `{pattern}" in row or f", `{pattern}" in row]
    assert rows, f"{pattern} is served but not in docs/scpi.md"
    source = rows[0].strip("|").split("|")[-1].strip()
    # the simulator's own commands live under SIMulation:, and only they
    assert (source == "simulator's own") == pattern.startswith("SIMulation")


def test_no_maker_spellings_are_served():
    # compliance and buffer spellings of no standard are not served (the SCPI-1999 ones are, see docs/scpi.md)
    served = " ".join(PATTERNS).upper()
    plain = served.replace("[", "").replace("]", "")
    for first, second in (("PROTECTION", "TRIPPED"), ("TRACE", "CLEAR"), ("POINTS", "ACTUAL"), ("OUTPUT", "MODE")):
        assert f"{first}:{second}" not in plain
    assert "FUNCTION[:MODE]" not in served and "FUNCTION:MODE" in served  # :MODE written out
