"""Profile loading: the search path and one clear ConfigError (file, key, problem) per defect."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from benchlab.errors import ConfigError
from benchlab.instruments.profiles import (ENV_DRIVERS, ROLES, available_profiles, bundled_drivers_dir,
                                           find_profile, load_profile, profile_search_path)

SUPPLY = """\
format_version = 1
role = "supply"
description = "test supply"

[limits]
max_voltage = 30.0
max_current = 3.0

[commands]
set_voltage = "VOLT {volts:.6g}"
set_current_limit = "CURR {amps:.6g}"
output_on = "OUTP ON"
output_off = "OUTP OFF"
output_state = "OUTP?"
measure_voltage = "MEAS:VOLT?"
measure_current = "MEAS:CURR?"
"""


def write(folder: Path, name: str, text: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name}.toml"
    path.write_text(text)
    return path


def load_text(tmp_path: Path, text: str) -> None:
    load_profile(str(write(tmp_path, "under-test", text)))


def test_bundled_profiles_load_and_cover_every_role():
    names = {"generic-scpi-supply": "supply", "generic-scpi-meter": "meter", "generic-scpi-smu": "smu"}
    for name, role in names.items():
        profile = load_profile(name)
        assert profile.role == role
        assert Path(profile.source_path).parent == bundled_drivers_dir()
    assert set(names.values()) == set(ROLES)


def test_bundled_profiles_name_no_maker():
    # Rule of the project: generic profiles only; the one maker name allowed is the simulator's.
    for path in bundled_drivers_dir().glob("*.toml"):
        assert path.stem.startswith("generic-")


def test_search_path_order_and_override(tmp_path, monkeypatch):
    user_home = tmp_path / "config"
    monkeypatch.setenv("XDG_CONFIG_HOME", str(user_home))
    first, second = tmp_path / "a", tmp_path / "b"
    monkeypatch.setenv(ENV_DRIVERS, os.pathsep.join([str(first), str(second)]))
    assert profile_search_path() == [bundled_drivers_dir(), user_home / "benchlab" / "drivers", first, second]

    override = SUPPLY.replace("test supply", "from the user folder")
    write(user_home / "benchlab" / "drivers", "generic-scpi-supply", override)
    assert load_profile("generic-scpi-supply").description == "from the user folder"
    write(first, "generic-scpi-supply", SUPPLY.replace("test supply", "from a"))
    write(second, "generic-scpi-supply", SUPPLY.replace("test supply", "from b"))
    assert load_profile("generic-scpi-supply").description == "from b"  # the last folder wins
    write(first, "my-bench-psu", SUPPLY)
    assert available_profiles()["my-bench-psu"] == first / "my-bench-psu.toml"


def test_unknown_name_lists_what_exists():
    with pytest.raises(ConfigError, match="no profile named 'nope'.*generic-scpi-supply"):
        find_profile("nope", environ={})


def test_profile_by_relative_path(tmp_path):
    write(tmp_path / "mine", "psu", SUPPLY)
    assert find_profile("mine/psu.toml", base_dir=tmp_path) == tmp_path / "mine" / "psu.toml"
    with pytest.raises(ConfigError, match="does not exist"):
        find_profile("mine/other.toml", base_dir=tmp_path)


BAD_PROFILES = [
    # (change to the valid text, dotted key named, words of the problem)
    (lambda t: t.replace("format_version = 1", "format_version = 2"), "format_version", "reads format_version = 1"),
    (lambda t: t.replace("format_version = 1\n", ""), "format_version", "missing"),
    (lambda t: t.replace('format_version = 1', 'format_version = "1"'), "format_version", "is '1'"),
    (lambda t: t.replace('role = "supply"', 'role = "scope"'), "role", "must be one of"),
    (lambda t: t + "\n[extras]\nx = 1\n", "extras", "unknown key"),
    (lambda t: t.replace('set_voltage = "VOLT {volts:.6g}"', 'set_volts = "VOLT {volts:.6g}"'),
     "commands.set_volts", "unknown key"),
    (lambda t: t.replace('measure_current = "MEAS:CURR?"\n', ""), "commands.measure_current", "missing"),
    (lambda t: t.replace('"OUTP ON"', "1"), "commands.output_on", "must be a string or a non-empty list"),
    (lambda t: t.replace('"OUTP ON"', "[]"), "commands.output_on", "must be a string or a non-empty list"),
    (lambda t: t.replace('"VOLT {volts:.6g}"', '"VOLT {amps:.6g}"'), "commands.set_voltage",
     "expects {volts}, found {amps}"),
    (lambda t: t.replace('"VOLT {volts:.6g}"', '"VOLT 1"'), "commands.set_voltage", "expects {volts}, found none"),
    (lambda t: t.replace('"VOLT {volts:.6g}"', '"VOLT {volts:.6q}"'), "commands.set_voltage", "bad template"),
    (lambda t: t.replace('"VOLT {volts:.6g}"', '"VOLT {volts"'), "commands.set_voltage", "bad template"),
    (lambda t: t.replace('"OUTP?"', '"OUTP? {volts}"'), "commands.output_state", "expects no placeholders"),
    (lambda t: t.replace("max_voltage = 30.0", 'max_voltage = "30 V"'), "limits.max_voltage", "must be a number"),
    (lambda t: t.replace("max_voltage = 30.0", "max_voltage = -1"), "limits.max_voltage", "must be positive"),
    (lambda t: t.replace("max_current = 3.0\n", ""), "limits.max_current", "missing"),
    (lambda t: t.replace("[limits]", "[limits]\nmax_power = 90.0"), "limits.max_power", "unknown key"),
    (lambda t: t + '\n[connection]\nread_termination = 10\n', "connection.read_termination", "must be a string"),
    (lambda t: t.replace("[commands]", "[commands]\nread = \"READ?\""), "commands.read", "unknown key"),
    (lambda t: t + '\n[connection]\nbaud_rate = "9600"\n', "connection.baud_rate", "positive whole number"),
    (lambda t: t + '\n[connection]\nparity = "none"\n', "connection.parity", "unknown key"),
]


@pytest.mark.parametrize("change, key, problem", BAD_PROFILES)
def test_profile_defects_name_file_key_and_problem(tmp_path, change, key, problem):
    with pytest.raises(ConfigError) as caught:
        load_text(tmp_path, change(SUPPLY))
    message = str(caught.value)
    assert str(tmp_path / "under-test.toml") in message
    assert caught.value.key == key
    assert problem in message


def test_not_toml_names_the_file(tmp_path):
    with pytest.raises(ConfigError, match="not valid TOML") as caught:
        load_text(tmp_path, "format_version = = 1")
    assert str(tmp_path) in str(caught.value)


def test_smu_profile_needs_its_list_table(tmp_path):
    text = (bundled_drivers_dir() / "generic-scpi-smu.toml").read_text()
    without_list = text[: text.index("[list]")]
    with pytest.raises(ConfigError) as caught:
        load_text(tmp_path, without_list)
    assert caught.value.key == "list"
    bad_points = text.replace("max_points = 2000", "max_points = 0")
    with pytest.raises(ConfigError) as caught:
        load_text(tmp_path, bad_points)
    assert caught.value.key == "list.max_points"
    bad_fields = text.replace('fields = ["volts", "amps"]', 'fields = ["volts"]')
    with pytest.raises(ConfigError) as caught:
        load_text(tmp_path, bad_fields)
    assert caught.value.key == "reading.fields"


def test_list_table_is_only_for_an_smu(tmp_path):
    with pytest.raises(ConfigError) as caught:
        load_text(tmp_path, SUPPLY + "\n[list]\nmax_points = 10\n")
    assert caught.value.key == "list"


def test_multi_line_operation_and_extra_reading_fields(tmp_path):
    text = (bundled_drivers_dir() / "generic-scpi-smu.toml").read_text().replace(
        'fields = ["volts", "amps"]', 'fields = ["amps", "status", "volts"]')
    profile = load_profile(str(write(tmp_path, "smu3", text)))
    assert profile.reading_fields == ("amps", "status", "volts")
    assert profile.lines("set_nplc", nplc=2) == ["SENS:CURR:NPLC 2", "SENS:VOLT:NPLC 2"]
    assert profile.to_dict()["commands"]["set_nplc"] == ["SENS:CURR:NPLC {nplc:.6g}", "SENS:VOLT:NPLC {nplc:.6g}"]


def test_common_commands_default_to_ieee_488_2(tmp_path):
    # IEEE 488.2 common commands (section from memory: 10): *IDN?, *CLS, *RST, *OPC? are the common commands;
    # SYSTem:ERRor? is SCPI-1999's queue.
    profile = load_profile(str(write(tmp_path, "psu", SUPPLY)))
    assert profile.lines("identify") == ["*IDN?"]
    assert profile.lines("clear_status") == ["*CLS"]
    assert profile.lines("reset") == ["*RST"]
    assert profile.lines("error_query") == ["SYST:ERR?"]
    assert not profile.has("get_voltage")


def test_source_checkout_drivers_win_then_the_installed_package(tmp_path, monkeypatch):
    # pyproject maps drivers/ to the package benchlab.drivers. A source checkout uses its own drivers/ (an editable
    # install of another checkout must not shadow them); an installed package (no checkout around it) its own folder.
    import importlib.machinery
    import importlib.util

    from benchlab.instruments import profiles as profiles_module

    spec = importlib.machinery.ModuleSpec("benchlab.drivers", None, is_package=True)
    spec.submodule_search_locations = [str(tmp_path / "installed")]
    real_find_spec = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec",
                        lambda name, *a: spec if name == "benchlab.drivers" else real_find_spec(name, *a))
    assert bundled_drivers_dir() == Path(__file__).resolve().parents[2] / "drivers"
    fake_module = tmp_path / "site" / "benchlab" / "instruments" / "profiles.py"
    monkeypatch.setattr(profiles_module, "__file__", str(fake_module))
    assert bundled_drivers_dir() == tmp_path / "installed"
