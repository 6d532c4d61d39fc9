"""Over TCP on the simulated bench: the meter integrates while the supply is read back (INIT, readback, FETC?),
and a first reading on the predicted curve is taken as settled, without losing the settle check."""

from __future__ import annotations

import pytest

from benchlab.sim.physics import REFERENCE_TEMPERATURE_K, voltage_at_current
from benchlab.sweep.engine import run
from tests.sweep.simhelp import plan_for, sim_bench


def _record(sent: list, role: str, transport) -> None:
    """Wrap a transport so every message it sends is appended to ``sent`` as (role, text), in sending order."""
    write, query = transport.write, transport.query

    def recorded_write(command, **kwargs):
        sent.append((role, command))
        return write(command, **kwargs)

    def recorded_query(command, **kwargs):
        sent.append((role, command))
        return query(command, **kwargs)

    transport.write, transport.query = recorded_write, recorded_query


def test_supply_is_read_back_while_the_meter_integrates():
    sent: list[tuple[str, str]] = []
    with sim_bench() as (sim, handle):
        _record(sent, "meter", handle.bench.meter.transport)
        _record(sent, "supply", handle.bench.supply.transport)
        outcome = run(plan_for(handle, current_from="resistor"), handle.bench)
    assert outcome.classification == "good"
    # each INIT sent to the meter is followed by the supply's readback before the meter's FETC?
    inits = [k for k, (role, text) in enumerate(sent) if role == "meter" and text == "INIT"]
    assert len(inits) >= len(outcome.points)
    for k in inits:
        after = sent[k + 1:]
        fetch = next(n for n, (role, text) in enumerate(after) if role == "meter" and text == "FETC?")
        assert after[:fetch] == [("supply", "MEAS:VOLT?")]


@pytest.mark.parametrize("fixture,options", [("resistor", {"current_from": "resistor"}), ("resistor", {}),
                                             ("smu", {})])
def test_settling_by_prediction_reads_less_and_agrees(fixture, options):
    results = {}
    for by_prediction in (True, False):
        with sim_bench(fixture) as (sim, handle):
            truth = sim.current_part
            outcome = run(plan_for(handle, settle_by_prediction=by_prediction, **options), handle.bench)
            readings = sim.core.readings_taken
        results[by_prediction] = (outcome, readings)
    (fast, fast_readings), (slow, slow_readings) = results[True], results[False]
    assert fast.classification == slow.classification == "good"
    assert fast_readings < 0.85 * slow_readings, (fast_readings, slow_readings)
    # both against the simulated part's true curve at the bench's ambient (a 250 uA point barely heats it)
    expected = voltage_at_current(truth, 2.5e-4, REFERENCE_TEMPERATURE_K)
    assert abs(fast.vgs_at_ref - expected) < 0.01 and abs(slow.vgs_at_ref - expected) < 0.01
    assert abs(fast.vgs_at_ref - slow.vgs_at_ref) < 0.005
