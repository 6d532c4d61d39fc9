"""The instrument layer against the built-in simulated bench, over real TCP through pyvisa-py."""

from __future__ import annotations

import json
import math

import pytest

from benchlab import cli
from benchlab.errors import InstrumentReportedError, InstrumentTimeout
from benchlab.instruments.bench import open_bench
from benchlab.instruments.config import simulator_bench_config

from benchlab import sim


@pytest.fixture
def start_sim():
    started = []

    def start(fixture: str = "resistor", faults: tuple = ()):
        bench = sim.SimBench(sim.SimConfig(fixture=fixture, time_scale=0.0, faults=faults))
        bench.start(first_port=0)
        started.append(bench)
        return bench

    yield start
    for bench in started:
        bench.stop()


def _config(bench, fixture="resistor"):
    return simulator_bench_config(bench.resources, fixture=fixture, series_resistor_ohm=bench.series_resistor_actual_ohm)


@pytest.mark.parametrize("fixture", ["resistor", "smu"])
def test_cli_check_on_the_simulator(fixture, capsys):
    assert cli.main(["bench", "check", "--sim", "--sim-fixture", fixture, "--json"]) == 0
    report = json.loads(capsys.readouterr().out)
    assert report["ok"] is True
    identities = [check["identity"] for check in report["instruments"]]
    assert all(identity.startswith("BENCHLAB-SIM,") for identity in identities)
    for check in report["instruments"]:
        # A meter has no output (None); a source was found off and left off.
        assert check["output_was_on"] is (None if check["role"] == "meter" else False)


def test_check_never_enables_an_output(start_sim):
    from benchlab.services.bench import check_bench

    bench = start_sim()
    assert check_bench(_config(bench)).ok
    assert bench.log.output_history("supply") in ([], [False])
    assert True not in bench.log.output_history("supply")


def test_resistor_fixture_obeys_ohms_law(start_sim):
    bench = start_sim()
    resistor = bench.series_resistor_actual_ohm
    with open_bench(_config(bench), resource_manager=None) as lab:
        lab.supply.set_current_limit(0.2)
        lab.supply.set_voltage(10.0)
        lab.meter.configure_voltage(None, nplc=1)
        lab.supply.set_output(True)
        try:
            part_v = lab.meter.read()
            supply_v = lab.supply.measure_voltage()
            supply_i = lab.supply.measure_current()
        finally:
            lab.safe_off()
    # Ohm's law and Kirchhoff's voltage law (Horowitz & Hill, The Art of Electronics, 3rd ed., ch. 1; from
    # memory): the resistor carries the supply's
    # current and drops the difference between the supply and the part.
    assert supply_i == pytest.approx((supply_v - part_v) / resistor, rel=0.01, abs=1e-4)
    assert 0 < part_v < supply_v
    commands = bench.log.commands("supply")
    # Safety invariant: the current limit is set before the output is switched on.
    assert commands.index("CURR 0.2") < commands.index("OUTP ON")
    assert bench.log.last_output_state("supply") is False


def test_meter_over_range_reads_infinity(start_sim):
    bench = start_sim()
    with open_bench(_config(bench)) as lab:
        lab.supply.set_current_limit(0.1)
        lab.supply.set_voltage(10.0)
        lab.meter.configure_voltage(0.1, nplc=1)  # 100 mV range across a conducting part
        lab.supply.set_output(True)
        try:
            reading = lab.meter.read()
        finally:
            lab.safe_off()
    # SCPI-1999 Vol. 1, numeric data (INF/NINF/NAN; section number from memory: 7.2.1.5): over-range is sent as
    # 9.9E37, which is +INF.
    assert reading == math.inf


def test_smu_list_sweep_of_a_diode_connected_part(start_sim):
    bench = start_sim("smu")
    levels = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0]
    with open_bench(_config(bench, "smu")) as lab:
        smu = lab.smu
        smu.configure_source("voltage", 0.2)
        smu.set_nplc(1)
        smu.set_level(0.0)
        smu.set_output(True)
        try:
            points = smu.run_list(levels, 0.001)
        finally:
            lab.safe_off()
    assert len(points) == len(levels)
    volts = [v for v, _ in points]
    amps = [i for _, i in points]
    for forced, (v, i) in zip(levels, points):
        assert v == pytest.approx(forced, abs=0.02) or i == pytest.approx(0.2, rel=0.02)
    # A diode-connected enhancement MOSFET conducts nothing at 0 V and more as VGS rises
    # (Sedra & Smith, Microelectronic Circuits, MOSFET chapter (ch. 5 from memory): ID grows monotonically with
    # VGS above Vth).
    assert abs(amps[0]) < 1e-6
    assert all(b >= a - 1e-6 for a, b in zip(amps, amps[1:]))
    assert amps[-1] > 1e-3
    assert volts[0] == pytest.approx(0.0, abs=1e-3)


def test_out_of_range_setpoint_is_refused_with_the_instruments_code(start_sim):
    bench = start_sim()
    with open_bench(_config(bench)) as lab:
        with pytest.raises(InstrumentReportedError) as caught:
            lab.supply.set_voltage(99.0)  # the simulated supply does 0-30 V
    # SCPI-1999 Vol. 2, SYSTem:ERRor execution-error list (chapter from memory: 21): -222 is "Data out of range".
    assert caught.value.code == -222
    assert caught.value.command == "VOLT 99"


def test_injected_error_reaches_the_caller(start_sim):
    bench = start_sim(faults=("error@supply=VOLT/-240",))
    with open_bench(_config(bench)) as lab:
        with pytest.raises(InstrumentReportedError) as caught:
            lab.supply.set_voltage(1.0)
    # SCPI-1999 Vol. 2, SYSTem:ERRor execution-error list (chapter from memory: 21): "Hardware error"
    assert caught.value.code == -240


def test_dropped_connection_is_reopened(start_sim):
    # The meter's 4th message (*IDN?, *CLS, SYST:ERR?, then READ?) closes the connection unanswered.
    bench = start_sim(faults=("drop@meter=4",))
    with open_bench(_config(bench)) as lab:
        lab.meter.read()
        assert lab.meter.transport.reopen_count == 1


def test_muted_instrument_times_out_clearly(start_sim):
    bench = start_sim(faults=("mute@meter=3",))
    config = _config(bench)
    short = {role: type(spec)(role=spec.role, resource=spec.resource, profile=spec.profile, timeout_ms=200)
             for role, spec in config.instruments.items()}
    config = type(config)(**{**config.__dict__, "instruments": short})
    with open_bench(config) as lab:
        with pytest.raises(InstrumentTimeout, match="asked twice"):
            lab.meter.read()
    assert True not in bench.log.output_history("supply")
