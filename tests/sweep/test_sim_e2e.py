"""End to end against the simulated bench over TCP (pyvisa-py): bags, duds, sessions, every simulator fault."""

from __future__ import annotations

import numpy as np
import pytest

from benchlab.errors import BenchlabError, InstrumentError
from benchlab.services.characterize import sweep_bag, sweep_part
from benchlab.sim.physics import voltage_at_current
from benchlab.sweep.session import SessionWriter, read_session, read_sweep

from .simhelp import EXPECTED_CLASS, only_session, plan_for, sim_bench, source_role


@pytest.mark.parametrize("fixture,current_from", [("resistor", "meter"), ("resistor", "resistor"), ("smu", None)])
def test_bag_swept_duds_classified_session_reread(tmp_path, fixture, current_from):
    # bag of 6: the simulator places one open, one shorted and one leaky part in it
    with sim_bench(fixture, bag_size=6, seed=3) as (sim, handle):
        truth = {p.label: p for p in sim.bag}
        temps = {}
        plan = plan_for(handle, current_from=current_from)
        result = sweep_bag(handle, plan, sessions_root=tmp_path, lot="e2e", count=6,
                           on_event=lambda e: temps.setdefault(e.label, sim.temperature_k))
        assert sim.log.last_output_state(source_role(handle)) is False
    assert {p.kind for p in truth.values()} >= {"open", "short", "leaky", "good"}
    by_label = {o.label: o for o in result.outcomes}
    assert list(by_label) == [f"Q0{k}" for k in range(1, 7)]
    for label, outcome in by_label.items():
        assert outcome.complete
        assert outcome.classification == EXPECTED_CLASS[truth[label].kind], (label, outcome.reason)
        if truth[label].kind == "good":
            # VGS(th) as datasheets define it: VGS at 250 uA with VDS = VGS (common practice); the
            # simulator's part at its temperature during the sweep is the reference
            # (the resistor-drop current resolves only about 1 mV / 47 ohm = 21 uA: a looser match)
            expected = voltage_at_current(truth[label], 250e-6, temps[label])
            assert outcome.vgs_at_ref == pytest.approx(expected, abs=0.01 if current_from != "resistor" else 0.03)
    session = read_session(result.session_path)
    assert session.meta["parts"] == list(by_label)
    assert session.meta["instruments"][source_role(handle)].startswith("BENCHLAB-SIM,")
    for label, sweep in session.sweeps.items():
        assert sweep.complete and not sweep.truncated
        assert len(sweep.vgs) == len(by_label[label].points) == sweep.meta["points"]
        assert sweep.meta["classification"] == by_label[label].classification
        assert list(sweep.vgs) == pytest.approx([p.vgs for p in by_label[label].points])


def test_resume_sweeps_only_the_parts_not_done(tmp_path):
    with sim_bench(bag_size=6, seed=3) as (sim, handle):
        first = sweep_bag(handle, plan_for(handle), sessions_root=tmp_path, lot="resume", count=2)
    with sim_bench(bag_size=6, seed=3) as (sim, handle):
        second = sweep_bag(handle, plan_for(handle), resume=first.session_path, count=4)
    assert [o.label for o in first.outcomes] == ["Q01", "Q02"]
    assert second.skipped == ("Q01", "Q02")
    assert [o.label for o in second.outcomes] == ["Q03", "Q04"]
    assert read_session(first.session_path).meta["parts"] == ["Q01", "Q02", "Q03", "Q04"]


def run_faulted(tmp_path, faults, *, timeout_ms=400, fixture="resistor", **plan_options):
    """Sweep one part with ``faults`` injected; return (was on, last output state, error, outcome, sweep,
    whether the last setpoint the source received was 0)."""
    with sim_bench(fixture, timeout_ms=timeout_ms, faults=faults) as (sim, handle):
        session = SessionWriter.create(tmp_path, "fault")
        error = outcome = None
        try:
            outcome = sweep_part(handle, plan_for(handle, **plan_options), session, "Q01")
        except BenchlabError as exc:
            error = exc
        role = source_role(handle)
        was_on = sim.log.output_was_ever_on(role)
        last = sim.log.last_output_state(role)
        setpoints = [c for c in sim.log.commands(role) if c.startswith(("VOLT ", "SOUR:VOLT ", "SOUR:CURR "))]
    sweep = read_sweep(only_session(tmp_path) / "Q01.csv")
    zeroed = bool(setpoints) and float(setpoints[-1].split()[1]) == 0.0  # the setpoint went back to 0
    return was_on, last, error, outcome, sweep, zeroed


# (fault spec, text the one-line error must hold). Counts are messages, placed so the fault lands mid-sweep.
INSTRUMENT_FAULTS = [
    ("mute@meter=150", "no reply"),  # the meter stops replying
    ("mute@supply=50", "no reply"),  # the supply still executes but stops replying: off must still happen
    ("hang@meter=150", "no reply"),  # the meter neither executes nor replies
    ("error@meter=CONF:CURR/-221", "-221"),  # a command refused with an SCPI error, once the output is on
    # every reply 0.6 s late against a 0.4 s timeout: the late replies must not be read as later answers
    ("slow@meter=0.6/150", "no reply to '"),
]


@pytest.mark.parametrize("fault,message", INSTRUMENT_FAULTS)
def test_instrument_faults_end_with_output_off_and_points_on_disk(tmp_path, fault, message):
    was_on, last, error, outcome, sweep, zeroed = run_faulted(tmp_path, [fault])
    assert was_on, "the fault must strike after the output was switched on"
    assert last is False and zeroed  # proved from the simulator's own log: output off, setpoint back to 0
    assert isinstance(error, InstrumentError)
    assert message in str(error) and "\n" not in str(error)  # one clear line
    assert sweep.meta["complete"] is False and sweep.meta["error"]
    assert len(sweep.vgs) == sweep.meta["points"]  # every point measured before the fault is on disk
    # a supply that does not answer cannot confirm the off command: that is reported, not hidden
    assert bool(sweep.meta["shutdown_problems"]) == ("@supply" in fault)


# The same faults on a source-measure unit (counts placed after its output is switched on).
SMU_FAULTS = [
    ("mute@smu=60", "no reply"),
    ("error@smu=READ?/-230", "-230"),
    ("slow@smu=0.6/60", "no reply to 'READ?'"),
]


@pytest.mark.parametrize("fault,message", SMU_FAULTS)
def test_smu_faults_end_with_output_off_and_points_on_disk(tmp_path, fault, message):
    was_on, last, error, outcome, sweep, zeroed = run_faulted(tmp_path, [fault], fixture="smu")
    assert was_on and last is False and zeroed  # from the simulator's log
    assert isinstance(error, InstrumentError) and message in str(error) and "\n" not in str(error)
    assert sweep.meta["complete"] is False and len(sweep.vgs) == sweep.meta["points"]


@pytest.mark.parametrize("fixture", ["resistor", "smu"])
def test_one_garbled_reply_is_asked_again_two_in_a_row_stop_the_sweep(tmp_path, fixture):
    role = "meter" if fixture == "resistor" else "smu"
    was_on, last, error, outcome, sweep, zeroed = run_faulted(tmp_path / "one", [f"garble@{role}=40"], fixture=fixture)
    assert error is None and outcome.complete and last is False
    (tmp_path / "two").mkdir()
    was_on, last, error, outcome, sweep, zeroed = run_faulted(tmp_path / "two", [f"garble@{role}=40", f"garble@{role}=41"],
                                                              fixture=fixture)
    assert was_on and last is False and zeroed  # from the simulator's log
    assert isinstance(error, InstrumentError) and "unexpected" in str(error) and "\n" not in str(error)
    assert sweep.meta["complete"] is False and len(sweep.vgs) == sweep.meta["points"]


def test_supply_that_hangs_is_reported_as_possibly_still_on(tmp_path):
    # A hung supply executes nothing, not even OUTP OFF: the simulator's log shows the output left on.
    # The tool cannot fix that; it must not claim the output is off, and it says so in the record.
    was_on, last, error, outcome, sweep, zeroed = run_faulted(tmp_path, ["hang@supply=50"])
    assert was_on and last is True
    assert isinstance(error, InstrumentError) and "no reply" in str(error)
    assert sweep.meta["complete"] is False and len(sweep.vgs) == sweep.meta["points"]
    problems = " ".join(sweep.meta["shutdown_problems"])
    assert "switching the supply output off failed" in problems


def test_slow_replies_within_the_timeout_still_complete(tmp_path):
    was_on, last, error, outcome, sweep, zeroed = run_faulted(tmp_path, ["slow@supply=0.01"], start_v=2.0)
    assert error is None and was_on and last is False and zeroed
    assert outcome.complete and sweep.meta["complete"] and outcome.classification == "good"


@pytest.mark.parametrize("fault", ["drop@meter=120", "drop@supply=61"])
def test_dropped_connection_is_reopened_and_the_sweep_goes_on(tmp_path, fault):
    # a lost connection is reopened once and the message sent again (every sweep message may be repeated)
    was_on, last, error, outcome, sweep, zeroed = run_faulted(tmp_path, [fault])
    assert error is None and was_on and last is False and zeroed
    assert outcome.complete and sweep.meta["complete"] and outcome.classification == "good"
    assert list(sweep.point) == list(range(len(outcome.points)))  # no point lost or doubled


@pytest.mark.parametrize("kind,expected", [("open", "open"), ("short", "shorted")])
@pytest.mark.parametrize("fixture", ["resistor", "smu"])
def test_part_failing_mid_sweep_is_classified_and_stopped(tmp_path, kind, expected, fixture):
    readings = 62 if fixture == "resistor" else 60  # readings per point differ: land it above threshold
    was_on, last, error, outcome, sweep, zeroed = run_faulted(tmp_path, [f"{kind}={readings}"], fixture=fixture)
    assert error is None and was_on and last is False and zeroed
    assert outcome.classification == expected
    assert f"failed {kind}" in outcome.reason and "during the sweep" in outcome.reason
    assert sweep.meta["classification"] == expected and len(sweep.vgs) == len(outcome.points)


def test_smu_forcing_currents_measures_vgs_at_250ua(tmp_path):
    with sim_bench("smu") as (sim, handle):
        part = sim.current_part
        outcome = sweep_part(handle, plan_for(handle, mode="currents", points=9, min_current_a=1e-5,
                                              max_current_a=0.1), SessionWriter.create(tmp_path, "cur"), "Q01")
        temperature = sim.temperature_k
    expected = np.geomspace(1e-5, 0.1, 9)
    expected[3] = 250e-6  # the target nearest 250 uA is moved onto it
    assert [p.id for p in outcome.points] == pytest.approx(list(expected), rel=1e-3)
    # datasheet VGS(th): VGS at 250 uA with VDS = VGS (common practice); the 250 uA point is forced exactly,
    # so the value is that point's reading (to the SMU's current-reading noise), not an interpolation
    assert outcome.vgs_at_ref == pytest.approx(outcome.points[3].vgs, abs=1e-4)
    assert outcome.vgs_at_ref == pytest.approx(voltage_at_current(part, 250e-6, temperature), abs=0.01)


def test_smu_list_sweep_runs_in_uploaded_chunks(tmp_path):
    volts = [round(0.25 * k, 2) for k in range(15)]  # 0 .. 3.5 V
    with sim_bench("smu") as (sim, handle):
        outcome = sweep_part(handle, plan_for(handle, voltages=volts, use_list=True),
                             SessionWriter.create(tmp_path, "list"), "Q01")
        uploads = [c for c in sim.log.commands("smu")
                   if c.upper().startswith(("LIST:VOLT ", "SOUR:LIST:VOLT "))]
        assert sim.log.last_output_state("smu") is False
    # up to 2.75 V the part stays below the 62.5 mA compliance; at 3 V it hits it and the sweep stops
    # after that list, keeping every reading the list returned
    below = [p for p in outcome.points if p.status == "ok"]
    assert [p.vgs for p in below] == pytest.approx(volts[:len(below)], abs=1e-3) and len(below) >= 8
    assert outcome.points[len(below)].status == "compliance" and "compliance" in outcome.stop_reason
    assert len(outcome.points) == 15 and len(uploads) == 2  # 15 setpoints in lists of 8, all returned
    assert outcome.classification == "good"


def test_pulsed_sweep_on_the_simulator_switches_per_point(tmp_path):
    with sim_bench() as (sim, handle):
        outcome = sweep_part(handle, plan_for(handle, pulsed_duty=0.2, start_v=2.0),
                             SessionWriter.create(tmp_path, "pulse"), "Q01")
        history = sim.log.output_history("supply")
    assert history.count(True) == len(outcome.points) and history[-1] is False
    assert 0 < outcome.powered_s < outcome.elapsed_s
    assert read_sweep(only_session(tmp_path) / "Q01.json").meta["powered_s"] == pytest.approx(outcome.powered_s,
                                                                                           abs=1e-5)
