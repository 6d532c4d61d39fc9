"""Bench files: the shipped examples load, and each defect gives one ConfigError naming file and key."""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest

from benchlab.errors import ConfigError
from benchlab.instruments.config import BenchConfig, load_bench_config, parse_bench_config, simulator_bench_config
from benchlab.units import parse_quantity

REPO = Path(__file__).resolve().parents[2]

RESISTOR_BENCH = """\
fixture = "resistor"

[limits]
max_supply_v = "12 V"
max_drain_a = "500 mA"
max_power_w = 3

[measurement]
settle_s = "20 ms"
nplc = 2

[series_resistor]
ohms = "10.02 ohm"
tolerance = "0.5 %"

[instruments.supply]
resource = "TCPIP0::10.0.0.5::5025::SOCKET"
profile = "generic-scpi-supply"

[instruments.meter]
resource = "GPIB0::22::INSTR"
profile = "generic-scpi-meter"
timeout_ms = 5000
"""


def load(tmp_path: Path, text: str) -> BenchConfig:
    path = tmp_path / "bench.toml"
    path.write_text(text)
    return load_bench_config(path)


def test_shipped_examples_load():
    resistor = load_bench_config(REPO / "docs" / "examples" / "bench-resistor.toml")
    assert resistor.fixture == "resistor"
    assert resistor.roles() == ("supply", "meter")
    assert resistor.limits.max_drain_a == pytest.approx(0.5)
    assert resistor.series_resistor_ohm == pytest.approx(10.02)
    smu = load_bench_config(REPO / "docs" / "examples" / "bench-smu.toml")
    assert smu.roles() == ("smu",)
    assert smu.instruments["smu"].resource.startswith("USB0::")


def test_units_are_converted_to_si(tmp_path):
    config = load(tmp_path, RESISTOR_BENCH)
    assert config.limits.max_supply_v == 12.0
    assert config.limits.max_drain_a == pytest.approx(0.5)
    assert config.settle_s == pytest.approx(0.02)
    assert config.series_resistor_tolerance == pytest.approx(0.005)
    assert config.instruments["meter"].timeout_ms == 5000
    assert config.instruments["supply"].timeout_ms == 2000
    assert json.loads(json.dumps(config.to_dict()))["limits"]["max_power_w"] == 3


def test_open_file_object_is_accepted():
    config = load_bench_config(io.StringIO(RESISTOR_BENCH))
    assert config.nplc == 2.0


@pytest.mark.parametrize("text, unit, expected", [
    ("500 mA", "A", 0.5), ("12V", "V", 12.0), ("4.7 kohm", "ohm", 4700.0), ("10R", "ohm", 10.0),
    ("50 ms", "s", 0.05), ("250 uA", "A", 250e-6), ("1 %", "%", 0.01), (0.02, "%", 0.02), (3, "W", 3.0),
])
def test_quantities(text, unit, expected):
    # SI prefixes: BIPM SI Brochure, 9th ed. (2019), table 7.
    assert parse_quantity(text, unit) == pytest.approx(expected)


def test_unit_slip_hint_keeps_the_prefix():
    # '500 mV' for a current is a unit slip: the hint must suggest 500 mA, not 500 A (SI prefixes as above)
    with pytest.raises(ValueError, match=r"write e\.g\. '500 mA'"):
        parse_quantity("500 mV", "A")
    with pytest.raises(ValueError, match=r"write e\.g\. '12 V'"):
        parse_quantity("12 A", "V")


BAD_BENCHES = [
    # (change, dotted key, words of the problem)
    (lambda t: t.replace('fixture = "resistor"\n', ""), "fixture", "missing"),
    (lambda t: t.replace('"resistor"', '"bridge"', 1), "fixture", "must be one of"),
    (lambda t: t.replace('max_drain_a = "500 mA"\n', ""), "limits.max_drain_a", "missing"),
    (lambda t: t.replace('"500 mA"', '"500 mV"'), "limits.max_drain_a", "is not in A"),
    (lambda t: t.replace('"12 V"', '"12 A"'), "limits.max_supply_v", "is not in V"),
    (lambda t: t.replace('"12 V"', "true"), "limits.max_supply_v", "must be a number"),
    (lambda t: t.replace('"20 ms"', '"fast"'), "measurement.settle_s", "is not a quantity"),
    (lambda t: t.replace('"20 ms"', '"-5 ms"'), "measurement.settle_s", "must be 0 to 3600 s"),
    (lambda t: t.replace("max_power_w = 3", "max_power_w = 0"), "limits.max_power_w", "must be above 0"),
    # 12 V x 0.5 A = 6 W: a 3000 W limit could never apply (probably mW meant).
    (lambda t: t.replace("max_power_w = 3", "max_power_w = 3000"), "limits.max_power_w", "could never apply"),
    (lambda t: t.replace('"10.02 ohm"', "0"), "series_resistor.ohms", "above 0 ohm"),
    (lambda t: t.replace('"10.02 ohm"', '"-10 ohm"'), "series_resistor.ohms", "above 0 ohm"),
    (lambda t: t.replace('"10.02 ohm"', '"10 V"'), "series_resistor.ohms", "is not in ohm"),
    (lambda t: t.replace('ohms = "10.02 ohm"\n', ""), "series_resistor.ohms", "missing"),
    (lambda t: t.replace('tolerance = "0.5 %"', 'tolerance = "60 %"'), "series_resistor.tolerance", "fraction"),
    # 0.5 A through 10.02 ohm is 2.5 W, above a 1 W part.
    (lambda t: t.replace('tolerance = "0.5 %"', 'tolerance = "0.5 %"\npower_rating_w = "1 W"'),
     "series_resistor.power_rating_w", "above its rating"),
    (lambda t: t[: t.index("[instruments.meter]")], "instruments.meter", "fixture 'resistor' needs"),
    (lambda t: t.replace("[instruments.meter]", "[instruments.scope]"), "instruments.scope", "unknown key"),
    (lambda t: t.replace('resource = "GPIB0::22::INSTR"\n', ""), "instruments.meter.resource", "missing"),
    (lambda t: t.replace('"GPIB0::22::INSTR"', '"10.0.0.9:5025"'), "instruments.meter.resource",
     "not a VISA resource string"),
    (lambda t: t.replace("timeout_ms = 5000", "timeout_ms = 2.5"), "instruments.meter.timeout_ms",
     "positive whole number"),
    (lambda t: t.replace('profile = "generic-scpi-meter"', 'profile = "generic-scpi-supply"'),
     "instruments.meter.profile", "is for role supply, not meter"),
    (lambda t: t.replace('profile = "generic-scpi-meter"', 'profile = "no-such-meter"'),
     "instruments.meter.profile", "no profile named 'no-such-meter'"),
    # The generic supply profile's instrument does 30 V and 3 A.
    (lambda t: t.replace('"12 V"', '"40 V"'), "limits.max_supply_v", "above the instrument's 30 V"),
    (lambda t: t.replace('"500 mA"', '"5 A"').replace("max_power_w = 3", "max_power_w = 30"),
     "limits.max_drain_a", "above the instrument's 3 A"),
    (lambda t: t.replace("nplc = 2", "nplc = 500"), "measurement.nplc", "outside the instrument's"),
    (lambda t: t.replace("[measurement]", "[measurement]\nsettle = 1"), "measurement.settle", "unknown key"),
    (lambda t: "format_version = 7\n" + t, "format_version", "reads format_version = 1"),
    (lambda t: t + "\n[notes]\nowner = 5\n", "notes.owner", "must be a string"),
]


@pytest.mark.parametrize("change, key, problem", BAD_BENCHES)
def test_bench_defects_name_file_key_and_problem(tmp_path, change, key, problem):
    with pytest.raises(ConfigError) as caught:
        load(tmp_path, change(RESISTOR_BENCH))
    assert caught.value.key == key
    assert problem in str(caught.value)
    assert str(tmp_path / "bench.toml") in str(caught.value)


def test_smu_fixture_rejects_a_series_resistor_and_needs_its_smu(tmp_path):
    smu = ('fixture = "smu"\n[limits]\nmax_supply_v = 10\nmax_drain_a = 0.2\nmax_power_w = 1\n'
           '[instruments.smu]\nresource = "TCPIP0::10.0.0.7::5025::SOCKET"\nprofile = "generic-scpi-smu"\n')
    assert load(tmp_path, smu).fixture == "smu"
    with pytest.raises(ConfigError) as caught:
        load(tmp_path, smu + "[series_resistor]\nohms = 10\n")
    assert caught.value.key == "series_resistor"
    with pytest.raises(ConfigError) as caught:
        load(tmp_path, smu.replace("[instruments.smu]", "[instruments.supply]")
             .replace("generic-scpi-smu", "generic-scpi-supply"))
    assert caught.value.key == "instruments.smu"
    # The generic SMU forces at most 20 V.
    with pytest.raises(ConfigError, match="above the instrument's 20 V"):
        load(tmp_path, smu.replace("max_supply_v = 10", "max_supply_v = 25"))


def test_profile_path_relative_to_the_bench_file(tmp_path):
    own = tmp_path / "profiles"
    own.mkdir()
    source = (REPO / "drivers" / "generic-scpi-meter.toml").read_text()
    (own / "workshop-meter.toml").write_text(source.replace("Generic SCPI DC multimeter", "workshop meter"))
    config = load(tmp_path, RESISTOR_BENCH.replace('"generic-scpi-meter"', '"profiles/workshop-meter.toml"'))
    assert config.instruments["meter"].profile == str(own / "workshop-meter.toml")


def test_meter_must_stand_the_full_supply_voltage(tmp_path):
    # An open part leaves the whole supply across the meter (Kirchhoff's voltage law, no current in R).
    low = (REPO / "drivers" / "generic-scpi-meter.toml").read_text().replace("max_voltage = 1000.0", "max_voltage = 10.0")
    (tmp_path / "low-meter.toml").write_text(low)
    with pytest.raises(ConfigError, match="above the meter's 10 V") as caught:
        load(tmp_path, RESISTOR_BENCH.replace('"generic-scpi-meter"', '"low-meter.toml"'))
    assert caught.value.key == "limits.max_supply_v"


def test_simulator_bench_config_needs_no_file():
    resources = {role: f"TCPIP0::127.0.0.1::{port}::SOCKET"
                 for role, port in (("supply", 50001), ("meter", 50002), ("smu", 50003))}
    resistor = simulator_bench_config(resources, series_resistor_ohm=47.3)
    assert resistor.roles() == ("supply", "meter")
    assert resistor.series_resistor_ohm == 47.3
    assert resistor.source_path is None
    assert set(resistor.instruments) == {"supply", "meter"}
    smu = simulator_bench_config(resources, fixture="smu")
    assert set(smu.instruments) == {"smu"}
    with pytest.raises(ConfigError, match="needs"):
        simulator_bench_config({"supply": resources["supply"]})
    with pytest.raises(ConfigError, match="above 0 ohm"):
        simulator_bench_config(resources, series_resistor_ohm=0.0)


def test_parse_bench_config_without_a_file():
    data = {"fixture": "smu", "limits": {"max_supply_v": 5, "max_drain_a": 0.1, "max_power_w": 0.5},
            "instruments": {"smu": {"resource": "ASRL3::INSTR", "profile": "generic-scpi-smu"}}}
    assert parse_bench_config(data).instruments["smu"].resource == "ASRL3::INSTR"


def test_old_smu_role_key_still_loads_with_a_deprecation_message(tmp_path):
    # The one-word role name of older bench files is accepted for one version (issue: names of our own).
    old = ('fixture = "smu"\n[limits]\nmax_supply_v = 10\nmax_drain_a = 0.2\nmax_power_w = 1\n'
           '[instruments.source_meter]\nresource = "TCPIP0::192.0.2.7::5025::SOCKET"\nprofile = "generic-scpi-smu"\n')
    with pytest.warns(FutureWarning, match=r"\[instruments.source_meter\].*deprecated.*'smu'"):
        config = load(tmp_path, old)
    assert set(config.instruments) == {"smu"}
    assert config.instruments["smu"].role == "smu"
    both = old + '[instruments.smu]\nresource = "TCPIP0::192.0.2.8::5025::SOCKET"\nprofile = "generic-scpi-smu"\n'
    with pytest.raises(ConfigError, match="only"):
        load(tmp_path, both)
