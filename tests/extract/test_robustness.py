"""Whatever the input, the fitter answers with a result or one BenchlabError, never a crash."""

from __future__ import annotations

import json

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from benchlab.errors import BenchlabError
from benchlab.extract import fit_sweep, load_sweep_csv

CELLS = ["vgs", "id", "status", "direction", "ok", "up", "down", "over_range", "1e-3", "2.5", "-1", "nan", "inf",
         "", "x", '"', "1e300", "0", "3.1", "0.02"]


@settings(max_examples=60, deadline=None, derandomize=True)
@given(st.lists(st.lists(st.sampled_from(CELLS), max_size=5), max_size=8), st.booleans())
def test_any_csv_text_loads_or_fails_cleanly(tmp_path_factory, table, with_header):
    rows = [",".join(r) for r in table]
    if with_header:
        rows.insert(0, "vgs,id,status,direction")
    path = tmp_path_factory.mktemp("fuzz") / "f.csv"
    path.write_text("\n".join(rows))
    try:
        sweep = load_sweep_csv(path)
    except BenchlabError:
        return
    assert sweep.vgs.size > 0 and np.all(sweep.id > 0)


@settings(max_examples=40, deadline=None, derandomize=True)
@given(st.lists(st.tuples(st.floats(-5, 20), st.floats(1e-12, 5.0)), min_size=1, max_size=30),
       st.sampled_from(["auto", "linear", "square", "theta", "ekv"]))
def test_any_points_fit_or_fail_cleanly(points, model):
    points = sorted(set(points), key=lambda p: (p[1], p[0]))
    vgs, ids = np.array([p[0] for p in points]), np.array([p[1] for p in points])
    try:
        result = fit_sweep(vgs, ids, model=model, at_current=1e-3)
    except BenchlabError:
        return
    json.dumps(result.to_dict(), allow_nan=False)  # always plain JSON
    assert result.model in ("linear", "square", "theta", "ekv")


def test_bootstrap_with_a_point_below_the_fitted_threshold():
    # a hard cut-off model predicts zero below Vth: such a point must not poison the resamples
    from benchlab.models import DeviceParams

    rng = np.random.default_rng(1)
    part = DeviceParams("square", vth=3.0, kp=2.0)
    currents = np.geomspace(1e-6, 0.1, 30)
    vgs = part.vgs_at(currents)
    vgs[0] -= 0.01
    ids = currents * (1 + 1e-3 * rng.standard_normal(30))
    result = fit_sweep(vgs, ids, model="square", bootstrap=30, window=(1e-7, 1.0), at_current=1e-2)
    assert result.stderr_method == "bootstrap/30"
    for key in ("vth", "kp", "gm", "vgs_at_current"):
        assert np.isfinite(result.stderr[key]) and result.stderr[key] >= 0
