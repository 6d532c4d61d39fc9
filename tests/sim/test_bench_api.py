"""The in-process API (SimBench / SimConfig), the virtual clock, the log and the `benchlab sim` command."""

from __future__ import annotations

import json
import signal
import socket
import subprocess
import sys
from pathlib import Path

import pytest

from benchlab.errors import InputError, InstrumentError
from benchlab.sim import BenchLog, SimBench, SimConfig, parse_truth_reply
from benchlab.sim.clock import VirtualClock
from tests.sim.conftest import open_client

REPO = Path(__file__).resolve().parents[2]


@pytest.mark.parametrize("kwargs", [
    {"fixture": "breadboard"}, {"bag_size": 0}, {"time_scale": -1.0}, {"latency_s": -0.1},
    {"series_resistor_nominal_ohm": 0.0}, {"faults": ("mute=abc",)}, {"time_scale": float("nan")},
    {"seed": -1}, {"faults": ("error@supply=OUTP/0",)},
])
def test_bad_config_is_one_clear_error(kwargs):
    with pytest.raises(InputError):
        SimConfig(**kwargs)


def test_resources_and_context_manager(rm):
    with SimBench(SimConfig(time_scale=0.0)) as bench:
        resources = bench.start(first_port=0)
        assert set(resources) == {"supply", "meter", "smu"}
        for role, resource in resources.items():
            assert resource.startswith("TCPIP0::127.0.0.1::") and resource.endswith("::SOCKET")
        models = {role: open_client(rm, res).query("*IDN?").split(",")[1] for role, res in resources.items()}
        assert models == {"supply": "PSU-1", "meter": "DMM-1", "smu": "SMU-1"}
        port = bench.ports["supply"]
    with pytest.raises(OSError):
        socket.create_connection(("127.0.0.1", port), timeout=1).close()


def _free_base_port() -> int:
    while True:  # a port the system hands out, with two more above it (ephemeral ports end at most at 65535)
        probe = socket.socket()
        probe.bind(("127.0.0.1", 0))
        base = probe.getsockname()[1]
        probe.close()
        if base < 65000:
            return base


def test_first_port_then_consecutive_ports():
    # another process may take a port next to the free one meanwhile (a busy CI machine): try other bases, never skip
    for _ in range(20):
        base = _free_base_port()
        with SimBench(SimConfig(time_scale=0.0)) as bench:
            try:
                bench.start(first_port=base)
            except InstrumentError:
                continue
            assert bench.ports == {"supply": base, "meter": base + 1, "smu": base + 2}
            return
    pytest.fail("20 free ports in a row had a neighbour taken")


def test_port_in_use_is_a_clear_error_and_nothing_listens():
    with SimBench(SimConfig(time_scale=0.0)) as first:
        first.start(first_port=0)
        taken = first.ports["supply"]
        second = SimBench(SimConfig(time_scale=0.0))
        with pytest.raises(InstrumentError, match="cannot listen"):
            second.start(first_port=taken)
        assert all(server._stopping.is_set() for server in second._servers.values())


def test_log_file_is_json_lines_and_proves_output_off(tmp_path, rm):
    path = tmp_path / "sim.jsonl"
    with SimBench(SimConfig(time_scale=0.0, log_path=str(path))) as bench:
        bench.start()
        supply = open_client(rm, bench.resources["supply"])
        assert supply.query("CURR 0.1;VOLT 5;OUTP ON;*OPC?") == "1"
        on_log = BenchLog.read_file(path)
        assert on_log.output_was_left_on()
        assert supply.query("OUTP OFF;*OPC?") == "1"
    lines = path.read_text().splitlines()
    assert all(json.loads(line)["role"] for line in lines)
    log = BenchLog.read_file(path)
    assert log.output_history("supply") == [True, False]
    assert not log.output_was_left_on()
    assert "CURR 0.1;VOLT 5;OUTP ON;*OPC?" in log.commands("supply")
    torn = BenchLog.from_lines(lines + ['{"time": 1, "virt'])
    assert len(torn.entries()) == len(lines)


def test_virtual_clock_books_nominal_time_and_sleeps_scaled():
    real = [100.0]
    slept = []
    clock = VirtualClock(0.001, real_time=lambda: real[0], sleep=slept.append)
    clock.spend(2.0)
    real[0] += 0.002  # the real sleep
    assert slept == [pytest.approx(0.002)]
    assert clock.now() == pytest.approx(2.0)
    real[0] += 1.0  # real time passing between operations counts too
    assert clock.now() == pytest.approx(3.0)
    still = VirtualClock(0.0, real_time=lambda: 0.0, sleep=slept.append)
    still.spend(5.0)
    assert still.now() == 5.0 and len(slept) == 1


def test_thermal_history_follows_the_virtual_clock_not_the_wall(make_bench, rm):
    # with time_scale 0 a minute of dwell heats the part as much as a real minute would:
    # first-order response T = Tamb + P Rth (1 - exp(-t / tau)) (Newton's law of cooling)
    bench = make_bench(fixture="smu")
    smu = open_client(rm, bench.resources["smu"])
    smu.write("FUNC:MODE CURR;:VOLT:LIM 20;:CURR 0.2;:OUTP ON")
    smu.write("LIST:CURR 0.2;:LIST:DWEL 45;:CURR:MODE LIST;:INIT")
    volts, amps = (float(x) for x in smu.query("READ?").split(","))
    temperature = float(smu.query("SIM:TEMP?"))
    assert smu.query("OUTP OFF;*OPC?") == "1"
    rise = temperature - 300.15
    steady = volts * amps * 62.0
    # about one time constant (45 s): 1 - 1/e = 63 % of the steady rise (the power drifts a little as it heats)
    assert 0.5 * steady < rise < 0.8 * steady
    assert bench.virtual_time_s > 45.0


def _start_cli(tmp_path, *extra):
    log_path = tmp_path / "cli.jsonl"
    proc = subprocess.Popen(
        [sys.executable, "-m", "benchlab", "sim", "--port", "0", "--sim-time-scale", "0", "--sim-log", str(log_path),
         *extra],
        cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    lines = [proc.stdout.readline().strip() for _ in range(3)]
    return proc, log_path, dict(line.split(" ", 1) for line in lines if line)


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])
def test_cli_serves_until_signal_and_log_proves_output_off(tmp_path, rm, signum):
    proc, log_path, resources = _start_cli(tmp_path, "--sim-fixture", "smu", "--sim-seed", "5")
    try:
        assert set(resources) == {"supply", "meter", "smu"}
        smu = open_client(rm, resources["smu"])
        assert smu.query("SIM:PART:LAB?") == '"Q01"'
        assert smu.query("OUTP ON;OUTP OFF;*OPC?") == "1"
        smu.close()
        proc.send_signal(signum)
        assert proc.wait(timeout=20) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
    log = BenchLog.read_file(log_path)
    assert log.output_history("smu") == [True, False]
    assert not log.output_was_left_on()


def test_cli_fault_and_resistor_options_reach_the_bench(tmp_path, rm):
    # the options of `benchlab sim` are not only help text: an injected error and the nominal resistor take effect
    proc, log_path, resources = _start_cli(tmp_path, "--sim-fault", "error@supply=OUTP/-241", "--sim-resistor",
                                           "100", "--sim-bag-size", "3")
    try:
        supply = open_client(rm, resources["supply"])
        supply.write("CURR 0.1;VOLT 5;OUTP ON")
        assert supply.query("SYST:ERR?").startswith("-241,")  # SCPI-1999 vol. 2, ch. 21: -241 hardware missing
        assert supply.query("OUTP?") == "0"
        truth = parse_truth_reply(supply.query("SIM:PART:TRUT?"))
        assert abs(truth["series_resistor_actual_ohm"] / 100.0 - 1) <= 0.01
        supply.write("SIM:PART:NEXT;NEXT;NEXT")
        assert supply.query("SIM:PART:IND?") == "-1"  # three parts, then the bag is used up
        supply.close()
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=20) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
    assert not BenchLog.read_file(log_path).output_was_ever_on("supply")


def test_cli_bad_fault_is_one_line_error():
    run = subprocess.run([sys.executable, "-m", "benchlab", "sim", "--sim-fault", "explode=1"], cwd=REPO,
                         capture_output=True, text=True, timeout=60)
    assert run.returncode == 2
    assert run.stderr.strip().startswith("benchlab: error: fault 'explode=1'")
    assert "Traceback" not in run.stderr and len(run.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize("args, start", [
    (["--sim-seed", "-1"], "benchlab: error: argument --sim-seed: must be 0 or more"),
    (["--sim-fault", "error@supply=OUTP/0"], "benchlab: error: fault 'error@supply=OUTP/0'"),
    (["--sim-bag-size", "0"], "benchlab: error: argument --sim-bag-size: must be 1 or more"),
    (["--sim-time-scale", "-1"], "benchlab: error: argument --sim-time-scale: must be 0 or more"),
])
def test_cli_bad_settings_are_one_line_errors(args, start):
    run = subprocess.run([sys.executable, "-m", "benchlab", "sim", "--port", "0", *args], cwd=REPO,
                         capture_output=True, text=True, timeout=60)
    assert run.returncode == 2
    assert run.stderr.strip().startswith(start)
    assert "Traceback" not in run.stderr and len(run.stderr.strip().splitlines()) == 1
    assert run.stdout == ""  # nothing was served


def test_cli_help_lists_every_option():
    run = subprocess.run([sys.executable, "-m", "benchlab", "sim", "--help"], cwd=REPO, capture_output=True,
                         text=True, timeout=60)
    for option in ("--host", "--port", "--sim-fixture", "--sim-seed", "--sim-bag-size", "--sim-time-scale",
                   "--sim-latency", "--sim-resistor", "--sim-fault", "--sim-log"):
        assert option in run.stdout


def test_defaults_make_a_sensible_resistor_sweep(make_bench, rm):
    # the documented defaults: 47 ohm +/-1 %, a 0-30 V supply and a 2-4 V part give roughly half an ampere
    bench = make_bench(rth_k_per_w=0.0)
    assert bench.series_resistor_nominal_ohm == 47.0
    assert bench.series_resistor_actual_ohm != 47.0
    assert abs(bench.series_resistor_actual_ohm / 47.0 - 1) <= 0.01
    supply = open_client(rm, bench.resources["supply"])
    meter = open_client(rm, bench.resources["meter"])
    assert supply.query("CURR 1;VOLT MAX;OUTP ON;*OPC?") == "1"
    amps = float(meter.query("MEAS:CURR?"))
    assert supply.query("OUTP OFF;*OPC?") == "1"
    assert 0.4 < amps < 0.7


def test_seed_changes_resistor_and_bag_but_same_seed_repeats():
    a, b, c = (SimBench(SimConfig(seed=s, time_scale=0.0)) for s in (1, 1, 2))
    assert a.series_resistor_actual_ohm == b.series_resistor_actual_ohm != c.series_resistor_actual_ohm
    assert a.bag == b.bag and a.bag != c.bag
    assert a.current_part.label == "Q01"


def test_bench_can_be_stopped_and_started_again(rm):
    with SimBench(SimConfig(time_scale=0.0)) as bench:
        bench.start()
        bench.stop()
        resources = bench.start()
        assert open_client(rm, resources["meter"]).query("*IDN?").startswith("BENCHLAB-SIM")


def test_listens_on_loopback_and_on_5025_unless_told_otherwise():
    # the rule: loopback only by default, for the API and for `benchlab sim`
    from benchlab.cli import build_parser

    with SimBench(SimConfig(time_scale=0.0)) as bench:
        bench.start(first_port=0)
        bound = {role: server._listener.getsockname()[0] for role, server in bench._servers.items()}
    assert bound == {"supply": "127.0.0.1", "meter": "127.0.0.1", "smu": "127.0.0.1"}
    defaults = build_parser().parse_args(["sim"])
    assert (defaults.host, defaults.port) == ("127.0.0.1", 5025)  # 5025: the usual raw SCPI socket port


def test_supply_output_carries_its_setpoint_error(make_bench, rm):
    # V_out = V_set (1 + gain) + offset; the readback shows the real output, not the setpoint
    bench = make_bench(supply_gain_error=0.01, supply_offset_v=0.02, rth_k_per_w=0.0)
    supply = open_client(rm, bench.resources["supply"])
    assert supply.query("CURR 1;VOLT 10;OUTP ON;*OPC?") == "1"
    assert float(supply.query("VOLT?")) == pytest.approx(10.0)  # the setpoint as programmed
    assert float(supply.query("MEAS:VOLT?")) == pytest.approx(10.12, abs=2e-3)  # 1 mV resolution, 0.3 mV noise
    assert supply.query("OUTP OFF;*OPC?") == "1"
    seeded = make_bench(seed=3, rth_k_per_w=0.0)  # drawn within +/-0.05 % and +/-3 mV
    error = seeded.core.fixture.supply_error
    assert error.gain != 0.0 and abs(error.gain) <= 5e-4 and abs(error.offset_v) <= 3e-3


def test_memory_log_can_be_bounded_while_the_file_keeps_everything(tmp_path, rm):
    # a `benchlab sim` left running must not grow without bound; the --log file stays complete
    from benchlab.commands.sim import CLI_LOG_MEMORY_ENTRIES

    assert CLI_LOG_MEMORY_ENTRIES >= 10_000
    path = tmp_path / "sim.jsonl"
    with SimBench(SimConfig(time_scale=0.0, log_path=str(path), log_memory_entries=5)) as bench:
        bench.start()
        supply = open_client(rm, bench.resources["supply"])
        for volts in range(1, 21):
            supply.write(f"VOLT {volts}")
        assert supply.query("*OPC?") == "1"
        assert len(bench.log.entries()) == 5
        assert bench.log.commands("supply")[-1] == "*OPC?"
    from_file = BenchLog.read_file(path).commands("supply")
    assert from_file[:20] == [f"VOLT {v}" for v in range(1, 21)] and from_file[-1] == "*OPC?"
    with pytest.raises(InputError):
        SimConfig(log_memory_entries=0)
