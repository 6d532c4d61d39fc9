"""Measurement order on noisy sweeps: noise-sized steps back are data, a fold-back is flagged, one
refused file does not stop the others.

Source of truth: ngspice (BSIM3 level 8 and level 3) diode-connected parts on a resistor line, read with
Gaussian noise in numpy.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from benchlab.cli import main
from benchlab.errors import InputError
from benchlab.extract import fit_sweep, load_sweep_csv

pytestmark = pytest.mark.ngspice

BSIM3 = ".model NMOD NMOS (LEVEL=8 VERSION=3.3.0 TOX=5e-8 VTH0=2.0 U0=500 NFACTOR=1.5)"
BSIM3_GEOMETRY = "W=0.2 L=2u"
LEVEL3 = ".model NMOD NMOS (LEVEL=3 VTO=2.85 KP=2.4 THETA=0.3)"


def test_bsim3_through_1k_with_meter_noise_on_both_axes_is_accepted(spice):
    # 20 mV supply steps through 1 kohm, 0.05 % of reading on VGS and 0.2 % on ID: where the part is steep
    # VGS and ID step back together by noise alone, which is not disorder
    _, v_part, i_d = spice.resistor_sweep(BSIM3, resistor=1000.0, step=0.02, geometry=BSIM3_GEOMETRY)
    keep = i_d > 1e-6
    rng = np.random.default_rng(31)
    stepped_back = 0
    for _ in range(60):
        vgs = v_part[keep] * (1 + rng.normal(0, 5e-4, keep.sum()))
        cur = i_d[keep] * (1 + rng.normal(0, 2e-3, keep.sum()))
        stepped_back += bool(np.any((np.diff(vgs) < 0) & (np.diff(cur) < 0)))
        result = fit_sweep(vgs, cur, model="theta")
        assert "non_monotonic" not in result.flags
        # BSIM3 VTH0 = 2.0 V; the theta-law threshold of the strong-inversion window lands near it
        assert abs(result.vth - 2.0) < 0.15
    assert stepped_back >= 3  # the joint steps back were there


def test_level3_through_330_ohm_with_0p3_mV_vgs_noise_is_accepted(spice):
    # 0.3 mV on VGS and 0.1 % of reading on ID, 20 mV supply steps through 330 ohm
    _, v_part, i_d = spice.resistor_sweep(LEVEL3, resistor=330.0, step=0.02)
    keep = i_d > 1e-6
    rng = np.random.default_rng(32)
    stepped_back = 0
    for _ in range(20):
        vgs = v_part[keep] + rng.normal(0, 0.3e-3, keep.sum())
        cur = i_d[keep] * (1 + rng.normal(0, 1e-3, keep.sum()))
        stepped_back += bool(np.any((np.diff(vgs) < 0) & (np.diff(cur) < 0)))
        result = fit_sweep(vgs, cur, model="theta")
        # ngspice level 3 VTO = 2.85 V
        assert abs(result.vth - 2.85) < 0.005
    assert stepped_back >= 3


def _fold_back(spice):
    # a part that heats at the top of the sweep: from the 80 % point on, the current sags 0.5 % per step
    # while the supply still rises (VGS falls with it along the resistor line)
    v_supply, v_part, i_d = spice.resistor_sweep(LEVEL3, resistor=470.0, step=0.05)
    keep = i_d > 1e-5
    vs, vp, cur = v_supply[keep], v_part[keep].copy(), i_d[keep].copy()
    start = int(0.8 * vs.size)
    for k in range(start, vs.size):
        cur[k] = cur[start - 1] * (1 - 0.005 * (k - start + 1))
        vp[k] = vp[start - 1] - 0.01 * (k - start + 1)
    return vs, vp, cur


def test_fold_back_in_an_ordered_record_is_flagged_not_refused(spice, tmp_path):
    vs, vp, cur = _fold_back(spice)
    ordered = tmp_path / "ordered.csv"
    ordered.write_text("point,vgs,id,v_source,status,direction\n" + "".join(
        f"{k},{float(v)!r},{float(i)!r},{float(s)!r},ok,up\n" for k, (v, i, s) in enumerate(zip(vp, cur, vs))))
    result = fit_sweep(load_sweep_csv(ordered), model="theta")
    assert "non_monotonic" in result.flags
    assert any("fold-back" in note for note in result.notes)
    # the same rising pass with no index or setpoint: its order is unknown, so the fall is disorder
    plain = tmp_path / "plain.csv"
    plain.write_text("vgs,id,direction\n" + "".join(f"{float(v)!r},{float(i)!r},up\n" for v, i in zip(vp, cur)))
    with pytest.raises(InputError, match="unsorted"):
        load_sweep_csv(plain)


def test_one_refused_file_does_not_stop_the_others(spice, tmp_path, capsys):
    _, v_part, i_d = spice.resistor_sweep(LEVEL3, resistor=470.0, step=0.05)
    keep = i_d > 1e-5
    good = tmp_path / "good.csv"
    good.write_text("vgs,id\n" + "".join(f"{float(v)!r},{float(i)!r}\n" for v, i in zip(v_part[keep], i_d[keep])))
    bad = tmp_path / "bad.csv"
    bad.write_text("vgs,id\n3.0,1e-3\n3.1,abc\n")
    also_good = tmp_path / "also_good.csv"
    also_good.write_text(good.read_text())
    code = main(["fit", "--json", str(good), str(bad), str(also_good)])
    out, err = capsys.readouterr()
    assert code == 2
    fitted = [json.loads(line)["label"] for line in out.splitlines()]
    assert fitted == ["good", "also_good"]
    assert "bad.csv" in err and "1 of 3 sweep(s) refused" in err
    assert "Traceback" not in err


def test_csv_copied_out_of_its_session_fits_as_the_session(spice, tmp_path):
    # a session record: the search before the part conducts reads the meter's noise floor (2 nA RMS
    # around zero, some readings negative); the plan's detection current leaves them out. The same CSV
    # copied out of its session (no sidecar) must drop them by its own estimate and fit the same.
    import shutil

    from benchlab.services.fitting import fit_files
    from benchlab.sweep.records import SweepOutcome, SweepPoint
    from benchlab.sweep.session import SessionWriter

    v_supply, v_part, i_d = spice.resistor_sweep(LEVEL3, resistor=470.0, step=0.05)
    rng = np.random.default_rng(33)
    noisy_i = np.where(i_d > 1e-6, i_d * (1 + rng.normal(0, 2e-4, i_d.size)), rng.normal(0, 2e-9, i_d.size))
    noisy_v = v_part * (1 + rng.normal(0, 2e-4, v_part.size))
    session = SessionWriter.create(tmp_path / "sessions", "BAG1", ambient_c=27.0)
    recorder = session.start_part("Q01", {"detect_current_a": 1e-6})
    for k, (vs, v, i) in enumerate(zip(v_supply, noisy_v, noisy_i)):
        recorder.append(SweepPoint(point=k, time_s=0.01 * k, vgs=float(v), id=float(i), v_source=float(vs),
                                   i_source=float(i), status="ok", direction="up", spread_v=0.0))
    recorder.finish(SweepOutcome(label="Q01", complete=True, stop_reason="done", classification="good",
                                 reason="invented test part", points=(), powered_s=1.0, elapsed_s=1.0))
    assert np.any(noisy_i < 0)
    copy_dir = tmp_path / "copied"
    copy_dir.mkdir()
    shutil.copy(session.path / "Q01.csv", copy_dir / "Q01.csv")
    for model in ("auto", "theta"):
        (in_session,) = fit_files([session.path], model=model).records
        (plain,) = fit_files([copy_dir / "Q01.csv"], model=model).records
        a, b = in_session.result, plain.result
        assert a.model == b.model
        for name in ("vth", "kp", "theta"):
            assert getattr(b, name) == pytest.approx(getattr(a, name), rel=1e-9, abs=1e-12)
            assert b.stderr[name] == pytest.approx(a.stderr[name], rel=1e-6)
        # ngspice level 3, VTO = 2.85 V
        assert abs(b.vth - 2.85) < 2e-3
        assert any("noise floor" in note for note in b.notes)
