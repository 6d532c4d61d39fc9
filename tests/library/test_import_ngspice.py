"""Import with the real fitter, on sweeps simulated by ngspice (the outside reference)."""

from __future__ import annotations

import json
import subprocess

import numpy as np
import pytest

from benchlab.cli import main
from benchlab.library import Library, export_library, import_session
from benchlab.services.library import fit_function
from session_builder import write_session


CARDS = {
    "L1": ".model L1 NMOS (LEVEL=1 VTO=2.5 KP=1.0)",
    "L3": ".model L3 NMOS (LEVEL=3 VTO=2.8 KP=0.9 THETA=0.1)",
}


def _simulate(ngspice_path, tmp_path, name):
    # a diode-connected part on a 470 ohm resistor line, tolerances tightened so ngspice is reference data
    out = tmp_path / f"{name}.txt"
    deck = tmp_path / f"{name}.cir"
    deck.write_text(f"* diode-connected part on a resistor line\nV1 vs 0 0\nR1 vs d 470\nM1 d d 0 0 {name} W=1 L=1\n"
                    f"{CARDS[name]}\n.options RELTOL=1e-7 VNTOL=1e-9 ABSTOL=1e-15\n.dc V1 0 40 0.05\n"
                    f".control\nrun\nlet idrain = -1*i(V1)\nwrdata {out} v(d) idrain\n.endc\n.end\n")
    run = subprocess.run([ngspice_path, "-b", str(deck)], capture_output=True, text=True, timeout=60)
    assert out.exists(), run.stdout + run.stderr  # ngspice -b exits 1 for a deck without .print; the data is there
    data = np.loadtxt(out)
    vgs, i_d = data[:, 1], data[:, 3]  # wrdata repeats the scale column before each vector
    keep = i_d > 2e-5  # above the GMIN leakage of the cut-off region
    vgs, i_d = vgs[keep], i_d[keep]
    # a sweep engine spaces points evenly in log current: take 60 of them, with 0.1 % meter noise
    picks = np.unique(np.searchsorted(i_d, np.geomspace(i_d[0], i_d[-1], 60)).clip(0, len(i_d) - 1))
    rng = np.random.default_rng(3)
    return vgs[picks], i_d[picks] * (1 + 1e-3 * rng.standard_normal(len(picks)))


@pytest.mark.ngspice
def test_cli_import_refits_ngspice_sweeps_with_the_fitter(tmp_path, ngspice_path, capsys, library_target):
    parts = []
    for name in CARDS:
        vgs, i_d = _simulate(ngspice_path, tmp_path, name)
        parts.append({"label": name, "vgs": vgs, "id": i_d})
    session = write_session(tmp_path, "20261202-101500-spice", "spice-bag", parts)
    db = library_target
    assert main(["library", "import", str(session), "--library", db, "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["fitted"] == 2
    with Library.open(db) as lib:
        l1, l3 = lib.get_part("L1"), lib.get_part("L3")
        # ngspice level 1 (ID = KP/2 (VGS-VTO)^2) and level 3 with THETA: the stored re-fit recovers the cards
        assert l1.params.vth == pytest.approx(2.5, abs=0.01) and l1.params.kp == pytest.approx(1.0, rel=0.03)
        assert l3.params.vth == pytest.approx(2.8, abs=0.01) and l3.params.kp == pytest.approx(0.9, rel=0.03)
        assert l3.params.theta == pytest.approx(0.1, rel=0.1)
        fit = lib.fits(l3)[-1]
        assert fit["source"] == "fit" and fit["fitter_version"] and "vth" in fit["stderr"]


def test_library_default_fitter_is_benchlab_extract(lib, tmp_path):
    from benchlab.extract import FITTER_VERSION
    from benchlab.models import DeviceParams

    truth = DeviceParams("theta", vth=3.0, kp=1.2, theta=0.08)
    session = write_session(tmp_path, "s", "bag", [{"label": "Q1", "params": truth, "noise": 0.001}])
    summary = import_session(lib, session, fit_function=fit_function())  # the services' fitter (benchlab.extract)
    assert summary.fitted == 1
    part = lib.get_part("Q1")
    fit = lib.fits(part)[-1]
    assert fit["fitter_version"] == str(FITTER_VERSION)
    # points computed from the model itself (benchlab.models) with 0.1 % noise: threshold back within 10 mV
    assert part.params.vth == pytest.approx(3.0, abs=0.01)
    assert json.loads(json.dumps(export_library(lib), allow_nan=False))["parts"][0]["fits"][0]["result"]["model"]
