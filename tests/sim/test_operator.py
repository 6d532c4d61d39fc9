"""The simulated operator (``handling_s``): parts taken out after a sweep, the next seated later; ``pull=N``."""

from __future__ import annotations

import time

import pytest

from benchlab.errors import InputError
from benchlab.instruments.sim_parts import SimPartHandler
from benchlab.services.characterize import source_instrument
from benchlab.sim.bench import SimConfig
from benchlab.sweep.engine import run
from tests.sweep.simhelp import plan_for, sim_bench

HANDLING_S = 0.3  # real seconds (time_scale 0: the virtual clock still follows real time between messages)


def _wait_for_part(parts: SimPartHandler, timeout_s: float = 5.0) -> str | None:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        label = parts.label()
        if label is not None:
            return label
        time.sleep(0.02)
    return None


def test_operator_takes_the_part_out_after_its_sweep_and_seats_the_next(tmp_path):
    with sim_bench(handling_s=HANDLING_S) as (sim, handle):
        parts = SimPartHandler(source_instrument(handle.bench))
        assert parts.label() == "Q01"
        outcome = run(plan_for(handle, points=6), handle.bench, label="Q01")
        assert outcome.complete
        started = time.monotonic()
        assert parts.index() == -1 and parts.label() is None  # the fixture is empty at once
        assert _wait_for_part(parts) == "Q02"
        assert time.monotonic() - started >= HANDLING_S * 0.9
        assert any(e.kind == "operator" and "Q01 taken out" in e.text for e in sim.log.entries())


def test_a_probe_does_not_end_the_parts_turn(tmp_path):
    # a probe below 2 mA (the operator's rule, docs/sim.md) switched on and off leaves the part in place
    with sim_bench(handling_s=HANDLING_S) as (sim, handle):
        supply = handle.bench.supply
        supply.set_current_limit(1e-3)
        supply.set_voltage(5.0)
        supply.set_output(True)
        handle.bench.meter.configure_voltage(None, 1.0)
        vgs = handle.bench.meter.read()
        supply.set_output(False)
        assert 0.5 < vgs < 4.5  # conducting: the part clamps the probe (a threshold of a power part, common practice)
        time.sleep(HANDLING_S * 1.5)
        assert SimPartHandler(source_instrument(handle.bench)).label() == "Q01"


def test_a_part_pulled_mid_sweep_stops_the_sweep_with_the_output_off(tmp_path):
    with sim_bench(handling_s=HANDLING_S, faults=("pull=1",)) as (sim, handle):
        outcome = run(plan_for(handle, points=12), handle.bench, label="Q01")
        assert "failed open" in outcome.stop_reason or "open" in outcome.classification
        assert not handle.bench.supply.output_is_on()
        assert any(e.kind == "operator" and "pulled out" in e.text for e in sim.log.entries())
        assert _wait_for_part(SimPartHandler(source_instrument(handle.bench))) == "Q02"


@pytest.mark.parametrize("bad", [{"handling_s": -1.0}, {"handling_s": float("nan")}, {"faults": ("pull=0",)}])
def test_bad_operator_settings_are_refused(bad):
    with pytest.raises(InputError):
        SimConfig(**bad)
