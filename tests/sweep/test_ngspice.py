"""The sweep's VGS(th) reading checked against ngspice on the same (SPICE level-1) part."""

from __future__ import annotations

import subprocess

import numpy as np
import pytest

from benchlab.sweep.engine import run
from benchlab.sweep.plan import Limits, SweepPlan

from .fakes import FakeBench

VTO, KP = 2.5, 1.0  # a level-1 part, W = L = 1


class TablePart:
    """A part whose current is ngspice's own I(VGS) table of the diode-connected MOSFET."""

    def __init__(self, vgs: np.ndarray, i_d: np.ndarray):
        self.vgs, self.i_d = vgs, i_d

    def current(self, vgs):
        return np.interp(vgs, self.vgs, self.i_d)


def ngspice(path: str, deck: str, tmp_path) -> str:
    out = tmp_path / "out.txt"
    out.unlink(missing_ok=True)
    (tmp_path / "deck.cir").write_text(deck)
    # ngspice 39 may exit 1 after a complete run with tight tolerances: judge by the data it wrote
    done = subprocess.run([path, "-b", "deck.cir"], cwd=tmp_path, capture_output=True, text=True, timeout=60)
    assert out.exists(), done.stdout + done.stderr
    return out.read_text()


@pytest.mark.ngspice
def test_vgs_at_250ua_matches_ngspice_operating_point(ngspice_path, tmp_path):
    model = f".model NMOD NMOS (LEVEL=1 VTO={VTO} KP={KP})\n.options RELTOL=1e-7 VNTOL=1e-9 ABSTOL=1e-15\n"
    # the part's curve, diode-connected (gate tied to drain), swept straight by a voltage source
    table = ngspice(ngspice_path, "* diode-connected curve\nV1 d 0 0\nM1 d d 0 0 NMOD W=1 L=1\n" + model +
                    ".dc V1 0 6 0.0005\n.control\nrun\nlet idrain = -1*i(V1)\nwrdata out.txt idrain\n.endc\n.end\n",
                    tmp_path)
    data = np.array([[float(x) for x in line.split()] for line in table.splitlines() if line.strip()])
    part = TablePart(data[:, 0], data[:, 1])
    # the datasheet threshold definition, VGS at 250 uA with VDS = VGS (common practice), as ngspice solves it
    # with a 250 uA current source into the diode-connected part
    op = ngspice(ngspice_path, "* 250 uA into the part\nI1 0 d DC 250u\nM1 d d 0 0 NMOD W=1 L=1\n" + model +
                 ".control\nop\nwrdata out.txt v(d)\n.endc\n.end\n", tmp_path)
    vgs_ref = float(op.split()[1])
    assert vgs_ref == pytest.approx(VTO + np.sqrt(2 * 250e-6 / KP), abs=1e-6)  # the level-1 law agrees

    bench = FakeBench(part, resistor_ohm=47.0)
    plan = SweepPlan(fixture="resistor", limits=Limits(12.0, 0.5, 2.0), series_resistor_ohm=47.0,
                     max_current_a=0.1, points=24)
    # a level-1 part has no sub-threshold current: the first 0.1 V search step into conduction lands far
    # above the first target; the search steps back and retries finer (recording that reading as a probe)
    outcome = run(plan, bench, clock=bench.clock, sleep=bench.clock.sleep)
    assert outcome.classification == "good"
    assert [p.status for p in outcome.points].count("probe") >= 1
    assert outcome.vgs_at_ref == pytest.approx(vgs_ref, abs=1e-3)
    # and the top of the sweep sits on ngspice's curve where the resistor line crosses it
    top = outcome.points[-1]
    assert top.id == pytest.approx(float(part.current(top.vgs)), rel=1e-3)
