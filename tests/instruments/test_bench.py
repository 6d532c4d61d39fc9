"""Opening and checking a whole bench over fake SCPI servers; the ``benchlab bench`` command."""

from __future__ import annotations

import json
import socket

import pytest

from benchlab import cli
from benchlab.errors import ConnectionLost, InstrumentReportedError, InstrumentTimeout
from benchlab.instruments.bench import open_bench
from benchlab.instruments.config import parse_bench_config
from benchlab.services.bench import check_bench, format_check_report

from .conftest import SHORT_TIMEOUT_MS, TEST_TIMEOUT_MS
from .fake_scpi import FakeScpiServer


def _bench_data(supply: str, meter: str, timeout_ms: int = TEST_TIMEOUT_MS) -> dict:
    return {"fixture": "resistor",
            "limits": {"max_supply_v": 12, "max_drain_a": 0.25, "max_power_w": 2},
            "measurement": {"nplc": 2},
            "series_resistor": {"ohms": 47},
            "instruments": {"supply": {"resource": supply, "profile": "generic-scpi-supply", "timeout_ms": timeout_ms},
                            "meter": {"resource": meter, "profile": "generic-scpi-meter", "timeout_ms": timeout_ms}}}


@pytest.fixture
def pair():
    supply = FakeScpiServer(identity="BENCHLAB-SIM,PSU-1,T1,0.1").start()
    meter = FakeScpiServer(identity="BENCHLAB-SIM,DMM-1,T2,0.1").start()
    supply.settings["OUTP"] = "0"
    yield supply, meter
    supply.stop()
    meter.stop()


def _enabled_output(server: FakeScpiServer) -> bool:
    return any(line.upper().startswith("OUTP") and line.upper().split()[-1] in ("ON", "1")
               for line in server.lines() if not line.endswith("?"))


def test_open_bench_identifies_each_instrument(resource_manager, pair):
    supply, meter = pair
    config = parse_bench_config(_bench_data(supply.resource, meter.resource))
    with open_bench(config, resource_manager) as bench:
        assert bench.identities == {"supply": supply.identity, "meter": meter.identity}
        assert bench.smu is None
        assert bench.supply.identity == supply.identity
        assert bench.profiles["meter"].name == "generic-scpi-meter"
    # On connect: *IDN?, then *CLS (IEEE 488.2 common commands; section numbers from memory: 10.3, 10.14), then
    # the error queue.
    assert supply.lines() == ["*IDN?", "*CLS", "SYST:ERR?"]
    assert meter.lines() == ["*IDN?", "*CLS", "SYST:ERR?"]


def test_reset_on_connect_when_asked(resource_manager, pair):
    supply, meter = pair
    data = _bench_data(supply.resource, meter.resource)
    data["instruments"]["meter"]["reset_on_connect"] = True
    with open_bench(parse_bench_config(data), resource_manager):
        pass
    assert meter.lines() == ["*IDN?", "*CLS", "SYST:ERR?", "*RST", "SYST:ERR?", "*OPC?"]
    assert "*RST" not in supply.lines()


def test_silent_instrument_gives_one_clear_error_and_nothing_is_enabled(resource_manager, pair):
    supply, meter = pair
    meter.fault("*IDN?", "silent")
    meter.fault("*IDN?", "silent")
    config = parse_bench_config(_bench_data(supply.resource, meter.resource, timeout_ms=SHORT_TIMEOUT_MS))
    with pytest.raises(InstrumentTimeout, match=r"meter did not answer: no reply to '\*IDN\?'") as caught:
        open_bench(config, resource_manager)
    assert caught.value.resource == meter.resource
    assert not _enabled_output(supply)
    assert supply.lines() == ["*IDN?", "*CLS", "SYST:ERR?"]


def test_refused_port_gives_one_clear_error(resource_manager, pair):
    supply, _ = pair
    probe = socket.socket()
    probe.bind(("127.0.0.1", 0))
    dead = f"TCPIP0::127.0.0.1::{probe.getsockname()[1]}::SOCKET"
    probe.close()
    config = parse_bench_config(_bench_data(supply.resource, dead, timeout_ms=SHORT_TIMEOUT_MS))
    with pytest.raises(ConnectionLost, match="meter did not answer"):
        open_bench(config, resource_manager)
    assert not _enabled_output(supply)


def test_instrument_error_at_connect_keeps_its_code(resource_manager, pair):
    supply, meter = pair
    meter.rejects["*CLS"] = (-113, "Undefined header")
    with pytest.raises(InstrumentReportedError) as caught:
        open_bench(parse_bench_config(_bench_data(supply.resource, meter.resource)), resource_manager)
    assert (caught.value.code, caught.value.command) == (-113, "*CLS")


def test_safe_off_switches_every_output_off(resource_manager, pair):
    supply, meter = pair
    with open_bench(parse_bench_config(_bench_data(supply.resource, meter.resource)), resource_manager) as bench:
        supply.clear_log()
        assert bench.safe_off() == []
    assert supply.lines() == ["OUTP OFF", "SYST:ERR?"]
    assert supply.settings["OUTP"] == "OFF"


def test_check_round_trips_with_the_output_off(resource_manager, pair):
    supply, meter = pair
    report = check_bench(parse_bench_config(_bench_data(supply.resource, meter.resource)), resource_manager)
    assert report.ok
    trips = {trip.setting: trip for check in report.instruments for trip in check.round_trips}
    assert trips["current limit (A)"].read_back == 0.25
    assert trips["voltage setpoint (V)"].read_back == 0.0
    assert trips["DC volts integration (NPLC)"].read_back == 2.0
    assert not _enabled_output(supply)
    assert supply.lines()[3:] == ["OUTP?", "VOLT 0", "SYST:ERR?", "VOLT?", "CURR 0.25", "SYST:ERR?", "CURR?",
                                  "OUTP?", "SYST:ERR?"]
    assert json.loads(json.dumps(report.to_dict()))["ok"] is True
    assert "no output was enabled" in format_check_report(report)


def test_check_leaves_a_live_output_alone(resource_manager, pair):
    supply, meter = pair
    supply.settings["OUTP"] = "1"
    report = check_bench(parse_bench_config(_bench_data(supply.resource, meter.resource)), resource_manager)
    assert not report.ok
    supply_check = report.instruments[0]
    assert supply_check.output_was_on is True
    assert "output is ON" in supply_check.problems[0]
    # Nothing but identification and the state query reached the live supply.
    assert supply.lines() == ["*IDN?", "*CLS", "SYST:ERR?", "OUTP?"]


def test_check_reports_a_readback_mismatch_and_queued_errors(resource_manager, pair):
    supply, meter = pair
    meter.replies["VOLT:DC:NPLC?"] = "1"  # the meter ignores the new setting
    supply.rejects["CURR 0.25"] = (-222, "Data out of range")
    report = check_bench(parse_bench_config(_bench_data(supply.resource, meter.resource)), resource_manager)
    assert not report.ok
    supply_check, meter_check = report.instruments
    assert any('-222, "Data out of range"' in problem for problem in supply_check.problems)
    assert meter_check.round_trips[0].read_back == 1.0 and not meter_check.round_trips[0].ok


def _write_bench(tmp_path, supply, meter) -> str:
    path = tmp_path / "bench.toml"
    path.write_text(
        'fixture = "resistor"\n[limits]\nmax_supply_v = "12 V"\nmax_drain_a = "250 mA"\nmax_power_w = "2 W"\n'
        '[series_resistor]\nohms = "47 ohm"\n'
        f'[instruments.supply]\nresource = "{supply.resource}"\nprofile = "generic-scpi-supply"\ntimeout_ms = {TEST_TIMEOUT_MS}\n'
        f'[instruments.meter]\nresource = "{meter.resource}"\nprofile = "generic-scpi-meter"\ntimeout_ms = {TEST_TIMEOUT_MS}\n')
    return str(path)


def test_cli_bench_check_with_a_file(tmp_path, pair, capsys):
    supply, meter = pair
    assert cli.main(["bench", "check", _write_bench(tmp_path, supply, meter)]) == 0
    out = capsys.readouterr().out
    assert "[ok] supply" in out and supply.identity in out and meter.identity in out
    assert cli.main(["bench", "check", "--json", _write_bench(tmp_path, supply, meter)]) == 0
    assert json.loads(capsys.readouterr().out)["ok"] is True


def test_cli_bench_check_failure_exit_codes(tmp_path, pair, capsys):
    supply, meter = pair
    supply.settings["OUTP"] = "1"
    assert cli.main(["bench", "check", _write_bench(tmp_path, supply, meter)]) == 1
    bad = tmp_path / "bad.toml"
    bad.write_text('fixture = "resistor"\n')
    assert cli.main(["bench", "check", str(bad)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "bad.toml" in err[0] and "limits" in err[0]
    assert cli.main(["bench", "check"]) == 2
    assert "--sim" in capsys.readouterr().err


def test_cli_bench_help_and_profiles(capsys):
    with pytest.raises(SystemExit):
        cli.main(["bench", "check", "--help"])
    text = capsys.readouterr().out
    assert "No output is ever enabled" in text and "--sim" in text and "--sim-fixture" in text
    assert cli.main(["bench", "profiles", "--json"]) == 0
    listing = [json.loads(line) for line in capsys.readouterr().out.splitlines()]  # one object per line
    assert {entry["name"] for entry in listing} >= {"generic-scpi-supply", "generic-scpi-meter", "generic-scpi-smu"}


LONG_FORM_SUPPLY = """\
format_version = 1
role = "supply"
description = "workshop supply that wants long-form commands (test profile)"

[limits]
max_voltage = 60.0
max_current = 5.0

[commands]
set_voltage = ":SOURce:VOLTage:LEVel {volts:.3f}"
get_voltage = ":SOURce:VOLTage:LEVel?"
set_current_limit = ":SOURce:CURRent:LEVel {amps:.4f}"
get_current_limit = ":SOURce:CURRent:LEVel?"
output_on = ":OUTPut:STATe ON"
output_off = ":OUTPut:STATe OFF"
output_state = ":OUTPut:STATe?"
measure_voltage = ":MEASure:VOLTage:DC?"
measure_current = ":MEASure:CURRent:DC?"
error_query = ":SYSTem:ERRor:NEXT?"
"""


def test_a_user_profile_on_the_search_path_drives_a_bench(tmp_path, monkeypatch, resource_manager, pair):
    supply, meter = pair
    folder = tmp_path / "my-drivers"
    folder.mkdir()
    (folder / "workshop-psu.toml").write_text(LONG_FORM_SUPPLY)
    monkeypatch.setenv("BENCHLAB_DRIVERS", str(folder))
    supply.settings[":OUTPUT:STATE"] = "0"
    data = _bench_data(supply.resource, meter.resource)
    data["instruments"]["supply"]["profile"] = "workshop-psu"
    report = check_bench(parse_bench_config(data), resource_manager)
    assert report.ok, format_check_report(report)
    assert report.instruments[0].profile == "workshop-psu"
    assert ":SOURce:CURRent:LEVel 0.2500" in supply.lines()
    assert ":SOURce:VOLTage:LEVel 0.000" in supply.lines()
    assert "SYST:ERR?" not in supply.lines()


@pytest.mark.parametrize("identity, remark", [
    # IEEE 488.2 *IDN? reply (section from memory: 10.14): <maker>,<model>,<serial or 0>,<firmware or 0>.
    ("BENCHLAB-SIM,PSU-1,SIM0001-1,0.1", None),
    ("BENCHLAB-SIM,PSU-1,0,0", None),
    ("HTTP/1.1 400 Bad Request", "1 field(s)"),
    ("BENCHLAB-SIM,PSU-1,SIM0001-1", "3 field(s)"),
    (",PSU-1,1,1", "maker or model field empty"),
])
def test_identity_shape_notes(identity, remark):
    from benchlab.services.bench import identity_notes

    notes = identity_notes(identity)
    if remark is None:
        assert notes == []
    else:
        assert len(notes) == 1 and remark in notes[0]


def test_odd_identity_is_noted_without_failing_the_check(resource_manager, pair):
    supply, meter = pair
    meter.identity = "DMM"
    report = check_bench(parse_bench_config(_bench_data(supply.resource, meter.resource)), resource_manager)
    assert report.ok
    assert report.instruments[1].notes and not report.instruments[0].notes
    assert "note: the *IDN? reply has 1 field(s)" in format_check_report(report)
