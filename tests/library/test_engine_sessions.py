"""Import of sessions written by the sweep engine's own recorder (benchlab.sweep.session)."""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.library import import_session, import_sessions
from benchlab.services.library import fit_function
from benchlab.models import DeviceParams
from session_builder import curve_fit_square, fit_points_square

from benchlab.sweep import records, session as session_mod


def _record(writer, label, params, *, complete=True, classification="good", down=True, count=20):
    recorder = writer.start_part(label, {"fixture": "resistor", "resistor_ohm": 100.0})
    currents = np.geomspace(5e-5, 0.1, count)
    sequence = [("up", i) for i in currents] + ([("down", i) for i in currents[::-1]] if down else [])
    points = []
    for k, (direction, i_d) in enumerate(sequence):
        point = records.SweepPoint(point=k, time_s=0.01 * k, vgs=float(params.vgs_at(i_d)), id=float(i_d),
                                   v_source=float(params.vgs_at(i_d) + 100 * i_d), i_source=float(i_d),
                                   direction=direction)
        recorder.append(point)
        points.append(point)
        if not complete and k == 7:
            break
    recorder.finish(records.SweepOutcome(label=label, complete=complete, stop_reason="done",
                                         classification=classification, reason="test sweep",
                                         points=tuple(points), powered_s=1.0, elapsed_s=1.0))


def test_engine_written_session_imports_with_up_sweep_fitted(lib, tmp_path):
    writer = session_mod.SessionWriter.create(tmp_path, "demo-bag", operator="test")
    truth = DeviceParams("square", vth=3.05, kp=1.15)
    _record(writer, "Q01", truth)
    _record(writer, "Q02", truth, classification="leaky", down=False)
    _record(writer, "Q03", truth, complete=False)  # interrupted, then measured again on resume
    _record(writer, "Q03", DeviceParams("square", vth=3.2, kp=1.0))
    writer.finish()
    seen = []

    def fit(points, temperature_k=None):
        direction = list(points.direction)
        seen.append((len(points), direction.count("up"), direction.count("down")))
        return fit_points_square(points)

    summary = import_session(lib, writer.path, fit_function=fit)
    assert sorted((s.label, s.action) for s in summary.sweeps) == [
        ("Q01", "fitted"), ("Q02", "rejected"), ("Q03", "fitted")]
    assert seen == [(40, 20, 20), (40, 20, 20)]  # both passes reach the fitter, labelled (Q02 is a dud)
    q01 = lib.get_part("demo-bag/Q01")
    assert q01.params.vth == pytest.approx(3.05, abs=1e-3) and q01.params.kp == pytest.approx(1.15, rel=5e-3)
    assert len(lib.sweeps(q01)[0]["vgs"]) == 40  # both directions stored
    assert lib.get_part("Q03").params.vth == pytest.approx(3.2, abs=1e-3)  # the replacement, not the set-aside
    assert lib.get_part("Q02").reason == "leaky: test sweep"


def test_the_shipped_example_session_imports(lib):
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "sessions"
    folders = sorted(p for p in root.glob("*") if (p / "session.json").is_file()) if root.is_dir() else []
    assert folders, "the repository ships an example session in sessions/"
    summary = import_sessions(lib, folders, fit_function=fit_function())
    assert summary.sweeps and summary.count("stored") == 0  # every good sweep fits, every dud is rejected
    for part in lib.parts(state=None):
        assert (part.state == "rejected") == (part.classification != "good")
        assert (part.params is not None) == (part.classification == "good")
