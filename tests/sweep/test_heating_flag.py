"""The fit's self-heating flag on a part the simulated bench really heats.

The simulator warms each part by its thermal resistance (62 K/W, time constant 45 s of its virtual clock)
times the power VGS x ID (its clock runs in real time plus the nominal durations); its threshold falls and its KP drops with temperature as models.py describes.
A sweep up to 0.4 A (about 1.4 W) must be flagged; the fit's estimate of the thermal resistance is a lower
bound (what the fitted parameters did not take up). The cool side (no flag without heating) is checked on
ngspice in tests/extract/test_heating.py.
"""

from __future__ import annotations

import re

from benchlab.services.characterize import sweep_bag
from benchlab.services.fitting import fit_files

from .simhelp import plan_for, sim_bench


def test_hot_simulated_sweep_is_flagged(tmp_path):
    with sim_bench("resistor", bag_size=1, seed=3) as (sim, handle):
        assert [p.kind for p in sim.bag] == ["good"]
        rth = sim.bag[0].rth_k_per_w
        plan = plan_for(handle, points=14, max_current_a=0.4, settle_s=0.2, start_v=2.0, repeat_reading=False,
                        search_step_v=0.5)
        result = sweep_bag(handle, plan, sessions_root=tmp_path, lot="heat", count=1)
    (record,) = fit_files([result.session_path], model="theta").records
    assert "self_heating_drift" in record.result.flags
    note = next(n for n in record.result.notes if "self-heating" in n)
    estimate = float(re.search(r"about ([0-9.]+) K/W", note).group(1))
    assert 0.2 * rth <= estimate <= 1.2 * rth
