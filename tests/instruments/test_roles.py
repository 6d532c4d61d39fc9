"""Role classes over the generic profiles: the exact SCPI text of each operation, errors, readings.

The expected lines follow the simulated bench's command set (docs/scpi.md), which uses the
standard SCPI-1999 command trees (SOURce, MEASure, CONFigure, SENSe, OUTPut, SYSTem:ERRor).
"""

from __future__ import annotations

import math

import pytest

from benchlab.errors import InputError, InstrumentError, InstrumentReportedError
from benchlab.instruments.profiles import parse_profile
from benchlab.instruments.scpi_roles import ScpiMeter, ScpiSmu, ScpiSupply
from benchlab.instruments.transport import VisaTransport

from .conftest import SHORT_TIMEOUT_MS, TEST_TIMEOUT_MS
from .fake_scpi import FakeScpiServer

E = "SYST:ERR?"  # read after every setting
CLASSES = {"supply": ScpiSupply, "meter": ScpiMeter, "smu": ScpiSmu}


def _trace_data(_query: str, server: FakeScpiServer) -> str:
    levels = [float(v) for v in server.settings["SOUR:LIST:VOLT"].split(",")]
    return ",".join(f"{v:g},{v * 0.01:g}" for v in levels)  # a 100 ohm load, for the test only


def _server_for(role: str) -> FakeScpiServer:
    server = FakeScpiServer()
    server.settings.update({"OUTP": "0"})
    if role == "supply":
        server.replies.update({"MEAS:VOLT?": "4.995", "MEAS:CURR?": "0.0125"})
    elif role == "meter":
        server.replies.update({"READ?": "1.234E0"})
    else:
        # QUEStionable condition 1: bit 0 (VOLTage) set, bit 1 (CURRent) clear (SCPI-1999 status reporting)
        server.replies.update({"READ?": "2.5,0.025", "STAT:QUES:COND?": "1",
                               "TRAC:DATA?": lambda q: _trace_data(q, server)})
    return server


@pytest.fixture
def role_setup(resource_manager, profiles):
    opened = []

    def make(role: str, profile=None, timeout_ms: int = TEST_TIMEOUT_MS):
        server = _server_for(role).start()
        link = VisaTransport(resource_manager, server.resource, timeout_ms=timeout_ms).open()
        opened.append((server, link))
        return server, CLASSES[role](link, profile or profiles[role])

    yield make
    for server, link in opened:
        link.close()
        server.stop()


# operation -> expected lines, per generic profile (the "given" calls run first and are not checked)
TABLE = [
    ("supply", [], lambda s: s.connect(), ["*IDN?", "*CLS", E], "BENCHLAB-SIM,FAKE-1,0001,1.0"),
    ("supply", [], lambda s: s.connect(reset=True), ["*IDN?", "*CLS", E, "*RST", E, "*OPC?"], None),
    ("supply", [], lambda s: s.set_current_limit(0.25), ["CURR 0.25", E], None),
    ("supply", [], lambda s: s.set_voltage(3.3), ["VOLT 3.3", E], None),
    ("supply", [], lambda s: s.set_voltage(1e-4), ["VOLT 0.0001", E], None),
    ("supply", [], lambda s: s.set_output(True), ["OUTP ON", E], None),
    ("supply", [], lambda s: s.set_output(False), ["OUTP OFF", E], None),
    ("supply", [], lambda s: s.output_is_on(), ["OUTP?"], False),
    ("supply", [], lambda s: s.measure_voltage(), ["MEAS:VOLT?"], 4.995),
    ("supply", [], lambda s: s.measure_current(), ["MEAS:CURR?"], 0.0125),
    ("supply", [lambda s: s.set_voltage(2)], lambda s: s.voltage_setpoint(), ["VOLT?"], 2.0),
    ("supply", [lambda s: s.set_current_limit(0.5)], lambda s: s.current_limit(), ["CURR?"], 0.5),
    ("supply", [], lambda s: s.safe_off(), ["OUTP OFF", E], None),
    ("supply", [], lambda s: s.close(), [], None),
    ("meter", [], lambda m: m.configure_voltage(), ["CONF:VOLT:DC AUTO", E, "VOLT:DC:NPLC 1", E], None),
    ("meter", [], lambda m: m.configure_voltage(10, nplc=10), ["CONF:VOLT:DC 10", E, "VOLT:DC:NPLC 10", E], None),
    ("meter", [], lambda m: m.configure_current(0.1, nplc=0.5), ["CONF:CURR:DC 0.1", E, "CURR:DC:NPLC 0.5", E], None),
    ("meter", [], lambda m: m.configure_current(None, nplc=2), ["CONF:CURR:DC AUTO", E, "CURR:DC:NPLC 2", E], None),
    ("meter", [], lambda m: m.read(), ["READ?"], 1.234),
    ("meter", [lambda m: m.configure_voltage(None, nplc=5)], lambda m: m.nplc_setting(), ["VOLT:DC:NPLC?"], 5.0),
    ("meter", [], lambda m: m.close(), [], None),
    ("smu", [], lambda u: u.configure_source("voltage", 0.1),
     ["SOUR:CURR:LIM 0.1", E, "SOUR:FUNC:MODE VOLT", E], None),  # SCPI-1999 SOURce: the limit, then the function
    ("smu", [], lambda u: u.configure_source("current", 5),
     ["SOUR:VOLT:LIM 5", E, "SOUR:FUNC:MODE CURR", E], None),
    ("smu", [lambda u: u.configure_source("voltage", 0.1)], lambda u: u.set_level(2.5),
     ["SOUR:VOLT 2.5", E], None),
    ("smu", [lambda u: u.configure_source("current", 5)], lambda u: u.set_level(0.002),
     ["SOUR:CURR 0.002", E], None),
    ("smu", [], lambda u: u.set_nplc(2), ["SENS:CURR:NPLC 2", E, "SENS:VOLT:NPLC 2", E], None),
    ("smu", [], lambda u: u.set_output(True), ["OUTP ON", E], None),
    ("smu", [], lambda u: u.output_is_on(), ["OUTP?"], False),
    ("smu", [], lambda u: u.measure(), ["READ?"], (2.5, 0.025)),
    ("smu", [lambda u: u.configure_source("voltage", 0.1)], lambda u: u.in_compliance(),
     ["STAT:QUES:COND?"], False),  # bit 1 (CURRent) clear
    ("smu", [lambda u: u.configure_source("current", 5)], lambda u: u.in_compliance(),
     ["STAT:QUES:COND?"], True),  # bit 0 (VOLTage) set
    ("smu", [lambda u: u.configure_source("voltage", 0.1)], lambda u: u.compliance(),
     ["SOUR:CURR:LIM?"], 0.1),
    ("smu", [lambda u: u.configure_source("voltage", 0.1)], lambda u: u.run_list([0.5, 1.0, 1.5], 0.01),
     ["SOUR:LIST:VOLT 0.5,1,1.5", E, "SOUR:LIST:DWEL 0.01", E, "SOUR:VOLT:MODE LIST", E,
      "INIT", E, "*OPC?", "TRAC:DATA?", "SOUR:VOLT:MODE FIX", E],
     [(0.5, 0.005), (1.0, 0.01), (1.5, 0.015)]),
    ("smu", [], lambda u: u.close(), [], None),
]


@pytest.mark.parametrize("role, given, operation, expected_lines, expected_result", TABLE)
def test_operation_sends_exact_scpi(role_setup, role, given, operation, expected_lines, expected_result):
    server, instrument = role_setup(role)
    for step in given:
        step(instrument)
    server.clear_log()
    result = operation(instrument)
    assert server.lines() == expected_lines
    if expected_result is not None:
        assert result == expected_result


def test_no_operation_switches_an_output_it_was_not_asked_to(role_setup):
    # Everything except set_output/safe_off must leave the output alone.
    server, supply = role_setup("supply")
    supply.connect()
    supply.set_current_limit(0.1)
    supply.set_voltage(1.0)
    supply.measure_voltage()
    supply.close()
    assert not any(line.startswith("OUTP") and line != "OUTP?" for line in server.lines())


def test_error_queue_becomes_exception_with_code_text_and_command(role_setup):
    server, supply = role_setup("supply")
    server.rejects["VOLT 99"] = (-222, "Data out of range")
    with pytest.raises(InstrumentReportedError) as caught:
        supply.set_voltage(99)
    error = caught.value
    assert (error.code, error.text, error.command) == (-222, "Data out of range", "VOLT 99")
    assert error.resource == server.resource
    assert server.errors == type(server.errors)()  # the queue was read until empty


def test_several_queued_errors_are_all_read_and_counted(role_setup):
    server, meter = role_setup("meter")
    server.rejects["VOLT:DC:NPLC 500"] = [(-221, "Settings conflict"), (-222, "Data out of range")]
    with pytest.raises(InstrumentReportedError, match="and 1 more") as caught:
        meter.configure_voltage(None, nplc=500)
    assert caught.value.code == -221  # oldest first (SCPI-1999 Vol. 2, error/event queue: the queue is FIFO)
    assert server.lines()[-3:] == [E, E, E]


def test_instrument_specific_code_keeps_its_own_text(role_setup):
    server, supply = role_setup("supply")
    server.rejects["OUTP ON"] = (301, "Over-temperature: output disabled")
    with pytest.raises(InstrumentReportedError) as caught:
        supply.set_output(True)
    assert (caught.value.code, caught.value.text) == (301, "Over-temperature: output disabled")


@pytest.mark.parametrize("reply, check", [
    # SCPI-1999 Vol. 1, numeric data (INF/NINF/NAN; section number from memory: 7.2.1.5): over-range reads +INF
    # (9.9E37), -INF (-9.9E37), NaN (9.91E37).
    ("9.9E37", lambda v: v == math.inf),
    ("-9.9E37", lambda v: v == -math.inf),
    ("9.91E37", math.isnan),
])
def test_meter_special_readings(role_setup, reply, check):
    server, meter = role_setup("meter")
    server.replies["READ?"] = reply
    assert check(meter.read())


def test_smu_special_reading_in_a_pair(role_setup):
    server, smu = role_setup("smu")
    server.replies["READ?"] = "9.91E37,9.9E37"
    volts, amps = smu.measure()
    assert math.isnan(volts) and amps == math.inf


def test_setting_lost_in_a_reset_is_sent_again(role_setup):
    server, supply = role_setup("supply")
    server.fault("VOLT 2", "reset")
    supply.set_voltage(2.0)
    assert server.settings["VOLT"] == "2"
    assert server.lines() == ["VOLT 2", E, "VOLT 2", E]


def test_unexpected_reply_is_a_clear_error(role_setup):
    server, supply = role_setup("supply")
    server.replies["MEAS:VOLT?"] = "CV"
    with pytest.raises(InstrumentError, match="unexpected reply 'CV'"):
        supply.measure_voltage()


def test_role_and_profile_must_match(transport, profiles):
    with pytest.raises(InputError, match="is for role meter, not supply"):
        ScpiSupply(transport, profiles["meter"])


def test_level_before_source_mode_is_refused(role_setup):
    server, smu = role_setup("smu")
    with pytest.raises(InstrumentError, match="configure_source"):
        smu.set_level(1.0)
    assert server.lines() == []


def test_list_longer_than_the_instrument_takes_is_refused_before_sending(role_setup, profiles):
    server, smu = role_setup("smu")
    smu.configure_source("voltage", 0.1)
    server.clear_log()
    too_many = profiles["smu"].list_settings["max_points"] + 1
    with pytest.raises(InputError, match="longer than the instrument takes"):
        smu.run_list([0.1] * too_many, 0.001)
    assert server.lines() == []


def test_short_buffer_is_an_error(role_setup):
    server, smu = role_setup("smu")
    smu.configure_source("voltage", 0.1)
    server.replies["TRAC:DATA?"] = "0.5,0.005"
    with pytest.raises(InstrumentError, match="expected 2 reading"):
        smu.run_list([0.5, 1.0], 0.0)


def test_a_user_profile_changes_the_text_without_code(role_setup):
    # A supply with long-form, differently formatted commands, as a user would describe it.
    custom = parse_profile({
        "format_version": 1, "role": "supply", "description": "long-form test supply",
        "limits": {"max_voltage": 60.0, "max_current": 5.0},
        "commands": {
            "set_voltage": ":SOURce:VOLTage:LEVel:IMMediate:AMPLitude {volts:.4f}",
            "set_current_limit": [":SOURce:CURRent:PROTection:STATe ON", ":SOURce:CURRent {amps:.4f}"],
            "output_on": ":OUTPut:STATe 1", "output_off": ":OUTPut:STATe 0", "output_state": ":OUTPut:STATe?",
            "measure_voltage": ":MEASure:VOLTage:DC?", "measure_current": ":MEASure:CURRent:DC?",
            "error_query": ":SYSTem:ERRor:NEXT?",
        },
    }, name="long-form-supply")
    server, supply = role_setup("supply", custom)
    supply.set_current_limit(0.125)
    supply.set_voltage(5)
    assert server.lines() == [":SOURce:CURRent:PROTection:STATe ON", ":SYSTem:ERRor:NEXT?",
                              ":SOURce:CURRent 0.1250", ":SYSTem:ERRor:NEXT?",
                              ":SOURce:VOLTage:LEVel:IMMediate:AMPLitude 5.0000", ":SYSTem:ERRor:NEXT?"]


def test_refused_query_reports_the_instruments_error_not_a_bare_timeout(role_setup):
    server, supply = role_setup("supply", timeout_ms=SHORT_TIMEOUT_MS)
    # The fake, like an instrument, queues -113 for an unknown query and sends no reply.
    with pytest.raises(InstrumentReportedError) as caught:
        supply.voltage_setpoint()  # "VOLT?" before any VOLT was set: unknown to the fake
    assert (caught.value.code, caught.value.text, caught.value.command) == (-113, "Undefined header", "VOLT?")


def test_role_classes_satisfy_the_role_interfaces(role_setup):
    from benchlab.instruments.roles import Meter, SourceMeasureUnit, Supply

    assert isinstance(role_setup("supply")[1], Supply)
    assert isinstance(role_setup("meter")[1], Meter)
    assert isinstance(role_setup("smu")[1], SourceMeasureUnit)


class ScriptedTransport:
    """An in-memory transport: replies from a dict, every message recorded (no pyvisa, no socket)."""

    resource = "memory://meter"

    def __init__(self, replies):
        self.replies = replies
        self.sent = []

    def write(self, command, *, idempotent=True):
        self.sent.append(command)

    def query(self, command, *, idempotent=True, timeout_ms=None):
        self.sent.append(command)
        return self.replies.get(command, '+0,"No error"')

    def close(self):
        self.sent.append("<closed>")


def test_transport_is_injected(profiles):
    from benchlab.instruments.transport import Transport

    link = ScriptedTransport({"*IDN?": "BENCHLAB-SIM,DMM-1,9,1", "READ?": "-9.9E37"})
    assert isinstance(link, Transport)
    meter = ScpiMeter(link, profiles["meter"])
    assert meter.connect() == "BENCHLAB-SIM,DMM-1,9,1"
    meter.configure_current(3, nplc=1)
    assert meter.read() == -math.inf
    meter.close()
    assert link.sent == ["*IDN?", "*CLS", E, "CONF:CURR:DC 3", E, "CURR:DC:NPLC 1", E, "READ?", "<closed>"]
