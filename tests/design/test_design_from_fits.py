"""The product path: sweeps fitted by benchlab.extract, stored in the library, designed from there."""

import numpy as np
import pytest

from benchlab.design.parts import Part
from benchlab.design.sink import SinkOptions, synthesize_sink
from benchlab.extract import fit_sweep
from benchlab.library import Library
from benchlab.models import DeviceParams
from benchlab.services.design import SinkRequest, design_sink


def test_sink_from_fitted_parts_predicts_the_true_parts_currents(tmp_path):
    # Invented demo parts (grow-rack LED driver scenario); their "true" curves generate noisy sweeps.
    rng = np.random.default_rng(8)
    truth = [DeviceParams("theta", 3.0 + d, kp=0.95 * (1 + k), theta=0.12)
             for d, k in ((0.0, 0.0), (0.012, 0.01), (-0.009, -0.015), (0.004, 0.02))]
    path = tmp_path / "lib.db"
    with Library.open(path) as lib:
        for i, params in enumerate(truth):
            vgs = np.linspace(3.05, 4.2, 60)
            current = params.current(vgs) * (1 + rng.normal(0, 0.002, vgs.size))
            fit = fit_sweep(vgs, current, model="theta")
            lib.add_part(f"Q{i + 1:02d}", lot="grow-rack", params=fit.params, stderr=dict(fit.stderr))
    request = SinkRequest(supply=24.0, current=0.25, ref="Q01", out=("Q02", "Q03", "Q04"),
                          options=SinkOptions(load_voltage=6.0, monte_carlo=300))
    design, design_id = design_sink(request, path)
    assert design_id is None
    # the same design computed on the true curves (same resistor): fitted predictions within 0.3 %
    true_parts = [Part(f"T{i}", p) for i, p in enumerate(truth)]
    exact = synthesize_sink(24.0, 0.25, true_parts[0], true_parts[1:], SinkOptions(load_voltage=6.0))
    assert design.r_chosen == exact.r_chosen
    assert design.i_ref == pytest.approx(exact.i_ref, rel=3e-3)
    for fitted, true in zip(design.outputs, exact.outputs):
        assert fitted.i_out == pytest.approx(true.i_out, rel=3e-3)
        assert fitted.error == pytest.approx(true.error, abs=3e-3)
    assert design.monte_carlo["outputs"][0]["error"]["std"] > 0
