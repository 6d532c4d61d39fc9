"""``benchlab library refit``: every stored sweep fitted again, new fits current, old fits kept."""

from __future__ import annotations

import json

import numpy as np
import pytest

from benchlab.cli import main
from benchlab.library import Library
from benchlab.models import DeviceParams
from session_builder import demo_bag, write_session


def _run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _square_bag(lot_seed):
    # invented test parts (square law), meter noise on ID so the fit has something to do
    rng = np.random.default_rng(lot_seed)
    return [{"label": f"Q{k + 1:02d}", "store_fit": True, "noise": 2e-4,
             "params": DeviceParams("square", vth=float(rng.normal(3.0, 0.1)), kp=float(rng.normal(1.2, 0.1)))}
            for k in range(5)]


def test_refit_stores_new_fits_and_keeps_history(capsys, tmp_path, library_target):
    write_session(tmp_path / "sessions", "s1", "BAG-A", _square_bag(1))
    write_session(tmp_path / "sessions", "s2", "BAG-B", _square_bag(2) + [
        {"label": "Q09", "params": DeviceParams("square", vth=3.0, kp=1.0), "classification": "open",
         "reason": "no current", "store_fit": False}])
    code, _, err = _run(capsys, "library", "import", str(tmp_path / "sessions"), "--no-refit",
                        "--library", library_target)
    assert code == 0, err
    code, out, err = _run(capsys, "library", "refit", "--lot", "BAG-A", "--model", "square", "--json",
                          "--library", library_target)
    assert code == 0, err
    summary = json.loads(out)
    assert sorted(p["part"] for p in summary["refitted"]) == [f"BAG-A/Q0{k}" for k in range(1, 6)]
    from benchlab.extract import FITTER_VERSION, fit_sweep
    from session_builder import curve_fit_square

    with Library.open(library_target) as lib:
        for part in lib.parts(lot="BAG-A"):
            fits = lib.fits(part)
            # the stored fit is kept, the new one is current and says which fitter made it
            assert [f["fitter_version"] for f in fits] == ["stored", FITTER_VERSION]
            assert part.params.vth == fits[-1]["params"]["vth"]
            (sweep,) = lib.sweeps(part)
            # the same points fitted by scipy's curve_fit on sqrt(ID) (an independent fitter) agree
            reference = curve_fit_square(sweep["vgs"], sweep["id"])["params"]
            assert part.params.vth == pytest.approx(reference.vth, abs=2e-3)
            assert part.params.kp == pytest.approx(reference.kp, rel=2e-2)
            # and the fitter on those points gives exactly what was stored
            direct = fit_sweep(sweep["vgs"], sweep["id"], model="square")
            assert part.params.vth == pytest.approx(direct.vth, abs=1e-12)
        # the other lot was not touched
        assert all(len(lib.fits(p)) == 1 for p in lib.parts(lot="BAG-B"))
    code, out, err = _run(capsys, "library", "refit", "--library", library_target)
    assert code == 0, err
    # the dud has no good sweep: listed, left as it was
    assert any(line.startswith("BAG-B/Q09") and "unchanged" in line for line in out.splitlines())
    assert "10 part(s) re-fitted" in out and "1 left as they were" in out


def test_refit_of_an_unknown_lot_is_one_error(capsys, tmp_path, library_target):
    write_session(tmp_path / "sessions", "s1", "BAG-A", _square_bag(1))
    assert _run(capsys, "library", "import", str(tmp_path / "sessions"), "--library", library_target)[0] == 0
    code, out, err = _run(capsys, "library", "refit", "--lot", "NOPE", "--library", library_target)
    assert code != 0 and len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_parts_list_and_csv_show_vgs_and_gm_at_250uA_never_a_placeholder(capsys, tmp_path, library_target):
    write_session(tmp_path / "sessions", "s1", "BAG-A", _square_bag(3))
    assert _run(capsys, "library", "import", str(tmp_path / "sessions"), "--library", library_target)[0] == 0
    code, out, _ = _run(capsys, "parts", "list", "--library", library_target)
    assert code == 0 and "VGS@250uA" in out and "GM/(A/V)" in out and "GM AT" in out
    with Library.open(library_target) as lib:
        part = lib.parts(lot="BAG-A")[0]
    row = next(line for line in out.splitlines() if line.startswith(f"BAG-A/{part.label}"))
    # the square law at 250 uA: VGS = Vth + sqrt(2 I / KP), gm = sqrt(2 KP I) (Shichman-Hodges)
    assert f"{part.params.vth + (2 * 250e-6 / part.params.kp) ** 0.5:9.4f}" in row
    # gm at the library's default operating current (250 uA unless set)
    assert f"{(2 * part.params.kp * 250e-6) ** 0.5:9.4g}   250 uA" in row
    code, out, _ = _run(capsys, "export", "csv", "--library", library_target)
    assert code == 0
    import csv
    import io

    rows = list(csv.DictReader(io.StringIO(out)))
    # gm is not a square-law parameter: an empty cell, not 0.0
    assert rows and all(r["gm"] == "" and r["kp"] != "" for r in rows)
