"""Safety limits proved from the simulated bench's own log (over TCP, pyvisa-py): the current limit or
compliance reaches the instrument before its output is first switched on, no setpoint beyond the limits
is ever sent, and no reading shows the part taking more current or power than allowed."""

from __future__ import annotations

import re

import pytest

from benchlab.services.characterize import sweep_part
from benchlab.sweep.plan import Limits
from benchlab.sweep.session import SessionWriter

from .simhelp import plan_for, sim_bench, source_role

# Tight enough that each one can bind on the simulator's power MOSFETs (VGS about 2-3 V above 10 mA).
LIMITS = Limits(max_supply_v=6.0, max_drain_a=0.08, max_power_w=0.12)

# The commands the generic profiles send for these settings (drivers/generic-scpi-*.toml).
LIMIT_COMMAND = {"supply": r"CURR ([-+0-9.eE]+)$", "smu": r"SOUR:CURR:LIM ([-+0-9.eE]+)$"}
SETPOINT_COMMAND = {"supply": r"VOLT ([-+0-9.eE]+)$", "smu": r"SOUR:VOLT ([-+0-9.eE]+)$"}


def values(commands, pattern):
    return [(n, float(m.group(1))) for n, c in enumerate(commands) if (m := re.match(pattern, c))]


@pytest.mark.parametrize("fixture", ["resistor", "smu"])
@pytest.mark.parametrize("max_current_a", [0.02, 0.075])  # a current-bound sweep and a power-bound one
def test_limits_hold_on_the_simulators_log(tmp_path, fixture, max_current_a):
    with sim_bench(fixture, bag_size=1) as (sim, handle):
        plan = plan_for(handle, limits=LIMITS, max_current_a=max_current_a)
        outcome = sweep_part(handle, plan, SessionWriter.create(tmp_path, "limits"), "Q01")
        role = source_role(handle)
        commands = sim.log.commands(role)
        assert sim.log.last_output_state(role) is False
    first_on = commands.index("OUTP ON")
    limits_sent = values(commands, LIMIT_COMMAND[role])
    setpoints = values(commands, SETPOINT_COMMAND[role])
    # the limit is on the instrument before the output is first enabled, and never above max_drain_a
    assert limits_sent and limits_sent[0][0] < first_on
    assert all(0 < amps <= LIMITS.max_drain_a for _, amps in limits_sent)
    # every voltage setpoint within max_supply_v
    assert setpoints and all(0 <= volts <= LIMITS.max_supply_v for _, volts in setpoints)
    # what the part really took (the meter's readings; power in a two-terminal part is V x I, common
    # practice): within the current and power limits, up to the readings' noise
    taken = [p for p in outcome.points if p.status in ("ok", "probe")]
    assert max(p.id for p in taken) <= LIMITS.max_drain_a * 1.01
    assert max(p.id for p in taken) > 0.5 * min(max_current_a, LIMITS.max_power_w / 3)  # it did conduct
    assert max(p.id * p.vgs for p in taken) <= LIMITS.max_power_w * 1.01
    if max_current_a > 0.05:  # 75 mA at about 2.5 V is 0.19 W: the power limit must have stopped it
        assert max(p.id * p.vgs for p in taken) > 0.5 * LIMITS.max_power_w
        assert "max_power_w" in outcome.stop_reason, outcome.stop_reason
    assert outcome.classification == "good"
