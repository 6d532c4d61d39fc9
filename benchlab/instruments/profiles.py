"""Instrument profiles: TOML files holding the SCPI text of each role operation.

One file per class of instrument (see ``docs/profiles.md``). A profile is found by name on a
search path (bundled ``drivers/``, the user's config directory, then each folder in
``BENCHLAB_DRIVERS``; a later folder overrides an earlier one by name) or given as a path.
Loading validates everything and raises one :class:`~benchlab.errors.ConfigError` naming the
file, the key and the problem.
"""

from __future__ import annotations

import warnings

import importlib.util
import os
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from benchlab.errors import ConfigError
from benchlab.instruments.scpi import render, template_fields

PROFILE_FORMAT_VERSION = 1
ROLES = ("supply", "meter", "smu")
# Role names an older benchlab wrote, accepted for one version with a deprecation message.
LEGACY_ROLES = {"source_meter": "smu"}


def legacy_role_message(old: str, where: str) -> str:
    """The deprecation message for an old role name found at ``where`` (a file key)."""
    return (f"{where}: the role name '{old}' is deprecated and will stop working in the next version; "
            f"write '{LEGACY_ROLES[old]}'")
ENV_DRIVERS = "BENCHLAB_DRIVERS"

# Operation -> (placeholders it must use, required?). Shared by every role.
_COMMON_COMMANDS: dict[str, tuple[frozenset[str], bool]] = {
    "identify": (frozenset(), False),
    "clear_status": (frozenset(), False),
    "reset": (frozenset(), False),
    "error_query": (frozenset(), False),
    "wait": (frozenset(), False),
}
COMMON_DEFAULTS: dict[str, str] = {
    "identify": "*IDN?",
    "clear_status": "*CLS",
    "reset": "*RST",
    "error_query": "SYST:ERR?",
    "wait": "*OPC?",
}

_NONE = frozenset()
_ROLE_COMMANDS: dict[str, dict[str, tuple[frozenset[str], bool]]] = {
    "supply": {
        "set_voltage": (frozenset({"volts"}), True),
        "get_voltage": (_NONE, False),
        "set_current_limit": (frozenset({"amps"}), True),
        "get_current_limit": (_NONE, False),
        "output_on": (_NONE, True),
        "output_off": (_NONE, True),
        "output_state": (_NONE, True),
        "measure_voltage": (_NONE, True),
        "measure_current": (_NONE, True),
    },
    "meter": {
        "configure_voltage_range": (frozenset({"range"}), True),
        "configure_voltage_auto": (_NONE, True),
        "set_voltage_nplc": (frozenset({"nplc"}), True),
        "get_voltage_nplc": (_NONE, False),
        "configure_current_range": (frozenset({"range"}), True),
        "configure_current_auto": (_NONE, True),
        "set_current_nplc": (frozenset({"nplc"}), True),
        "get_current_nplc": (_NONE, False),
        "read": (_NONE, True),
        # optional pair: start one reading and collect it later, so the sweep reads the supply meanwhile
        "initiate": (_NONE, False),
        "fetch": (_NONE, False),
    },
    "smu": {
        "source_voltage": (_NONE, True),
        "source_current": (_NONE, True),
        "set_voltage_level": (frozenset({"volts"}), True),
        "set_current_level": (frozenset({"amps"}), True),
        "set_current_compliance": (frozenset({"amps"}), True),
        "get_current_compliance": (_NONE, False),
        "set_voltage_compliance": (frozenset({"volts"}), True),
        "get_voltage_compliance": (_NONE, False),
        "current_compliance_tripped": (_NONE, True),
        "voltage_compliance_tripped": (_NONE, True),
        "set_nplc": (frozenset({"nplc"}), True),
        "output_on": (_NONE, True),
        "output_off": (_NONE, True),
        "output_state": (_NONE, True),
        "read": (_NONE, True),
    },
}

# The list-sweep table of a source-measure unit (role smu only).
_LIST_COMMANDS: dict[str, tuple[frozenset[str], bool]] = {
    "upload_voltage": (frozenset({"values"}), True),
    "upload_current": (frozenset({"values"}), True),
    "dwell": (frozenset({"seconds"}), True),
    "list_mode_voltage": (_NONE, True),
    "list_mode_current": (_NONE, True),
    "fixed_mode_voltage": (_NONE, True),
    "fixed_mode_current": (_NONE, True),
    "clear_buffer": (_NONE, False),  # optional: an instrument whose start does not empty its buffer
    "start": (_NONE, True),
    "fetch": (_NONE, True),
}
_LIST_SETTINGS = {"max_points": int, "value_format": str, "separator": str}

_ROLE_LIMITS: dict[str, tuple[str, ...]] = {
    "supply": ("max_voltage", "max_current"),
    "meter": ("max_voltage", "max_current", "min_nplc", "max_nplc"),
    "smu": ("max_voltage", "max_current", "min_nplc", "max_nplc"),
}
_CONNECTION_KEYS = {"read_termination": str, "write_termination": str, "baud_rate": int}
_READING_FIELDS = ("volts", "amps")
_SAMPLE_VALUES = {"volts": 1.25, "amps": 0.0125, "range": 10.0, "nplc": 1.0, "seconds": 0.01, "values": "1,2"}


@dataclass(frozen=True)
class Profile:
    """A validated instrument profile.

    ``commands`` maps an operation name to the SCPI lines it sends (templates with
    ``{placeholders}``); ``list_sweep`` holds the list-sweep table of a source-measure unit.
    """

    name: str
    role: str
    description: str
    commands: Mapping[str, tuple[str, ...]]
    limits: Mapping[str, float]
    connection: Mapping[str, Any] = field(default_factory=dict)
    reading_fields: tuple[str, ...] = ("volts", "amps")
    # "current"/"voltage" -> bit of a status register read by the *_compliance_tripped query (else it answers 0/1)
    compliance_bits: Mapping[str, int] = field(default_factory=dict)
    list_commands: Mapping[str, tuple[str, ...]] = field(default_factory=dict)
    list_settings: Mapping[str, Any] = field(default_factory=dict)
    # the instrument takes a setting and a later query (with the error-queue query chained to it) without a
    # round trip of its own per setting (docs/profiles.md); off unless the profile says so
    pipeline_error_check: bool = False
    format_version: int = PROFILE_FORMAT_VERSION
    source_path: str | None = None

    def has(self, operation: str) -> bool:
        """True when the profile defines ``operation`` (optional ones may be absent)."""
        return operation in self.commands

    def lines(self, operation: str, **values: Any) -> list[str]:
        """The SCPI lines of ``operation`` with ``values`` filled in.

        Raises
        ------
        KeyError
            When the profile does not define the operation.
        """
        return [render(template, **values) for template in self.commands[operation]]

    def list_lines(self, operation: str, **values: Any) -> list[str]:
        """Like :meth:`lines` for the list-sweep table."""
        return [render(template, **values) for template in self.list_commands[operation]]

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (for reports and ``bench check --json``)."""
        return {
            "name": self.name, "role": self.role, "description": self.description,
            "format_version": self.format_version, "source_path": self.source_path,
            "limits": dict(self.limits), "connection": dict(self.connection),
            "commands": {key: list(value) for key, value in self.commands.items()},
            "reading_fields": list(self.reading_fields), "compliance_bits": dict(self.compliance_bits),
            "list_commands": {key: list(value) for key, value in self.list_commands.items()},
            "list_settings": dict(self.list_settings), "pipeline_error_check": self.pipeline_error_check,
        }


# ---------------------------------------------------------------------------------------------
# search path
def bundled_drivers_dir() -> Path:
    """The folder of the profiles shipped with benchlab (source checkout or installed package)."""
    # A source checkout's own drivers/ first: an editable install elsewhere must not shadow this tree's profiles.
    checkout = Path(__file__).resolve().parents[2]
    if (checkout / "pyproject.toml").is_file() and (checkout / "drivers").is_dir():
        return checkout / "drivers"
    spec = importlib.util.find_spec("benchlab.drivers")
    if spec is not None and spec.submodule_search_locations:
        return Path(next(iter(spec.submodule_search_locations)))
    return checkout / "drivers"


def user_drivers_dir() -> Path:
    """The user's profile folder: ``<platformdirs user config dir>/benchlab/drivers``."""
    import platformdirs  # imported here: resolving the folder reads the environment

    return Path(platformdirs.user_config_dir("benchlab")) / "drivers"


def profile_search_path(environ: Mapping[str, str] | None = None) -> list[Path]:
    """Folders searched for profiles, lowest priority first.

    Parameters
    ----------
    environ : mapping, optional
        Environment to read ``BENCHLAB_DRIVERS`` from (default ``os.environ``).
    """
    env = os.environ if environ is None else environ
    extra = [Path(part) for part in env.get(ENV_DRIVERS, "").split(os.pathsep) if part.strip()]
    return [bundled_drivers_dir(), user_drivers_dir(), *extra]


def available_profiles(environ: Mapping[str, str] | None = None) -> dict[str, Path]:
    """Profile name -> file, later folders overriding earlier ones by name."""
    found: dict[str, Path] = {}
    for folder in profile_search_path(environ):
        if folder.is_dir():
            for path in sorted(folder.glob("*.toml")):
                found[path.stem] = path
    return found


def find_profile(name_or_path: str, *, base_dir: Path | None = None,
                 environ: Mapping[str, str] | None = None) -> Path:
    """Resolve a profile reference: a path (absolute, or relative to ``base_dir``) or a name.

    Raises
    ------
    ConfigError
        When nothing matches; the message lists the names that exist.
    """
    looks_like_path = name_or_path.endswith(".toml") or os.sep in name_or_path or "/" in name_or_path
    if looks_like_path:
        path = Path(name_or_path).expanduser()
        if not path.is_absolute() and base_dir is not None:
            path = base_dir / path
        if path.is_file():
            return path
        raise ConfigError(f"profile file '{path}' does not exist", key="profile")
    profiles = available_profiles(environ)
    if name_or_path in profiles:
        return profiles[name_or_path]
    names = ", ".join(sorted(profiles)) or "none"
    raise ConfigError(f"no profile named '{name_or_path}' on the search path (found: {names})", key="profile")


def load_profile(name_or_path: str, *, base_dir: Path | None = None,
                 environ: Mapping[str, str] | None = None) -> Profile:
    """Find, read and validate a profile (see :func:`find_profile`, :func:`parse_profile`)."""
    path = find_profile(name_or_path, base_dir=base_dir, environ=environ)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML: {exc}", path=str(path)) from exc
    except OSError as exc:
        raise ConfigError(f"cannot read: {exc}", path=str(path)) from exc
    return parse_profile(data, name=path.stem, path=str(path))


# ---------------------------------------------------------------------------------------------
# validation
def parse_profile(data: Mapping[str, Any], *, name: str, path: str | None = None) -> Profile:
    """Validate the parsed TOML of a profile and build a :class:`Profile`.

    Raises
    ------
    ConfigError
        On a wrong format version, an unknown or missing key, a wrong type or a bad template;
        the error names ``path`` and the dotted key.
    """
    def fail(key: str, problem: str) -> ConfigError:
        return ConfigError(problem, path=path, key=key)

    version = data.get("format_version")
    if version is None:
        raise fail("format_version", f"missing (this benchlab reads format_version = {PROFILE_FORMAT_VERSION})")
    if type(version) is not int or version != PROFILE_FORMAT_VERSION:
        raise fail("format_version", f"is {version!r}; this benchlab reads format_version = {PROFILE_FORMAT_VERSION}")
    role = data.get("role")
    if role in LEGACY_ROLES:
        warnings.warn(legacy_role_message(role, f"{path or 'profile'}: key 'role'"), FutureWarning, stacklevel=2)
        role = LEGACY_ROLES[role]
    if role not in ROLES:
        raise fail("role", f"must be one of {', '.join(ROLES)}, got {role!r}")
    allowed_top = {"format_version", "role", "description", "connection", "limits", "commands",
                   "pipeline_error_check"}
    if role == "smu":
        allowed_top |= {"reading", "list"}
    _reject_unknown(data, allowed_top, "", fail)
    description = data.get("description", "")
    if not isinstance(description, str):
        raise fail("description", "must be a string")
    pipeline = data.get("pipeline_error_check", False)
    if not isinstance(pipeline, bool):
        raise fail("pipeline_error_check", f"must be true or false, got {pipeline!r}")

    command_schema = {**_COMMON_COMMANDS, **_ROLE_COMMANDS[role]}
    commands = {key: (value,) for key, value in COMMON_DEFAULTS.items()}
    commands.update(_parse_commands(_table(data, "commands", fail), command_schema, "commands", fail))
    limits = _parse_limits(_table(data, "limits", fail), _ROLE_LIMITS[role], fail)
    connection = _parse_connection(data.get("connection", {}), fail)

    reading_fields: tuple[str, ...] = ("volts", "amps")
    compliance_bits: dict[str, int] = {}
    list_commands: dict[str, tuple[str, ...]] = {}
    list_settings: dict[str, Any] = {}
    if role == "smu":
        reading_fields, compliance_bits = _parse_reading(data.get("reading", {}), fail)
        list_table = _table(data, "list", fail)
        settings_part = {key: value for key, value in list_table.items() if key in _LIST_SETTINGS}
        command_part = {key: value for key, value in list_table.items() if key not in _LIST_SETTINGS}
        list_commands = _parse_commands(command_part, _LIST_COMMANDS, "list", fail)
        list_settings = _parse_list_settings(settings_part, fail)
    return Profile(name=name, role=role, description=description, commands=commands, limits=limits,
                   connection=connection, reading_fields=reading_fields, compliance_bits=compliance_bits,
                   list_commands=list_commands,
                   list_settings=list_settings, pipeline_error_check=pipeline, format_version=version,
                   source_path=path)


def _reject_unknown(table: Mapping[str, Any], allowed: set[str] | Mapping[str, Any], prefix: str, fail) -> None:
    for key in table:
        if key not in allowed:
            known = ", ".join(sorted(allowed))
            raise fail(prefix + key, f"unknown key (known here: {known})")


def _table(data: Mapping[str, Any], key: str, fail) -> Mapping[str, Any]:
    if key not in data:
        raise fail(key, "missing table")
    value = data[key]
    if not isinstance(value, dict):
        raise fail(key, f"must be a table, got {type(value).__name__}")
    return value


def _parse_commands(table: Mapping[str, Any], schema: Mapping[str, tuple[frozenset[str], bool]],
                    prefix: str, fail) -> dict[str, tuple[str, ...]]:
    _reject_unknown(table, schema, prefix + ".", fail)
    parsed: dict[str, tuple[str, ...]] = {}
    for operation, (needed, required) in schema.items():
        key = f"{prefix}.{operation}"
        if operation not in table:
            if required:
                raise fail(key, "missing (this operation is required for the role)")
            continue
        raw = table[operation]
        lines = (raw,) if isinstance(raw, str) else raw
        if not isinstance(lines, (list, tuple)) or not lines or not all(isinstance(x, str) for x in lines):
            raise fail(key, "must be a string or a non-empty list of strings")
        if any(not line.strip() or "\n" in line for line in lines):
            raise fail(key, "each line must be one non-empty SCPI message (no newlines)")
        used: set[str] = set()
        for line in lines:
            try:
                used |= template_fields(line)
            except ValueError as exc:
                raise fail(key, f"bad template {line!r}: {exc}") from None
        if used != set(needed):
            expect = ", ".join("{" + n + "}" for n in sorted(needed)) or "no placeholders"
            got = ", ".join("{" + n + "}" for n in sorted(used)) or "none"
            raise fail(key, f"bad template: expects {expect}, found {got}")
        for line in lines:
            try:
                render(line, **{n: _SAMPLE_VALUES[n] for n in needed})
            except (ValueError, TypeError) as exc:
                raise fail(key, f"bad template {line!r}: {exc}") from None
        parsed[operation] = tuple(lines)
    return parsed


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _parse_limits(table: Mapping[str, Any], names: tuple[str, ...], fail) -> dict[str, float]:
    _reject_unknown(table, set(names), "limits.", fail)
    limits: dict[str, float] = {}
    for name in names:
        key = f"limits.{name}"
        if name not in table:
            raise fail(key, "missing")
        value = table[name]
        if not _number(value):
            raise fail(key, f"must be a number in SI units, got {type(value).__name__} {value!r}")
        if not value > 0:
            raise fail(key, f"must be positive, got {value}")
        limits[name] = float(value)
    if "min_nplc" in limits and limits["min_nplc"] > limits["max_nplc"]:
        raise fail("limits.min_nplc", f"{limits['min_nplc']} is above limits.max_nplc = {limits['max_nplc']}")
    return limits


def _parse_connection(table: Any, fail) -> dict[str, Any]:
    if not isinstance(table, dict):
        raise fail("connection", "must be a table")
    _reject_unknown(table, set(_CONNECTION_KEYS), "connection.", fail)
    for key, value in table.items():
        if _CONNECTION_KEYS[key] is str and not isinstance(value, str):
            raise fail(f"connection.{key}", "must be a string, e.g. \"\\n\"")
        if _CONNECTION_KEYS[key] is int and (type(value) is not int or value <= 0):
            raise fail(f"connection.{key}", f"must be a positive whole number, got {value!r}")
    return dict(table)


def _parse_reading(table: Any, fail) -> tuple[tuple[str, ...], dict[str, int]]:
    if not isinstance(table, dict):
        raise fail("reading", "must be a table")
    _reject_unknown(table, {"fields", "current_compliance_bit", "voltage_compliance_bit"}, "reading.", fail)
    bits = {}
    for limit_of in ("current", "voltage"):
        key = f"{limit_of}_compliance_bit"
        if key in table:
            if type(table[key]) is not int or not 0 <= table[key] <= 15:
                raise fail(f"reading.{key}", f"must be a bit number from 0 to 15, got {table[key]!r}")
            bits[limit_of] = table[key]
    fields = table.get("fields", ["volts", "amps"])
    if (not isinstance(fields, list) or not all(isinstance(f, str) for f in fields)
            or not set(_READING_FIELDS) <= set(fields)):
        raise fail("reading.fields", "must list the reply's fields in order and include \"volts\" and \"amps\" "
                                     "(other fields are named anything and skipped)")
    return tuple(fields), bits


def _parse_list_settings(table: Mapping[str, Any], fail) -> dict[str, Any]:
    settings: dict[str, Any] = {"separator": ",", "value_format": ".6g"}
    for name, kind in _LIST_SETTINGS.items():
        key = f"list.{name}"
        if name not in table:
            if name == "max_points":
                raise fail(key, "missing")
            continue
        value = table[name]
        if kind is int and (type(value) is not int or value < 1):
            raise fail(key, f"must be a positive integer, got {value!r}")
        if kind is str and not isinstance(value, str):
            raise fail(key, f"must be a string, got {value!r}")
        settings[name] = value
    try:
        format(1.5, settings["value_format"])
    except ValueError as exc:
        raise fail("list.value_format", f"not a Python format spec: {exc}") from None
    if not settings["separator"]:
        raise fail("list.separator", "must not be empty")
    return settings
