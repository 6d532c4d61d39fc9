"""Importing session records: re-fit, duds, re-imports, crash leftovers."""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.errors import InputError, LibraryError
from benchlab.library import import_session, import_sessions
from benchlab.models import DeviceParams
from session_builder import curve_fit_square, demo_bag, fit_points_square, write_session


def test_import_refits_each_good_sweep_and_rejects_duds(lib, tmp_path):
    truth = {"Q01": DeviceParams("square", vth=2.95, kp=1.10), "Q02": DeviceParams("square", vth=3.20, kp=0.85)}
    session = write_session(tmp_path, "20261202-101500-bag-A", "bag-A", [
        {"label": "Q01", "params": truth["Q01"], "noise": 0.002},
        {"label": "Q02", "params": truth["Q02"], "noise": 0.002},
        {"label": "Q03", "params": truth["Q01"], "classification": "shorted",
         "reason": "current at the compliance limit from the first point"},
    ])
    summary = import_session(lib, session, fit_function=fit_points_square)
    assert (summary.fitted, summary.rejected, summary.skipped) == (2, 1, 0)
    for label, params in truth.items():
        part = lib.get_part(f"bag-A/{label}")
        # the re-fit (scipy curve_fit on sqrt(ID)) recovers the curve the points were computed from
        assert part.params.vth == pytest.approx(params.vth, abs=5e-3)
        assert part.params.kp == pytest.approx(params.kp, rel=0.02)
        assert part.classification == "good" and part.state == "in_stock"
        fit = lib.fits(part)[-1]
        assert fit["source"] == "fit" and fit["fitter_version"] == "test-curve_fit" and fit["sweep_id"]
        sweep = lib.sweeps(part)[0]
        assert sweep["session_path"] == str(session) and sweep["csv_path"].endswith(f"{label}.csv")
        assert len(sweep["vgs"]) == 40
    dud = lib.get_part("Q03")
    assert dud.state == "rejected" and dud.params is None
    assert dud.reason == "shorted: current at the compliance limit from the first point"

    again = import_session(lib, session, fit_function=fit_points_square)
    assert again.skipped == 3 and lib.info()["sweeps"] == 3  # re-importing the same session adds nothing


def test_import_without_refit_uses_the_stored_fits_and_lot_override(lib, tmp_path):
    bag = demo_bag(4, duds=(2,))
    session = write_session(tmp_path, "s1", "demo-bag", bag)
    summary = import_session(lib, session, refit=False, lot="shelf-3")
    assert summary.fitted == 3 and summary.rejected == 1
    assert lib.get_part("shelf-3/Q01").params == bag[0]["params"]
    assert lib.get_part("Q03").reason.startswith("open:")


def test_points_not_ok_are_not_fitted_and_stored_as_null(lib, tmp_path):
    params = DeviceParams("square", vth=3.0, kp=1.0)
    vgs = list(params.vgs_at(np.geomspace(1e-4, 0.1, 12))) + [9.0]
    ids = list(np.geomspace(1e-4, 0.1, 12)) + [float("inf")]
    status = ["ok"] * 12 + ["over_range"]
    seen = {}

    def fit(points, temperature_k=None):
        seen["n"] = len(points)
        seen["temperature_k"] = temperature_k
        return fit_points_square(points)

    session = write_session(tmp_path, "s", "bag", [{"label": "Q1", "vgs": vgs, "id": ids, "status": status}])
    import_session(lib, session, fit_function=fit)
    assert seen["n"] == 12
    assert seen["temperature_k"] == pytest.approx(22.5 + 273.15)  # the session's recorded ambient
    sweep = lib.sweeps("Q1")[0]
    assert sweep["id"][-1] is None and sweep["status"][-1] == "over_range"


def test_truncated_last_line_is_dropped_and_an_incomplete_sweep_is_never_a_part(lib, tmp_path):
    session = write_session(tmp_path, "s", "bag", [
        {"label": "Q1", "params": DeviceParams("square", vth=3.0, kp=1.0), "complete": False,
         "classification": "open"},  # what an older benchlab wrote for a good part stopped by Ctrl-C
        {"label": "Q2", "params": DeviceParams("square", vth=3.0, kp=1.0)}])
    csv_path = session / "Q1.csv"
    with csv_path.open("a") as handle:
        handle.write("40,2.000,3.1")  # the point in flight when the recorder was killed
    summary = import_session(lib, session, fit_function=fit_points_square)
    q1 = [s for s in summary.sweeps if s.label == "Q1"][0]
    assert (q1.action, q1.classification) == ("skipped", "interrupted") and "--resume" in q1.detail
    assert [p.label for p in lib.parts(state=None)] == ["Q2"]  # not imported, not rejected
    assert len(lib.sweeps("Q2")[0]["vgs"]) == 40


def test_bad_session_input_gets_one_error_and_writes_nothing(lib, tmp_path):
    good = write_session(tmp_path, "good", "bag", [{"label": "Q1", "params": DeviceParams("square", vth=3, kp=1)}])
    bad = write_session(tmp_path, "bad", "bag", [{"label": "Q2", "params": DeviceParams("square", vth=3, kp=1)}])
    lines = (bad / "Q2.csv").read_text().splitlines()
    lines[5] = "5,0.25,abc,0.001,1,0.001,ok"
    (bad / "Q2.csv").write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"Q2.csv, row 5"):
        import_sessions(lib, [good, bad], fit_function=fit_points_square)
    assert lib.info()["parts"] == 0
    lines[5] = "4,0.25,3.1,0.001,1,0.001,ok"
    lines[6] = "4,0.30,3.2,0.002,1,0.002,ok"  # the point number of the row before, again
    (bad / "Q2.csv").write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"Q2.csv, row 6: point number 4 appears twice"):
        import_sessions(lib, [good, bad], fit_function=fit_points_square)
    assert lib.info()["parts"] == 0
    with pytest.raises(InputError, match="no session.json"):
        import_session(lib, tmp_path, fit_function=fit_points_square)
    with pytest.raises(LibraryError, match="no session folders"):
        import_sessions(lib, [], fit_function=fit_points_square)


def test_a_fit_that_fails_keeps_the_sweep_without_a_fit(lib, tmp_path):
    session = write_session(tmp_path, "s", "bag", [{"label": "Q1", "params": DeviceParams("square", vth=3, kp=1)}])

    def failing(points, temperature_k=None):
        raise ValueError("curve too flat")

    summary = import_session(lib, session, fit_function=failing)
    assert summary.sweeps[0].action == "stored" and "curve too flat" in summary.sweeps[0].detail
    part = lib.get_part("Q1")
    assert part.params is None and part.state == "in_stock" and len(lib.sweeps(part)) == 1
