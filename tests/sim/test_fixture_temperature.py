"""The simulated fixture block: settable temperature with its own time constant, its thermistor, the clock."""

from __future__ import annotations

import math

import pytest

from tests.sim.conftest import open_client


def test_block_follows_its_setpoint_as_a_first_order_lag(make_bench, rm):
    bench = make_bench(fixture="smu", tau_fixture_s=100.0)
    smu = open_client(rm, bench.resources["smu"])
    start = bench.fixture_temperature_k
    smu.write("SIM:FIXT:TEMP 350")
    assert float(smu.query("SIM:FIXT:TEMP?")) == pytest.approx(350.0)
    smu.query("SIM:CLOC:ADV 100;*OPC?")
    # a first-order lag covers 1 - 1/e of the step in one time constant (textbook first-order response)
    moved = (bench.fixture_temperature_k - start) / (350.0 - start)
    assert moved == pytest.approx(1.0 - math.exp(-1.0), abs=0.01)
    smu.query("SIM:CLOC:ADV 1500;*OPC?")
    assert bench.fixture_temperature_k == pytest.approx(350.0, abs=1e-3)
    # the part follows the block with its own lag: unpowered it ends at the block's temperature
    assert bench.temperature_k == pytest.approx(350.0, abs=1e-3)


def test_sensor_reads_the_block_in_kelvin_and_as_a_thermistor(make_bench, rm):
    bench = make_bench(fixture="smu")
    smu = open_client(rm, bench.resources["smu"])
    smu.write("SIM:FIXT:TEMP 323.15")
    smu.query("SIM:CLOC:ADV 3000;*OPC?")
    readings = [float(smu.query("SIM:FIXT:SENS?")) for _ in range(30)]
    assert sum(readings) / len(readings) == pytest.approx(323.15, abs=0.01)
    ohms = float(smu.query("SIM:FIXT:SENS:RES?"))
    # B-parameter equation, 10 kohm / B 3950 K at 50 degC: 10000 exp(3950 (1/323.15 - 1/298.15)) = 3588 ohm
    # (derived; catalogue tables of such thermistors list about 3.6 kohm at 50 degC, common practice)
    assert ohms == pytest.approx(3588.0, rel=0.005)


def test_self_heating_settles_at_block_plus_power_times_rth(make_bench, rm):
    bench = make_bench(fixture="smu", rth_k_per_w=40.0)
    smu = open_client(rm, bench.resources["smu"])
    smu.write("SIM:FIXT:TEMP 320")
    smu.query("SIM:CLOC:ADV 2000;*OPC?")
    smu.write("SOUR:FUNC:MODE CURR;:SOUR:VOLT:LIM 10;:SOUR:CURR 0.2;:OUTP ON")
    smu.query("SIM:CLOC:ADV 600;*OPC?")
    volts = float(smu.query("MEAS:VOLT?"))
    smu.query("OUTP OFF;*OPC?")
    # thermal resistance is the junction rise over the dissipated power (JESD51-1 defines Rth = dTj / P)
    assert bench.temperature_k - 320.0 == pytest.approx(40.0 * 0.2 * volts, rel=0.01)


def test_out_of_range_fixture_setpoint_is_refused(make_bench, rm):
    bench = make_bench(fixture="smu")
    smu = open_client(rm, bench.resources["smu"])
    smu.write("SIM:FIXT:TEMP 900")
    assert smu.query("SYST:ERR?").startswith("-222")
    smu.write("SIM:CLOC:ADV -1")
    assert smu.query("SYST:ERR?").startswith("-222")
    assert float(smu.query("SIM:FIXT:TEMP?")) == pytest.approx(bench.config.ambient_k)
