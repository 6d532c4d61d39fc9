"""The [thermal] table of a bench file and the sensor conversions."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

from benchlab.errors import ConfigError, InputError
from benchlab.instruments.config import load_bench_config, parse_bench_config
from benchlab.instruments.thermal_config import simulator_thermal_config
from benchlab.instruments.thermometer import (
    FixtureThermal, ntc_temperature_k, rtd_ohm, rtd_temperature_k,
)

REPO = Path(__file__).resolve().parents[2]
EXAMPLE = REPO / "docs" / "examples" / "bench-smu-thermal.toml"


def test_example_with_thermal_table_loads():
    config = load_bench_config(EXAMPLE)
    thermal = config.thermal
    assert thermal.sensor.kind == "meter" and thermal.sensor.conversion == "rtd"
    assert thermal.max_fixture_k == pytest.approx(358.15)
    assert "within 0.1 K" in thermal.settle_criterion()


@pytest.mark.parametrize("change, key", [
    ({"max_fixture_k": "85 degC"}, "thermal.max_fixture_k"),
    ({"max_heating_w": 50}, "thermal.max_heating_w"),
    ({"max_junction_k": 300}, "thermal.max_junction_k"),
    ({"colour": "red"}, "thermal.colour"),
    ({"sensor": {"kind": "meter", "resource": "TCPIP0::192.0.2.9::5025::SOCKET", "query": "MEAS:RES?",
                 "conversion": "thermocouple", "r_ref_ohm": 100}}, "thermal.sensor.conversion"),
    ({"sensor": {"kind": "scpi", "resource": "TCPIP0::192.0.2.9::5025::SOCKET", "query": "MEAS:TEMP"}},
     "thermal.sensor.query"),
    ({"control": {"kind": "scpi", "resource": "TCPIP0::192.0.2.9::5025::SOCKET", "command": "TEMP 50"}},
     "thermal.control.command"),
])
def test_each_thermal_defect_is_one_error_naming_its_key(change, key):
    data = tomllib.loads(EXAMPLE.read_text())
    data["thermal"].update(change)
    data["instruments"]["smu"]["profile"] = "generic-scpi-smu"
    with pytest.raises(ConfigError) as err:
        parse_bench_config(data)
    assert key in str(err.value)


def test_rtd_conversion_follows_iec_60751():
    # IEC 60751 table: a Pt100 reads 138.5055 ohm at 100 degC and 119.3971 ohm at 50 degC (from memory)
    assert rtd_ohm(373.15, 100.0) == pytest.approx(138.5055, abs=1e-3)
    assert rtd_temperature_k(119.3971, 100.0) == pytest.approx(323.15, abs=1e-3)


def test_ntc_conversion_inverts_the_b_equation():
    # B-parameter equation at its reference point returns the reference temperature (definition; common practice)
    assert ntc_temperature_k(10_000.0, 10_000.0, 298.15, 3950.0) == pytest.approx(298.15)
    # 3588 ohm on a 10 kohm / B 3950 K part is 50 degC (derived from the same equation)
    assert ntc_temperature_k(3588.0, 10_000.0, 298.15, 3950.0) == pytest.approx(323.15, abs=0.02)


def test_fixture_above_its_limit_is_refused_before_anything_is_sent():
    sent = []

    class Recorder:
        def write(self, text):
            sent.append(text)

        def close(self):
            pass

    config = simulator_thermal_config("TCPIP0::127.0.0.1::1::SOCKET")
    thermal = FixtureThermal(config, {config.control.resource: Recorder()})
    with pytest.raises(InputError, match="max_fixture_k"):
        thermal.set_k(config.max_fixture_k + 1.0)
    assert sent == []
    thermal.set_k(330.0)
    assert sent == ["SIM:FIXT:TEMP 330.000"]


def test_manual_sensor_asks_until_it_gets_a_number():
    config = simulator_thermal_config("TCPIP0::127.0.0.1::1::SOCKET")
    from dataclasses import replace
    from benchlab.instruments.thermal_config import SensorSpec

    answers = iter(["warm", "41.5"])
    said = []
    thermal = FixtureThermal(replace(config, sensor=SensorSpec(kind="manual")), {}, ask=lambda p: next(answers),
                             say=said.append)
    assert thermal.read_k() == pytest.approx(314.65)
    assert said and "not a number" in said[0]
