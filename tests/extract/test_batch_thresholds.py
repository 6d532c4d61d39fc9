"""The batched thresholds equal the one-sweep reference functions; the batched monotone cubic is scipy's."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator

from benchlab.extract.batch_thresholds import constant_current_batch, thresholds_batch
from benchlab.extract.thresholds import all_thresholds
from benchlab.models import DeviceParams


def _stack(sweeps):
    width = max(v.size for v, _ in sweeps)
    vgs, ids = np.zeros((len(sweeps), width)), np.ones((len(sweeps), width))
    valid = np.zeros((len(sweeps), width), dtype=bool)
    for row, (v, i) in enumerate(sweeps):
        vgs[row, :v.size], ids[row, :i.size], valid[row, :v.size] = v, i, True
    return vgs, ids, valid


def _varied_sweeps():
    rng = np.random.default_rng(8)
    sweeps = []
    for k in range(14):
        part = DeviceParams("ekv", vth=rng.uniform(2, 4), kp=rng.uniform(0.5, 5), theta=rng.uniform(0, 0.4),
                            n=rng.uniform(1.2, 1.8))
        count = [7, 24, 59, 60, 61, 150, 400][k % 7]  # both sides of the 60-bin limit
        low = [1e-7, 1e-5, 3e-4][k % 3]
        currents = np.geomspace(low, 0.2, count)
        vgs = part.vgs_at(currents) + rng.normal(0, 30e-6, count) * (k % 2)
        sweeps.append((vgs, currents * (1 + 1e-3 * rng.standard_normal(count) * (k % 2))))
    return sweeps


@pytest.mark.parametrize("cc", [250e-6, 1e-3, 1e-8, 0.2])
def test_batch_equals_one_sweep_reference(cc):
    sweeps = _varied_sweeps()
    batch = thresholds_batch(*_stack(sweeps), cc)
    for row, (vgs, ids) in enumerate(sweeps):
        order = np.lexsort((vgs, ids))  # the fitter hands its points over in order of current
        single = all_thresholds(vgs[order], ids[order], cc)
        for key, value in single.items():
            got = batch[key][row]
            if value is None:
                assert np.isnan(got), (key, row)
            else:
                assert got == pytest.approx(value, abs=1e-9), (key, row)


def test_batched_monotone_cubic_is_scipy_pchip():
    # outside reference: scipy.interpolate.PchipInterpolator (Fritsch-Carlson with its end conditions)
    rng = np.random.default_rng(2)
    for trial in range(30):
        count = int(rng.integers(3, 12))
        ids = np.sort(rng.uniform(1e-5, 1e-1, count))
        vgs = np.cumsum(rng.uniform(0.001, 0.2, count)) + 2.0
        if trial % 3 == 0:
            vgs[count // 2] -= 0.15  # a wiggle, so slopes change sign and the limiter acts
        target = float(np.exp(rng.uniform(np.log(ids[0]), np.log(ids[-1]))))
        got = constant_current_batch(vgs[None], ids[None], np.ones((1, count), bool), target)[0]
        assert got == pytest.approx(float(PchipInterpolator(np.log(ids), vgs)(np.log(target))), abs=1e-12)
