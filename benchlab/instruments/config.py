"""Bench configuration: what is on the desk, how it is wired, and the safety limits.

One TOML file describes a bench (see ``docs/bench-config.md``). These dataclasses are the
parsed, validated form; the loader in this module (``load_bench_config``) turns a file into
them with one clear :class:`benchlab.errors.ConfigError` per problem, before anything is
connected or powered.
"""

from __future__ import annotations

import math
import tomllib
import warnings
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import IO, Any, Mapping

from benchlab.errors import ConfigError
from benchlab.instruments.profiles import LEGACY_ROLES, ROLES, Profile, legacy_role_message, load_profile
from benchlab.units import parse_quantity
from benchlab.instruments.thermal_config import ThermalConfig, parse_thermal
from benchlab.instruments.transport import resource_kind
from benchlab.kinds import Fixture

FIXTURES = tuple(Fixture)
# The instruments each fixture needs.
FIXTURE_ROLES: dict[str, tuple[str, ...]] = {"resistor": ("supply", "meter"), "smu": ("smu",)}
BENCH_FORMAT_VERSION = 1


@dataclass(frozen=True)
class SafetyLimits:
    """Hard limits no setpoint may exceed (checked before anything is applied)."""

    max_supply_v: float  # largest supply / SMU voltage setpoint (V)
    max_drain_a: float  # largest current through the part (A); also the current limit / compliance
    max_power_w: float  # largest power in the part (W)


@dataclass(frozen=True)
class InstrumentSpec:
    """One instrument on the bench: its VISA resource string and the profile that drives it."""

    role: str  # "supply", "meter" or "smu"
    resource: str
    profile: str  # profile name (file stem in a drivers directory) or a path
    timeout_ms: int = 2000
    reset_on_connect: bool = False


@dataclass(frozen=True)
class BenchConfig:
    """A whole bench.

    ``fixture`` is ``"resistor"`` (supply -> series resistor -> diode-connected part -> 0 V,
    meter across the part) or ``"smu"`` (source-measure unit straight across the part).
    """

    fixture: str
    instruments: dict[str, InstrumentSpec]
    limits: SafetyLimits
    series_resistor_ohm: float = 0.0  # measured value (resistor fixture)
    series_resistor_tolerance: float = 0.01  # relative (0.01 = 1 %)
    settle_s: float = 0.05
    nplc: float = 1.0
    visa_library: str = "@py"
    source_path: str | None = None  # file it was read from (None: built in)
    notes: dict[str, str] = field(default_factory=dict)
    series_resistor_power_w: float | None = None  # the resistor's power rating, when given
    thermal: ThermalConfig | None = None  # fixture temperature sensor, control and limits (``[thermal]``)

    def roles(self) -> tuple[str, ...]:
        """The instrument roles this fixture connects, in connection order."""
        return FIXTURE_ROLES[self.fixture]

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (session sidecars, reports)."""
        return asdict(self)


# ---------------------------------------------------------------------------------------------
# loading
_TOP_KEYS = {"format_version", "fixture", "visa_library", "limits", "measurement", "series_resistor",
             "instruments", "notes", "thermal"}
_LIMIT_UNITS = {"max_supply_v": "V", "max_drain_a": "A", "max_power_w": "W"}
MAX_SETTLE_S = 3600.0  # a wait per point beyond an hour is a typing slip (1e300 overflowed the sleep with the output on)
_MEASUREMENT_UNITS = {"settle_s": "s", "nplc": ""}
_RESISTOR_KEYS = {"ohms", "tolerance", "power_rating_w"}
_SPEC_KEYS = {"resource", "profile", "timeout_ms", "reset_on_connect"}
# The instrument-limit names in a profile that each bench limit must respect, per fixture.
_SOURCE_ROLE = {"resistor": "supply", "smu": "smu"}
_NPLC_ROLE = {"resistor": "meter", "smu": "smu"}


def load_bench_config(path_or_file: str | Path | IO[bytes] | IO[str]) -> BenchConfig:
    """Read and validate a bench file (TOML; format in ``docs/bench-config.md``).

    Parameters
    ----------
    path_or_file : str, Path or open file
        The bench file; profile paths in it are relative to its folder.

    Returns
    -------
    BenchConfig
        The validated bench, profiles resolved.

    Raises
    ------
    ConfigError
        The first problem found (missing or unknown key, wrong unit or type, contradicting limits,
        a limit beyond the instrument's, a resistor of 0 ohm or less, a fixture's instrument
        missing), naming the file and key. Nothing is connected or powered.
    """
    if hasattr(path_or_file, "read"):
        raw = path_or_file.read()  # type: ignore[union-attr]
        name = getattr(path_or_file, "name", None)
        source = str(name) if isinstance(name, str) else None
    else:
        source = str(path_or_file)
        try:
            raw = Path(source).read_bytes()
        except OSError as exc:
            raise ConfigError(f"cannot read the bench file: {exc.strerror or exc}", path=source) from exc
        except ValueError:  # a NUL in the path (the UI's and the API's paths do not pass through argv)
            raise ConfigError("cannot read the bench file: the path holds a NUL character",
                              path=source.replace("\x00", "\\0")) from None
    try:
        text = raw.decode("utf-8") if isinstance(raw, bytes) else raw
    except UnicodeDecodeError as exc:
        raise ConfigError(f"not a UTF-8 text file (TOML is UTF-8): {exc.reason} at byte {exc.start}",
                          path=source) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"not valid TOML: {exc}", path=source) from exc
    except RecursionError:
        raise ConfigError("not a usable bench file: its tables or arrays are nested too deeply", path=source) from None
    base_dir = Path(source).resolve().parent if source else Path.cwd()
    return parse_bench_config(data, path=source, base_dir=base_dir)


def parse_bench_config(data: Mapping[str, Any], *, path: str | None = None, base_dir: Path | None = None,
                       environ: Mapping[str, str] | None = None) -> BenchConfig:
    """Validate the parsed TOML of a bench file (see :func:`load_bench_config`)."""
    def fail(key: str, problem: str) -> ConfigError:
        return ConfigError(problem, path=path, key=key)

    _only(data, _TOP_KEYS, "", fail)
    version = data.get("format_version", BENCH_FORMAT_VERSION)
    if type(version) is not int or version != BENCH_FORMAT_VERSION:
        raise fail("format_version", f"is {version!r}; this benchlab reads format_version = {BENCH_FORMAT_VERSION}")
    fixture = data.get("fixture")
    if fixture is None:
        raise fail("fixture", f"missing (one of: {', '.join(FIXTURES)})")
    if fixture not in FIXTURES:
        raise fail("fixture", f"must be one of {', '.join(FIXTURES)}, got {fixture!r}")
    visa_library = data.get("visa_library", "@py")
    if not isinstance(visa_library, str) or not visa_library.strip():
        raise fail("visa_library", "must be a VISA library path or '@py'")

    limits_table = _sub(data, "limits", fail, required=True)
    _only(limits_table, set(_LIMIT_UNITS), "limits.", fail)
    values = {name: _positive(limits_table, name, unit, "limits.", fail, required=True)
              for name, unit in _LIMIT_UNITS.items()}
    limits = SafetyLimits(**values)

    measurement = _sub(data, "measurement", fail, required=False)
    _only(measurement, set(_MEASUREMENT_UNITS), "measurement.", fail)
    settle_s = _quantity(measurement, "settle_s", "s", "measurement.", fail, default=0.05)
    if not 0 <= settle_s <= MAX_SETTLE_S:
        raise fail("measurement.settle_s", f"must be 0 to {MAX_SETTLE_S:g} s (a wait per point), got {settle_s:g} s")
    nplc = _positive(measurement, "nplc", "", "measurement.", fail, required=False, default=1.0)

    instruments = _parse_instruments(_sub(data, "instruments", fail, required=True), fixture, fail, base_dir, environ)
    ohms, tolerance, rating = _parse_resistor(data, fixture, fail)
    notes = _sub(data, "notes", fail, required=False)
    for key, value in notes.items():
        if not isinstance(value, str):
            raise fail(f"notes.{key}", "must be a string")

    thermal = parse_thermal(data["thermal"], fail, limits.max_power_w) if "thermal" in data else None
    config = BenchConfig(fixture=fixture, instruments=instruments, limits=limits, series_resistor_ohm=ohms,
                         series_resistor_tolerance=tolerance, settle_s=settle_s, nplc=nplc,
                         visa_library=visa_library.strip(), source_path=path, notes=dict(notes),
                         series_resistor_power_w=rating, thermal=thermal)
    check_consistency(config, {role: load_profile(spec.profile, environ=environ)
                               for role, spec in instruments.items()}, path=path)
    return config


def check_consistency(config: BenchConfig, profiles: Mapping[str, Profile], *, path: str | None = None) -> None:
    """Check the bench's limits against each other and against its instruments' profiles.

    Raises
    ------
    ConfigError
        For a power limit that can never bind (a unit slip), a resistor that would overheat at the
        current limit, a limit above what the source instrument can do, or an NPLC outside the
        measuring instrument's range.
    """
    def fail(key: str, problem: str) -> ConfigError:
        return ConfigError(problem, path=path, key=key)

    lim = config.limits
    ceiling = lim.max_supply_v * lim.max_drain_a
    if lim.max_power_w > ceiling * (1 + 1e-12):
        raise fail("limits.max_power_w", f"{lim.max_power_w:g} W is more than max_supply_v x max_drain_a = "
                                         f"{ceiling:g} W, so it could never apply; check the units")
    if config.fixture == Fixture.RESISTOR and config.series_resistor_power_w is not None:
        heat = lim.max_drain_a ** 2 * config.series_resistor_ohm
        if heat > config.series_resistor_power_w:
            raise fail("series_resistor.power_rating_w",
                       f"at max_drain_a = {lim.max_drain_a:g} A the {config.series_resistor_ohm:g} ohm resistor "
                       f"dissipates {heat:.3g} W, above its rating of {config.series_resistor_power_w:g} W")
    source = profiles[_SOURCE_ROLE[config.fixture]]
    where = f"profile '{source.name}'"
    if lim.max_supply_v > source.limits["max_voltage"]:
        raise fail("limits.max_supply_v", f"{lim.max_supply_v:g} V is above the instrument's "
                                          f"{source.limits['max_voltage']:g} V ({where})")
    if lim.max_drain_a > source.limits["max_current"]:
        raise fail("limits.max_drain_a", f"{lim.max_drain_a:g} A is above the instrument's "
                                         f"{source.limits['max_current']:g} A ({where})")
    if config.fixture == Fixture.RESISTOR and lim.max_supply_v > profiles["meter"].limits["max_voltage"]:
        # With the part open the meter sees the whole supply voltage: keep it within the meter's input.
        raise fail("limits.max_supply_v", f"{lim.max_supply_v:g} V is above the meter's "
                                          f"{profiles['meter'].limits['max_voltage']:g} V (profile "
                                          f"'{profiles['meter'].name}'); an open part puts the full supply across it")
    problem = _nplc_problem(config.nplc, profiles[_NPLC_ROLE[config.fixture]])
    if problem:
        raise fail("measurement.nplc", problem)


def _nplc_problem(nplc: float, measuring: Profile) -> str | None:
    low, high = measuring.limits["min_nplc"], measuring.limits["max_nplc"]
    if low <= nplc <= high:
        return None
    return f"{nplc:g} is outside the instrument's {low:g} to {high:g} (profile '{measuring.name}')"


def check_nplc(config: BenchConfig, nplc: float) -> None:
    """Refuse an integration time (NPLC) the bench's measuring instrument cannot set, before anything connects.

    The bench file's own ``measurement.nplc`` is checked when the file is read; this checks an override (the
    ``--nplc`` option) against the profile of the instrument that measures (meter or source-measure unit).

    Raises
    ------
    ConfigError
        Naming the value and the profile's range.
    """
    spec = config.instruments[_NPLC_ROLE[config.fixture]]
    problem = _nplc_problem(nplc, load_profile(spec.profile))
    if problem:
        raise ConfigError(f"nplc {problem}", path=config.source_path)


def _renamed_legacy_roles(table: Mapping[str, Any], fail) -> Mapping[str, Any]:
    """Accept an old role key (``[instruments.source_meter]``) for one version, with a deprecation message."""
    renamed = dict(table)
    for old, new in LEGACY_ROLES.items():
        if old in renamed:
            if new in renamed:
                raise fail(f"instruments.{old}", f"give [instruments.{new}] only (the old name '{old}' is deprecated)")
            where = f"{fail(f'instruments.{old}', '').path or 'bench file'}: [instruments.{old}]"
            warnings.warn(legacy_role_message(old, where), FutureWarning, stacklevel=3)
            renamed[new] = renamed.pop(old)
    return renamed


def _parse_instruments(table: Mapping[str, Any], fixture: str, fail, base_dir: Path | None,
                       environ: Mapping[str, str] | None) -> dict[str, InstrumentSpec]:
    table = _renamed_legacy_roles(table, fail)
    _only(table, set(ROLES), "instruments.", fail)
    for role in FIXTURE_ROLES[fixture]:
        if role not in table:
            need = " and ".join(f"[instruments.{r}]" for r in FIXTURE_ROLES[fixture])
            raise fail(f"instruments.{role}", f"missing: fixture '{fixture}' needs {need}")
    specs: dict[str, InstrumentSpec] = {}
    for role, spec in table.items():
        prefix = f"instruments.{role}."
        if not isinstance(spec, dict):
            raise fail(prefix[:-1], "must be a table")
        _only(spec, _SPEC_KEYS, prefix, fail)
        for key in ("resource", "profile"):
            if not isinstance(spec.get(key), str) or not spec[key].strip():
                raise fail(prefix + key, "missing" if key not in spec else "must be a non-empty string")
        try:
            resource_kind(spec["resource"])
        except ConfigError as exc:
            raise fail(prefix + "resource", str(exc).split(": ", 1)[-1]) from None
        timeout = spec.get("timeout_ms", 2000)
        if type(timeout) is not int or timeout <= 0:
            raise fail(prefix + "timeout_ms", f"must be a positive whole number of milliseconds, got {timeout!r}")
        reset = spec.get("reset_on_connect", False)
        if not isinstance(reset, bool):
            raise fail(prefix + "reset_on_connect", f"must be true or false, got {reset!r}")
        profile_ref = _resolve_profile_ref(spec["profile"].strip(), base_dir)
        try:
            profile = load_profile(profile_ref, environ=environ)
        except ConfigError as exc:
            # the bench file's key names the place; the profile error's own 'key ...' would say it twice
            text = str(exc).replace(f"key '{exc.key}': ", "", 1) if exc.key else str(exc)
            raise fail(prefix + "profile", text) from None
        if profile.role != role:
            raise fail(prefix + "profile", f"profile '{profile.name}' is for role {profile.role}, not {role}")
        specs[role] = InstrumentSpec(role=role, resource=spec["resource"].strip(), profile=profile_ref,
                                     timeout_ms=timeout, reset_on_connect=reset)
    return specs


def _resolve_profile_ref(reference: str, base_dir: Path | None) -> str:
    looks_like_path = reference.endswith(".toml") or "/" in reference or "\\" in reference
    if looks_like_path and base_dir is not None and not Path(reference).expanduser().is_absolute():
        return str((base_dir / reference).resolve())
    return reference


def _parse_resistor(data: Mapping[str, Any], fixture: str, fail) -> tuple[float, float, float | None]:
    table = _sub(data, "series_resistor", fail, required=(fixture == Fixture.RESISTOR))
    if fixture != Fixture.RESISTOR:
        if table:
            raise fail("series_resistor", "only the 'resistor' fixture has a series resistor; remove this table")
        return 0.0, 0.01, None
    _only(table, _RESISTOR_KEYS, "series_resistor.", fail)
    ohms = _quantity(table, "ohms", "ohm", "series_resistor.", fail)
    if ohms <= 0:
        raise fail("series_resistor.ohms", f"must be the measured resistance, above 0 ohm; got {ohms:g}")
    tolerance = _quantity(table, "tolerance", "%", "series_resistor.", fail, default=0.01)
    if not 0 <= tolerance < 0.5:
        raise fail("series_resistor.tolerance", f"must be a fraction from 0 to 0.5 (or '1 %'), got {tolerance:g}")
    rating = None
    if "power_rating_w" in table:
        rating = _positive(table, "power_rating_w", "W", "series_resistor.", fail, required=True)
    return ohms, tolerance, rating


def _only(table: Mapping[str, Any], allowed: set[str], prefix: str, fail) -> None:
    for key in table:
        if key not in allowed:
            raise fail(prefix + key, f"unknown key (known here: {', '.join(sorted(allowed))})")


def _sub(data: Mapping[str, Any], key: str, fail, *, required: bool) -> Mapping[str, Any]:
    if key not in data:
        if required:
            raise fail(key, "missing table")
        return {}
    if not isinstance(data[key], dict):
        raise fail(key, f"must be a table, got {type(data[key]).__name__}")
    return data[key]


def _quantity(table: Mapping[str, Any], name: str, unit: str, prefix: str, fail, *,
              default: float | None = None) -> float:
    if name not in table:
        if default is None:
            raise fail(prefix + name, "missing")
        return default
    if unit == "":
        value = table[name]
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise fail(prefix + name, f"must be a plain number, got {value!r}")
        value = float(value)
    else:
        try:
            value = parse_quantity(table[name], unit)
        except ValueError as exc:
            raise fail(prefix + name, str(exc)) from None
    if not math.isfinite(value):  # TOML has inf and nan; no bench setting is either
        raise fail(prefix + name, f"must be a finite number, got {value}")
    return value


def _positive(table: Mapping[str, Any], name: str, unit: str, prefix: str, fail, *, required: bool,
              default: float | None = None) -> float:
    value = _quantity(table, name, unit, prefix, fail, default=None if required else default)
    if not value > 0:
        raise fail(prefix + name, f"must be above 0, got {value:g}")
    return value


# ---------------------------------------------------------------------------------------------
# the built-in simulator bench
SIM_SERIES_RESISTOR_OHM = 47.0  # the simulator's marked resistor (benchlab.sim.DEFAULT_SERIES_RESISTOR_OHM)
SIM_MAX_SUPPLY_V = {"resistor": 30.0, "smu": 10.0}
SIM_PROFILES = {"supply": "generic-scpi-supply", "meter": "generic-scpi-meter",
                "smu": "generic-scpi-smu"}


def simulator_bench_config(resources: Mapping[str, str], fixture: str = "resistor",
                           series_resistor_ohm: float = SIM_SERIES_RESISTOR_OHM, *, max_supply_v: float | None = None,
                           max_drain_a: float = 0.5, max_power_w: float = 3.0, settle_s: float = 0.0,
                           nplc: float = 1.0) -> BenchConfig:
    """The bench of the built-in simulator, so no file is needed to try the tool.

    Parameters
    ----------
    resources : mapping
        Role -> VISA resource string, as given by ``benchlab.sim.SimBench.resources``
        (keys ``supply``, ``meter``, ``smu``).
    fixture : str
        ``"resistor"`` or ``"smu"``.
    series_resistor_ohm : float
        The simulated fixture's series resistor; pass ``SimBench.series_resistor_actual_ohm``
        (what a careful user would measure).
    max_supply_v : float, optional
        Default: 30 V with the resistor fixture (the supply's range), 10 V with the SMU.
    max_drain_a, max_power_w, settle_s, nplc : float
        Limits and timing; the defaults suit the invented demo bag of power MOSFETs.

    Raises
    ------
    ConfigError
        When a resource the fixture needs is missing or the values are inconsistent.
    """
    if fixture not in FIXTURES:
        raise ConfigError(f"must be one of {', '.join(FIXTURES)}, got {fixture!r}", key="fixture")
    data: dict[str, Any] = {
        "fixture": fixture,
        "limits": {"max_supply_v": max_supply_v if max_supply_v is not None else SIM_MAX_SUPPLY_V[fixture],
                   "max_drain_a": max_drain_a, "max_power_w": max_power_w},
        "measurement": {"settle_s": settle_s, "nplc": nplc},
        "instruments": {role: {"resource": resources[role], "profile": SIM_PROFILES[role]}
                        for role in FIXTURE_ROLES[fixture] if role in resources},
    }
    if fixture == Fixture.RESISTOR:
        data["series_resistor"] = {"ohms": series_resistor_ohm}
    return parse_bench_config(data, path=None)
