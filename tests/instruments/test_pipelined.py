"""The pipelined error-queue check (profile flag ``pipeline_error_check``): the exact SCPI text sent, in order.

A setpoint is written without its own error-queue read; the read rides on the next query in the same message
(IEEE 488.2 compound message: units joined by ``;``, the query replies joined by ``;`` in one response), or is
sent on its own before anything else. The expected lines follow the simulated bench's command set
(docs/scpi.md: SCPI-1999 SOURce, READ, STATus:QUEStionable, SYSTem:ERRor, LIST, INITiate, TRACe).
"""

from __future__ import annotations

import time
from dataclasses import replace

import pytest

from benchlab.errors import InstrumentReportedError
from benchlab.sweep.engine import run
from benchlab.sweep.plan import Limits, SweepPlan

from .test_roles import role_setup  # noqa: F401 (a fixture)

E = "SYST:ERR?"
CHECKED_READ = "READ?;:STAT:QUES:COND?;:SYST:ERR?"  # reading, compliance status and the deferred check
PREPARE = "SOUR:CURR:LIM 0.1;:SOUR:FUNC:MODE VOLT;:SENS:CURR:NPLC 0.01;:SENS:VOLT:NPLC 0.01;:SOUR:VOLT 0;:SYST:ERR?"


def _on(profile):
    return replace(profile, pipeline_error_check=True)


def _received(server, expected: list[str]) -> list[str]:
    """The server's lines once it has read as many as expected (a write alone returns before it arrives)."""
    deadline = time.monotonic() + 2.0
    while len(server.lines()) < len(expected) and time.monotonic() < deadline:
        time.sleep(0.005)
    return server.lines()


def _voltage_mode(u):
    u.configure_source("voltage", 0.1)


# (role, given, operation, lines with the flag off, lines with it on, result)
TABLE = [
    ("supply", [], lambda s: s.set_voltage(3.3), ["VOLT 3.3", E], ["VOLT 3.3"], None),
    ("supply", [], lambda s: (s.set_voltage(3.3), s.measure_voltage())[1],
     ["VOLT 3.3", E, "MEAS:VOLT?"], ["VOLT 3.3", "MEAS:VOLT?;:SYST:ERR?"], 4.995),
    ("supply", [], lambda s: (s.set_voltage(1), s.set_voltage(2)),
     ["VOLT 1", E, "VOLT 2", E], ["VOLT 1", E, "VOLT 2"], None),  # checked before the next setpoint goes out
    ("supply", [], lambda s: (s.set_voltage(1), s.set_output(False)),
     ["VOLT 1", E, "OUTP OFF", E], ["VOLT 1", "OUTP OFF", E], None),  # off first, then the queue
    ("supply", [], lambda s: s.set_current_limit(0.25), ["CURR 0.25", E], ["CURR 0.25", E], None),  # never deferred
    ("supply", [], lambda s: s.set_output(True), ["OUTP ON", E], ["OUTP ON", E], None),
    ("supply", [], lambda s: (s.set_voltage(1), s.confirm()), ["VOLT 1", E], ["VOLT 1", E], None),
    ("meter", [], lambda m: m.configure_voltage(), ["CONF:VOLT:DC AUTO", E, "VOLT:DC:NPLC 1", E],
     ["CONF:VOLT:DC AUTO", E, "VOLT:DC:NPLC 1", E], None),
    ("smu", [], lambda u: u.configure_source("voltage", 0.1), ["SOUR:CURR:LIM 0.1", E, "SOUR:FUNC:MODE VOLT", E],
     ["SOUR:CURR:LIM 0.1", E, "SOUR:FUNC:MODE VOLT", E], None),  # the compliance is checked before anything else
    ("smu", [_voltage_mode], lambda u: (u.set_level(2.5), u.measure(), u.in_compliance())[1:],
     ["SOUR:VOLT 2.5", E, "READ?", "STAT:QUES:COND?"], ["SOUR:VOLT 2.5", CHECKED_READ],
     ((2.5, 0.025), False)),  # bit 1 (CURRent) clear in the fake's status 1
    ("smu", [_voltage_mode], lambda u: (u.measure(), u.in_compliance()),
     ["READ?", "STAT:QUES:COND?"], ["READ?;:STAT:QUES:COND?"], ((2.5, 0.025), False)),
    ("smu", [_voltage_mode], lambda u: u.run_list([0.5, 1.0, 1.5], 0.01),
     ["SOUR:LIST:VOLT 0.5,1,1.5", E, "SOUR:LIST:DWEL 0.01", E, "SOUR:VOLT:MODE LIST", E,
      "INIT", E, "*OPC?", "TRAC:DATA?", "SOUR:VOLT:MODE FIX", E],
     ["SOUR:LIST:VOLT 0.5,1,1.5;:SOUR:LIST:DWEL 0.01;:SOUR:VOLT:MODE LIST;:SYST:ERR?",  # settings and check,
      "INIT;*OPC?;:TRAC:DATA?;:SOUR:VOLT:MODE FIX;:SYST:ERR?"],  # then run, fetch, back to fixed, check
     [(0.5, 0.005), (1.0, 0.01), (1.5, 0.015)]),
    # a sweep's start: compliance first, then mode, integration time, level 0; one message and one check when
    # the profile takes compound messages
    ("smu", [], lambda u: u.prepare_source("voltage", 0.1, 0.01),
     ["SOUR:CURR:LIM 0.1", E, "SOUR:FUNC:MODE VOLT", E, "SENS:CURR:NPLC 0.01", E, "SENS:VOLT:NPLC 0.01", E,
      "SOUR:VOLT 0", E], [PREPARE], None),
    ("smu", [], lambda u: u.prepare_source("current", 5.0),
     ["SOUR:VOLT:LIM 5", E, "SOUR:FUNC:MODE CURR", E, "SOUR:CURR 0", E],
     ["SOUR:VOLT:LIM 5;:SOUR:FUNC:MODE CURR;:SOUR:CURR 0;:SYST:ERR?"], None),
]


@pytest.mark.parametrize("pipelined", [False, True], ids=["flag off", "flag on"])
@pytest.mark.parametrize("role, given, operation, off_lines, on_lines, result", TABLE)
def test_exact_scpi_with_and_without_pipelining(role_setup, profiles, pipelined, role, given, operation,  # noqa: F811
                                                off_lines, on_lines, result):
    profile = _on(profiles[role]) if pipelined else profiles[role]
    server, instrument = role_setup(role, profile)
    for step in given:
        step(instrument)
    server.clear_log()
    got = operation(instrument)
    expected = on_lines if pipelined else off_lines
    assert _received(server, expected) == expected
    if result is not None:
        assert got == result


def _refused_setpoint_sent(role_setup, profiles):  # noqa: F811
    """A pipelining SMU that has just written a setpoint the fake refuses (-222, its check still pending)."""
    # SCPI-1999 vol. 2 ch. 21: -222 data out of range, read from the error queue
    server, smu = role_setup("smu", _on(profiles["smu"]))
    server.rejects["SOUR:VOLT 9"] = (-222, "Data out of range")
    smu.configure_source("voltage", 0.1)
    server.clear_log()
    smu.set_level(9)
    return server, smu


def test_a_refused_setpoint_is_raised_with_the_reading_that_carried_its_check(role_setup, profiles):  # noqa: F811
    server, smu = _refused_setpoint_sent(role_setup, profiles)
    with pytest.raises(InstrumentReportedError) as caught:
        smu.measure()
    assert (caught.value.code, caught.value.command) == (-222, "SOUR:VOLT 9")
    assert server.lines() == ["SOUR:VOLT 9", CHECKED_READ, E]  # then the rest of the queue, until empty


def test_a_refused_setpoint_stops_the_next_one_from_going_out(role_setup, profiles):  # noqa: F811
    server, smu = _refused_setpoint_sent(role_setup, profiles)
    with pytest.raises(InstrumentReportedError):
        smu.set_level(1)
    time.sleep(0.05)  # room for a line that must not come
    assert server.lines() == ["SOUR:VOLT 9", E, E]  # the queue read until empty; SOUR:VOLT 1 never sent


SAFE_OFF = ["OUTP OFF", E]  # safe off first (no setpoint to zero before a source mode is chosen)
# compliance before anything is on; one by one with the flag off, one message and one check with it on
SWEEP_START = {False: SAFE_OFF + ["SOUR:CURR:LIM 0.125", E, "SOUR:FUNC:MODE VOLT", E, "SENS:CURR:NPLC 1", E,
                                  "SENS:VOLT:NPLC 1", E, "SOUR:VOLT 0", E],
               True: SAFE_OFF + ["SOUR:CURR:LIM 0.125;:SOUR:FUNC:MODE VOLT;:SENS:CURR:NPLC 1;:SENS:VOLT:NPLC 1;"
                                 ":SOUR:VOLT 0;:SYST:ERR?"]}
ENDS_OFF = ["OUTP OFF", E, "SOUR:VOLT 0", E]


def _sweep_lines(pipelined: bool) -> list[str]:
    if not pipelined:
        point = lambda v: [f"SOUR:VOLT {v}", E, "READ?", "STAT:QUES:COND?"]  # noqa: E731
        return (SWEEP_START[False] + ["OUTP?", "OUTP ON", E] + point(0.5) + point(1)
                + ["SOUR:VOLT 1.5", E, E] + ENDS_OFF)  # the queue read until empty
    point = lambda v: [f"SOUR:VOLT {v}", CHECKED_READ]  # noqa: E731
    return (SWEEP_START[True] + ["OUTP?", "OUTP ON", E] + point(0.5) + point(1)
            + ["SOUR:VOLT 1.5", CHECKED_READ, E] + ENDS_OFF)


@pytest.mark.parametrize("pipelined", [False, True], ids=["flag off", "flag on"])
def test_a_sweep_stops_at_a_refused_setpoint_and_ends_off(role_setup, profiles, pipelined):  # noqa: F811
    # safety invariants (docs/sweeps.md): an instrument error stops the sweep before any further setpoint, the
    # output ends off and the setpoint returns to 0; the two points before the refused one are kept
    server, smu = role_setup("smu", _on(profiles["smu"]) if pipelined else profiles["smu"])
    server.rejects["SOUR:VOLT 1.5"] = (-222, "Data out of range")
    plan = SweepPlan(fixture="smu", limits=Limits(10.0, 0.5, 5.0), mode="voltages", voltages=(0.5, 1.0, 1.5, 2.0),
                     settle_s=0.0, repeat_reading=False)
    points = []
    bench = type("Bench", (), {"smu": smu})()
    with pytest.raises(InstrumentReportedError) as caught:
        run(plan, bench, on_event=lambda e: points.append(e) if type(e).__name__ == "PointMeasured" else None)
    assert caught.value.code == -222
    assert len(points) == 2
    assert _received(server, _sweep_lines(pipelined)) == _sweep_lines(pipelined)


def _list_lines(pipelined: bool) -> list[str]:
    """A list sweep of four levels in lists of two whose second upload the instrument refuses."""
    if not pipelined:
        settings = lambda values: [f"SOUR:LIST:VOLT {values}", E, "SOUR:LIST:DWEL 0", E,  # noqa: E731
                                   "SOUR:VOLT:MODE LIST", E]
        return (SWEEP_START[False] + ["OUTP ON", E] + settings("0.5,1")
                + ["INIT", E, "*OPC?", "TRAC:DATA?", "SOUR:VOLT:MODE FIX", E]
                + ["SOUR:LIST:VOLT 1.5,2", E, E] + ENDS_OFF)  # refused: the queue read until empty, then off
    settings = lambda values: [f"SOUR:LIST:VOLT {values};:SOUR:LIST:DWEL 0;:SOUR:VOLT:MODE LIST;:SYST:ERR?"]  # noqa
    return (SWEEP_START[True] + ["OUTP ON", E] + settings("0.5,1")
            + ["INIT;*OPC?;:TRAC:DATA?;:SOUR:VOLT:MODE FIX;:SYST:ERR?"]
            + settings("1.5,2") + [E] + ENDS_OFF)


class _Recorder:
    """Notes, in one list with the messages the SMU sends, when each point is handed over to be stored."""

    def __init__(self, events: list):
        self.events = events

    def append(self, point) -> None:
        self.events.append(("stored", point.point))

    def finish(self, outcome) -> None:
        self.events.append(("finished", outcome.complete))


def _watch_messages(smu, events: list) -> None:
    for name in ("write", "query"):
        original = getattr(smu.transport, name)

        def sent(command, *args, _original=original, **kwargs):
            events.append(("sent", command))
            return _original(command, *args, **kwargs)

        setattr(smu.transport, name, sent)


@pytest.mark.parametrize("pipelined", [False, True], ids=["flag off", "flag on"])
def test_a_list_sweep_stores_each_list_before_the_next_and_stops_at_a_refused_upload(role_setup, profiles,  # noqa: F811
                                                                                     pipelined):
    # safety invariants (docs/sweeps.md): the compliance is set and checked before the output goes on, a list's
    # readings are on disk before any further list or setpoint is sent, a refused command stops the sweep before
    # the list is started (INIT goes out once, for the first list), and the output ends off with the level at 0.
    # -222 "Data out of range": SCPI-1999 vol. 2, ch. 21 (chapter from memory)
    server, smu = role_setup("smu", _on(profiles["smu"]) if pipelined else profiles["smu"])
    server.rejects["SOUR:LIST:VOLT 1.5"] = (-222, "Data out of range")
    plan = SweepPlan(fixture="smu", limits=Limits(10.0, 0.5, 5.0), mode="voltages", voltages=(0.5, 1.0, 1.5, 2.0),
                     settle_s=0.0, repeat_reading=False, use_list=True, list_chunk=2)
    events: list = []
    _watch_messages(smu, events)
    with pytest.raises(InstrumentReportedError) as caught:
        run(plan, type("Bench", (), {"smu": smu})(), recorder=_Recorder(events))
    assert caught.value.code == -222
    expected = _list_lines(pipelined)
    assert _received(server, expected) == expected
    sent = [text for kind, text in events if kind == "sent"]
    assert sum("INIT" in text for text in sent) == 1
    second_upload = next(k for k, (kind, text) in enumerate(events) if kind == "sent" and "1.5,2" in str(text))
    stored = [k for k, (kind, _) in enumerate(events) if kind == "stored"]
    assert len(stored) == 2 and max(stored) < second_upload  # the first list's two points, both before it


@pytest.mark.parametrize("pipelined", [False, True], ids=["flag off", "flag on"])
def test_a_refused_compliance_leaves_the_output_off(role_setup, profiles, pipelined):  # noqa: F811
    # safety invariant: a refused setting at the start stops the sweep before anything is powered; with the flag
    # on the batch's later settings were applied (an execution error does not drop the rest of a message), but
    # output on never goes out. -222 "Data out of range": SCPI-1999 vol. 2, ch. 21 (chapter from memory)
    server, smu = role_setup("smu", _on(profiles["smu"]) if pipelined else profiles["smu"])
    server.rejects["SOUR:CURR:LIM"] = (-222, "Data out of range")
    plan = SweepPlan(fixture="smu", limits=Limits(10.0, 0.5, 5.0), mode="voltages", voltages=(0.5, 1.0),
                     settle_s=0.0, repeat_reading=False, use_list=True)
    with pytest.raises(InstrumentReportedError) as caught:
        run(plan, type("Bench", (), {"smu": smu})())
    assert caught.value.code == -222
    expected = SAFE_OFF + (["SOUR:CURR:LIM 0.125", E] if not pipelined else SWEEP_START[True][2:]) + [E] + SAFE_OFF
    assert _received(server, expected) == expected  # no mode was accepted: no level to return to 0


def test_a_command_error_in_a_batch_is_raised_from_the_queue_after_the_dropped_check():
    # IEEE 488.2 (docs/scpi.md): a command error (-1xx) discards the rest of its message, the error query with
    # it; the unanswered query times out and the queue gives the error. -113 "Undefined header": SCPI-1999
    # vol. 2, ch. 21 (chapter from memory)
    from benchlab import sim
    from benchlab.instruments.bench import open_bench
    from benchlab.instruments.config import simulator_bench_config

    bench = sim.SimBench(sim.SimConfig(fixture="smu", time_scale=0.0, faults=("error@smu=SOUR:FUNC:MODE/-113",)))
    bench.start(first_port=0)
    try:
        config = simulator_bench_config(bench.resources, fixture="smu")
        short = {role: replace(spec, timeout_ms=200) for role, spec in config.instruments.items()}
        with open_bench(replace(config, instruments=short)) as lab:
            lab.smu.profile = _on(lab.smu.profile)
            with pytest.raises(InstrumentReportedError) as caught:
                lab.smu.prepare_source("voltage", 0.1, 1.0)
            assert caught.value.code == -113
            assert caught.value.command.startswith("SOUR:CURR:LIM 0.1;:SOUR:FUNC:MODE VOLT")
            assert lab.smu.mode is None  # not taken as configured
    finally:
        bench.stop()
    assert bench.log.output_history("smu") in ([], [False])  # nothing was switched on
