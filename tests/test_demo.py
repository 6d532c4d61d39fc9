"""The whole main job, end to end on the simulated bench (`benchlab demo`)."""

from __future__ import annotations

import base64
import json
import math
import re
import sqlite3
import subprocess

import pytest

from benchlab.cli import main
from benchlab.design.spice import parse_ngspice_print
from benchlab.errors import InputError
from benchlab.services.demo import CHANNELS, MISMATCH_TARGET, run_full_demo


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    return run_full_demo(tmp_path_factory.mktemp("demo"), count=40, say=lambda line: None)


def test_demo_sweeps_fits_stores_and_sets_duds_aside(demo_run):
    assert demo_run.swept == 40
    assert demo_run.fitted + demo_run.rejected == 40
    assert demo_run.rejected >= 1  # the simulated bag always holds duds
    with sqlite3.connect(demo_run.library) as db:
        # SQLite's own check of the file the demo left behind
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        states = dict(db.execute("SELECT state, COUNT(*) FROM parts GROUP BY state").fetchall())
    assert states.get("rejected") == demo_run.rejected
    assert states.get("reserved") == 1 + CHANNELS  # the design reserved the set it used


def test_demo_design_meets_its_target(demo_run):
    design = demo_run.design
    assert len(design["outputs"]) == CHANNELS
    assert max(abs(o["error"]) for o in design["outputs"]) <= MISMATCH_TARGET
    assert design["cautions"], "every design carries its cautions"
    # the demo buys 1 % resistors: every resistor is an E96 value (IEC 60063: E96 follows round(100 x 10^(i/96)),
    # i = 0..95, see shared/reference/e-series.md)
    assert design["series"] == "E96"
    e96 = {round(100 * 10 ** (i / 96)) for i in range(96)}
    for ohms in (design["r_chosen"], design["source_resistor"]):
        mantissa = ohms / 10 ** (math.floor(math.log10(ohms)) - 2)
        assert round(mantissa) in e96 and abs(mantissa - round(mantissa)) < 1e-6, ohms
    # the degeneration holds for 95 % of the drawn builds, not only at nominal values: a 1 % resistor cannot move
    # an output by more than about its own tolerance, so the nominal error leaves room for it (common practice)
    assert design["degeneration"]["over_spread"]
    assert design["monte_carlo"]["worst_error_p97_5"] <= MISMATCH_TARGET


def test_demo_netlist_runs_in_ngspice_with_the_predicted_currents(demo_run, ngspice_path):
    # Outside check: ngspice solves the exported netlist (level-3 strong-inversion cards of the fitted
    # parts). The design evaluates the full weak-to-strong curves, so allow 1 % for the weak-inversion
    # tail the level-3 cards leave out (at 20 mA these parts are in strong inversion).
    run = subprocess.run([ngspice_path, "-b", str(demo_run.netlist)], capture_output=True, text=True, timeout=60)
    values = parse_ngspice_print(run.stdout)
    assert "i_ref" in values, run.stdout + run.stderr
    assert values["i_ref"] == pytest.approx(demo_run.design["i_ref"], rel=1e-2)
    for k, out in enumerate(demo_run.design["outputs"], start=1):
        assert values[f"i_out_{k}"] == pytest.approx(out["i_out"], rel=1e-2)


def test_demo_writes_report_and_model_cards(demo_run):
    html = demo_run.report.read_text(encoding="utf-8")
    assert "demo-led-rack" in html
    # one self-contained file: the figures are embedded PNGs (PNG signature, W3C / ISO/IEC 15948 section 5.2)
    images = re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', html)
    assert len(images) >= 10 and all(base64.b64decode(b)[:8] == b"\x89PNG\r\n\x1a\n" for b in images)
    assert "MEETS the target" in html and "Resistors to buy" in html
    cards = demo_run.models.read_text()
    assert cards.count(".model ") == 1 + CHANNELS
    sidecars = list(demo_run.session.glob("*.json"))
    assert any(json.loads(p.read_text()).get("classification") for p in sidecars if p.name != "session.json")


def test_demo_refuses_a_bad_count_before_writing_anything(tmp_path):
    with pytest.raises(InputError):
        run_full_demo(tmp_path / "out", count=3)
    assert not (tmp_path / "out").exists()


def test_demo_command_prints_where_everything_went(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    (run,) = tmp_path.glob("run-*")
    for name in ("library.db", "models.lib", "sink.cir", "report/index.html"):
        assert str(run / name) in out
    assert "CAUTIONS" in out


def test_demo_too_small_a_bag_for_the_target_is_one_clear_error(tmp_path, capsys):
    # 12 parts of this bag hold no set of 1 + 8 that degeneration brings within 5 %: say so, no traceback
    assert main(["demo", "--out", str(tmp_path), "--count", "12"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("benchlab: error:") and "mismatch" in err and "--count 40" in err
    assert "Traceback" not in err
