"""SCPI conformance of the simulated instruments, over real TCP through pyvisa-py.

Sources: IEEE Std 488.2-1992 (common commands, status reporting, message exchange) and
SCPI-1999 vol. 1 (headers: short/long forms, optional nodes, ';' chaining, path rules, special
values) and vol. 2 ch. 21 (error codes and queue behaviour).
"""

from __future__ import annotations

import pytest

from benchlab.sim.scpi import CommandSpec, CommandTable, ScpiError, compile_pattern, parse_unit
from tests.sim.conftest import drain_errors, error_code


def test_identity_names_the_invented_maker(supply, meter):
    # IEEE 488.2 10.14: *IDN? -> four fields maker,model,serial,firmware
    fields = supply.query("*IDN?").split(",")
    assert len(fields) == 4 and fields[0] == "BENCHLAB-SIM" and fields[1] == "PSU-1"
    assert meter.query("*IDN?").split(",")[1] == "DMM-1"


@pytest.mark.parametrize("command", [
    "VOLT 2.5", "VOLTAGE 2.5", "volt 2.5", "Voltage 2.5", "SOUR:VOLT 2.5", "SOURCE:VOLTAGE:LEVEL 2.5",
    "sour:volt:lev:imm:ampl 2.5", "VOLT:LEV:IMM:AMPL 2.5", ":SOUR:VOLT 2.5", "VOLT 2500 MV", "VOLT 2.5V",
])
def test_short_long_forms_case_and_optional_nodes_are_accepted(supply, command):
    # SCPI-1999 vol. 1, 6.2.1 (short/long form), 6.2.3 (case), 6.2.4 (optional nodes), 7.4 (suffix units)
    supply.write(command)
    assert float(supply.query("VOLT?")) == pytest.approx(2.5)
    assert error_code(supply) == 0


@pytest.mark.parametrize("command", ["VOLTA 1", "VOLTAG 1", "SOURC:VOLT 1", "SO:VOLT 1", "OUTPU ON"])
def test_partial_long_forms_are_undefined_headers(supply, command):
    # SCPI-1999 vol. 1, 6.2.1: only the short form or the whole long form is accepted -> -113
    supply.write(command)
    assert error_code(supply) == -113


def test_chaining_with_relative_path_and_joined_replies(supply):
    # SCPI-1999 vol. 1, 6.2.4-6.2.5: ';' chains units; a later header is relative to the last path;
    # several queries in one message give one reply with the answers joined by ';'
    supply.write("SOUR:VOLT 3;CURR 0.25")
    reply = supply.query("VOLT?;CURR?;:OUTP?;*OPC?")
    volts, amps, output, opc = reply.split(";")
    assert float(volts) == pytest.approx(3.0)
    assert float(amps) == pytest.approx(0.25)
    assert output == "0" and opc == "1"


def test_min_max_def_numeric_words(supply):
    # SCPI-1999 vol. 1, 7.2.1.1: MINimum / MAXimum / DEFault for numeric parameters
    supply.write("VOLT MAX")
    assert float(supply.query("VOLT?")) == pytest.approx(30.0)
    supply.write("VOLT MIN")
    assert float(supply.query("VOLT?")) == pytest.approx(0.0)
    assert float(supply.query("CURR? MAX")) == pytest.approx(3.0)


@pytest.mark.parametrize("command, code", [
    ("FOO:BAR 1", -113),                # undefined header
    ("VOLT", -109),                     # missing parameter
    ("OUTP ON,1", -108),                # parameter not allowed
    ("*RST 5", -108),
    ("VOLT abc", -104),                 # data type error (character data where NRf expected)
    ("VOLT \"3\"", -104),               # string where NRf expected
    ("VOLT 31", -222),                  # out of range (0-30 V)
    ("CURR -1", -222),
    ("VOLT 1e999", -222),
    ("OUTP MAYBE", -224),               # illegal parameter value
    ("VOLT 1 A", -131),                 # invalid suffix (amps for a voltage)
    ("OUTP2 ON", -114),                 # header suffix out of range (one channel)
    ("VOLT 1,,2", -102),                # syntax error
    ("VOLT(3)", -102),
    ("VOLT \"unterminated", -102),
    ("VOLT \x01 1", -101),              # invalid character
])
def test_standard_error_codes(supply, command, code):
    # SCPI-1999 vol. 2, 21.8 (command errors -1xx, execution errors -2xx)
    supply.write(command)
    assert drain_errors(supply) == [code]


def test_command_error_discards_rest_of_message_but_execution_error_does_not(supply):
    # IEEE 488.2 6.1.6: after a command (parser) error the rest of the message is not executed
    supply.write("VOLT 1;BOGUS;VOLT 2")
    assert float(supply.query("VOLT?")) == pytest.approx(1.0)
    assert drain_errors(supply) == [-113]
    supply.write("VOLT 99;CURR 0.2")
    assert float(supply.query("CURR?")) == pytest.approx(0.2)
    assert drain_errors(supply) == [-222]


def test_error_queue_is_fifo_and_overflows_to_minus_350(supply):
    # SCPI-1999 vol. 2, 21.8.1: FIFO; when full the most recent entry is replaced by -350
    supply.write("VOLT 99")
    supply.write("NOPE")
    assert supply.query("SYST:ERR:COUN?") == "2"
    assert drain_errors(supply) == [-222, -113]
    for _ in range(20):
        supply.write("NOPE")
    codes = drain_errors(supply)
    assert len(codes) == 16
    assert codes[:15] == [-113] * 15 and codes[15] == -350
    assert supply.query("SYST:ERR?") == '0,"No error"'
    assert supply.query("SYSTEM:ERROR:NEXT?") == '0,"No error"'


def test_event_status_and_status_byte(supply):
    # IEEE 488.2 11.5.1: ESR bit 5 command error, bit 4 execution error; read clears it.
    # SCPI-1999 vol. 1, 9: STB bit 2 = error queue not empty; bit 5 = ESB summary.
    supply.write("*CLS")
    assert int(supply.query("*ESR?")) == 0
    supply.write("NOPE")
    supply.write("VOLT 99")
    stb = int(supply.query("*STB?"))
    assert stb & 0b100 and stb & 0b100000
    esr = int(supply.query("*ESR?"))
    assert esr & (1 << 5) and esr & (1 << 4)
    assert int(supply.query("*ESR?")) == 0
    supply.write("*CLS")
    assert int(supply.query("*STB?")) & 0b100 == 0
    assert supply.query("SYST:VERS?") == "1999.0"


def test_reset_turns_output_off_and_restores_defaults(bench, supply):
    # IEEE 488.2 10.32: *RST sets the device-dependent default state
    supply.write("VOLT 5;CURR 0.2;OUTP ON")
    assert supply.query("OUTP?") == "1"
    supply.write("*RST")
    assert supply.query("OUTP?;VOLT?") .split(";")[0] == "0"
    assert float(supply.query("VOLT?")) == 0.0
    assert bench.log.output_history("supply") == [True, False]


def test_fetch_without_reading_is_data_stale(meter):
    # SCPI-1999 vol. 2, 21.8.3: -230 data corrupt or stale
    meter.write("CONF:VOLT")
    meter.write("FETC?")
    assert drain_errors(meter) == [-230]


def test_meter_overflow_reads_scpi_infinity(bench, supply, meter):
    # SCPI-1999 vol. 1, 7.2.1.5: +INF is returned as 9.9E37 (over range)
    # *OPC? makes sure the supply has applied the settings before the meter reads (separate sockets)
    assert supply.query("CURR 0.5;VOLT 10;OUTP ON;*OPC?") == "1"
    meter.write("CONF:VOLT 0.1")
    assert meter.query("READ?") == "9.9E37"
    meter.write("CONF:CURR 0.01")
    assert meter.query("READ?") == "9.9E37"
    meter.write("VOLT:RANG:AUTO ON")
    meter.write("FUNC \"VOLT:DC\"")
    assert 1.0 < float(meter.query("READ?")) < 5.0
    supply.write("OUTP OFF")


def test_header_matching_table_is_data():
    # SCPI-1999 vol. 1, 6.2.1: short form = the uppercase letters
    nodes = compile_pattern("[SOURce:]VOLTage[:LEVel]")
    assert [(n.short, n.long, n.optional) for n in nodes] == [
        ("SOUR", "SOURCE", True), ("VOLT", "VOLTAGE", False), ("LEV", "LEVEL", True)]
    table = CommandTable([CommandSpec("[SOURce:]VOLTage[:LEVel]", False, "h", 1, 1)])
    assert table.lookup(["SOUR", "VOLT", "LEV"], False) is not None
    assert table.lookup(["VOLT"], True) is None
    assert table.lookup(["LEV"], False) is None
    with pytest.raises(ScpiError) as info:
        parse_unit("VOLT 1,")
    assert info.value.code == -102


def test_smu_lists_compliance_and_list_errors(make_bench, rm):
    # SCPI-1999 vol. 2, 21.8.3: -221 settings conflict (INIT with the output off), -226 lists not same length
    from tests.sim.conftest import open_client

    bench = make_bench(fixture="smu")
    smu = open_client(rm, bench.resources["smu"])
    # SCPI-1999 vol. 2, SOURce: FUNCtion's default node is not MODE, so :MODE is written out; a bare FUNC is -113
    smu.write("FUNC VOLT")
    assert drain_errors(smu) == [-113]
    smu.write("FUNC:MODE VOLT;:CURR:LIM 10 MA;:LIST:VOLT 1,2,8;:VOLT:MODE LIST")
    assert smu.query("LIST:VOLT:POIN?;:VOLT:MODE?;:FUNC:MODE?") == "3;LIST;VOLT"
    assert float(smu.query("SOUR:CURR:LIM:AMPL?")) == pytest.approx(0.01)
    smu.write("INIT")
    assert drain_errors(smu) == [-221]  # output off
    smu.write("OUTP ON;:LIST:DWEL 0.1,0.2")
    smu.write("INIT")
    assert drain_errors(smu) == [-226]  # two dwell values for three points
    smu.write("LIST:DWEL 0;:INIT")
    data = [float(x) for x in smu.query("TRAC:DATA?").split(",")]
    volts = [float(x) for x in smu.query("FETC:ARR:VOLT?").split(",")]
    amps = [float(x) for x in smu.query("FETC:ARR:CURR?").split(",")]
    assert len(data) == 6 and data[0::2] == volts and data[1::2] == amps  # the same buffer, two SCPI-1999 reads
    # 8 V is far above threshold: the current is held at the 10 mA compliance and VGS drops to carry it
    assert data[5] == pytest.approx(0.01, rel=1e-3) and 2.0 < data[4] < 4.0
    # held at the current limit: bit 1 (CURRent) of the QUEStionable condition (SCPI-1999 status reporting)
    assert smu.query("STAT:QUES:COND?") == "2"
    smu.write("*TRG")  # in LIST mode a bus trigger runs the list again, into an emptied buffer
    assert len(smu.query("TRAC:DATA?").split(",")) == 6
    smu.write("VOLT:MODE FIX;:VOLT 1.0;:INIT")  # INITiate empties the buffer, then takes one reading
    assert len(smu.query("TRAC:DATA?").split(",")) == 2
    assert smu.query("STAT:QUES:COND?") == "0"
    for gone in ("TRAC:CLE", "TRAC:POIN:ACT?", "SENS:CURR:PROT 0.1", "SENS:CURR:PROT:TRIP?"):
        smu.write(gone)  # spellings of no standard: undefined headers
        assert drain_errors(smu) == [-113], gone
    assert smu.query("OUTP OFF;*OPC?") == "1"
    assert drain_errors(smu) == []


def test_meter_configuration_queries(meter):
    meter.write("CONF:CURR 0.05")
    assert meter.query("CONF?") == '"CURR +1.000000000E-01"'  # smallest range holding 50 mA
    assert meter.query("FUNC?") == '"CURR"'
    meter.write("CURR:RANG:AUTO ON;:VOLT:NPLC 10")
    assert meter.query("CURR:RANG:AUTO?;:VOLT:NPLC?") == "1;+1.000000000E+01"
    meter.write("VOLT:NPLC 60")  # our own bounds: 0.01 to 50
    assert drain_errors(meter) == [-222]
    meter.write("VOLT:NPLC 0.01;:CURR:RANG MAX")
    assert meter.query("VOLT:NPLC?;:CURR:RANG?") == "+1.000000000E-02;+2.000000000E+00"  # top range 2 A
    meter.write("FUNC VOLT")  # must be a quoted string
    assert drain_errors(meter) == [-104]
    meter.write("*TRG")
    assert float(meter.query("FETC?")) < 1e-3  # the output is off: about 0 A


def test_special_values_for_readings():
    # SCPI-1999 vol. 1, 7.2.1.5: +INFinity is sent as 9.9E37, -INFinity as -9.9E37, not-a-number as 9.91E37
    from benchlab.sim.scpi import format_number

    assert format_number(float("inf")) == "9.9E37"
    assert format_number(float("-inf")) == "-9.9E37"
    assert format_number(float("nan")) == "9.91E37"
    assert float(format_number(1.5e-3)) == 1.5e-3


def test_meter_reading_below_the_negative_range_is_minus_infinity(bench):
    # SCPI-1999 vol. 1, 7.2.1.5 (-9.9E37 for -INF). The fixture never drives the part negative, so the
    # meter's over-range check is fed a negative true value directly (a meter wired the other way round)
    from benchlab.sim.scpi import format_number

    meter = bench.instruments["meter"]
    meter.execute("CONF:VOLT 1")
    meter._true_value = lambda function: -2.0
    assert format_number(meter.take_reading()) == "-9.9E37"
    meter._true_value = lambda function: -1.1  # within the 20 % over-range of the 1 V range
    assert -1.2 < meter.take_reading() < -1.0


@pytest.mark.parametrize("role, model", [("supply", "PSU-1"), ("meter", "DMM-1"), ("smu", "SMU-1")])
def test_every_instrument_speaks_the_common_commands(bench, rm, role, model):
    # IEEE 488.2 10.14 (*IDN?: maker,model,serial,firmware), 10.3 (*CLS), 10.12/10.18 (*ESE/*OPC), 11.5.1 (ESR bits:
    # 7 power on, 5 command error, read clears), SCPI-1999 vol. 2, ch. 21 (-113 undefined header, long and short
    # forms of SYSTem:ERRor); section numbers of IEEE 488.2 from memory
    from tests.sim.conftest import open_client

    inst = open_client(rm, bench.resources[role])
    assert inst.query("*idn?").split(",")[:2] == ["BENCHLAB-SIM", model]
    assert int(inst.query("*ESR?")) & (1 << 7)  # power-on event since the bench started
    inst.write("NO:SUCH:THING")
    assert int(inst.query("*STB?")) & 0b100  # error queue not empty
    assert inst.query("system:error:next?").startswith("-113,")
    inst.write("NO:SUCH:THING;*CLS")  # the command error drops the rest of the message, *CLS included
    assert inst.query("SYST:ERR:COUN?") == "1"
    inst.write("*CLS")
    assert inst.query("SYST:ERR:COUN?;*ESR?;*STB?") == "0;0;0"
    inst.write("*RST;*OPC")
    assert int(inst.query("*ESR?")) & 1  # operation complete bit
    assert inst.query("*OPC?") == "1"


def test_smu_buffer_limit_and_voltage_compliance_bit(make_bench, rm):
    # the list/buffer limit is our own figure (2000 points): one more is -223 too much data (SCPI-1999 vol. 2,
    # error list); forcing amps, a reading held at the voltage limit sets bit 0 (VOLTage) of the QUEStionable
    # condition (SCPI-1999 status reporting)
    from tests.sim.conftest import open_client

    bench = make_bench(fixture="smu")
    smu = open_client(rm, bench.resources["smu"])
    smu.write("LIST:VOLT " + ",".join(["1"] * 2001))
    assert drain_errors(smu) == [-223]
    smu.write("LIST:VOLT " + ",".join(["1"] * 2000))
    assert drain_errors(smu) == [] and smu.query("LIST:VOLT:POIN?") == "2000"
    smu.write("FUNC:MODE CURR;:VOLT:LIM 0.5;:CURR 0.2;:OUTP ON")  # 0.2 A needs ~3 V: held at 0.5 V
    smu.query("READ?")
    assert smu.query("STAT:QUES:COND?") == "1"
    assert smu.query("OUTP OFF;*OPC?") == "1"
    assert drain_errors(smu) == []
