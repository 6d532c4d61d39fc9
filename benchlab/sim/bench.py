"""The simulated bench as one object: configuration, three instruments, their servers, the log.

>>> with SimBench(SimConfig(fixture="resistor", time_scale=0.0)) as bench:   # doctest: +SKIP
...     bench.start(first_port=0)
...     bench.resources["supply"]
'TCPIP0::127.0.0.1::40417::SOCKET'
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import IO

import numpy as np

from benchlab.choices import SIM_FIRST_PORT as DEFAULT_FIRST_PORT
from benchlab.choices import SIM_SERIES_RESISTOR_OHM as DEFAULT_SERIES_RESISTOR_OHM
from benchlab.errors import InputError, InstrumentError
from benchlab.sim.bag import DEFAULT_BAG_SIZE, make_bag
from benchlab.sim.clock import VirtualClock
from benchlab.sim.core import BenchCore
from benchlab.sim.faults import FaultSpec, RoleFaults, coerce_faults
from benchlab.sim.fixture import FIXTURES, Fixture, SupplyError
from benchlab.sim.log import BenchLog
from benchlab.sim.meter import SimMeter
from benchlab.sim.physics import REFERENCE_TEMPERATURE_K, PartPhysics
from benchlab.sim.server import InstrumentServer
from benchlab.sim.smu import SimSmu
from benchlab.sim.supply import SimSupply

ROLES = ("supply", "meter", "smu")


@dataclass(frozen=True)
class SimConfig:
    """Everything that defines a simulated bench (all values invented for the demo).

    Parameters
    ----------
    fixture : str
        ``resistor`` (supply -> series resistor -> part, meter across the part) or ``smu``.
    seed : int
        Seeds the bag, the resistor's real value, the supply's setpoint error and the noise.
    bag_size : int
        Number of parts in the bag (labels ``Q01``...).
    time_scale : float
        Real seconds slept per nominal second of instrument time (1 real time, 0.001 fast, 0 none).
    latency_s : float
        Real delay before each reply, standing in for a LAN round trip (settings without a query cost none).
    faults : tuple
        :class:`benchlab.sim.faults.FaultSpec` objects or spec strings such as ``"mute@meter=12"``.
    series_resistor_nominal_ohm : float
        The resistor's marked value (ohm).
    series_resistor_tolerance : float
        Relative tolerance; the real value is drawn uniformly within it (seeded).
    series_resistor_actual_ohm : float, optional
        Force the real value instead of drawing it.
    supply_gain_error, supply_offset_v : float, optional
        Force the supply's setpoint error instead of drawing it (within +/-0.05 %, +/-3 mV).
    ambient_k : float
        Ambient temperature (K).
    rth_k_per_w, tau_thermal_s : float
        Thermal resistance (junction to the fixture block) and time constant of every part.
    tau_fixture_s : float
        Time constant of the fixture block following its temperature setpoint (s).
    log_path : str, optional
        JSON-lines log file, flushed per entry.
    log_memory_entries : int, optional
        Newest log entries kept in memory (``SimBench.log``); None keeps all. The log file keeps all anyway.
    handling_s : float
        The simulated operator's time to swap parts (virtual seconds; 0 = no operator, parts change only
        on ``SIMulation:PART:NEXT``). With an operator, a source going off after a sweep empties the
        fixture, and the next part of the bag is seated ``handling_s`` later.
    """

    fixture: str = "resistor"
    seed: int = 1
    bag_size: int = DEFAULT_BAG_SIZE
    time_scale: float = 1.0
    latency_s: float = 0.0
    faults: tuple = ()
    series_resistor_nominal_ohm: float = DEFAULT_SERIES_RESISTOR_OHM
    series_resistor_tolerance: float = 0.01
    series_resistor_actual_ohm: float | None = None
    supply_gain_error: float | None = None
    supply_offset_v: float | None = None
    ambient_k: float = REFERENCE_TEMPERATURE_K
    rth_k_per_w: float = 62.0
    tau_thermal_s: float = 45.0
    tau_fixture_s: float = 120.0
    log_path: str | None = None
    log_memory_entries: int | None = None
    handling_s: float = 0.0
    fault_specs: tuple[FaultSpec, ...] = field(init=False, repr=False, compare=False, default=())

    def __post_init__(self) -> None:
        if self.fixture not in FIXTURES:
            raise InputError(f"unknown fixture '{self.fixture}' (expected resistor or smu)")
        if self.bag_size < 1:
            raise InputError("the bag needs at least one part (bag_size >= 1)")
        if not 0 <= self.seed < 2 ** 63:  # numpy's seeded generators take non-negative seeds
            raise InputError(f"simulator seed {self.seed} is out of range (0 to 2**63 - 1)")
        checks = {
            "time_scale": self.time_scale >= 0, "latency_s": self.latency_s >= 0,
            "series_resistor_nominal_ohm": self.series_resistor_nominal_ohm > 0,
            "series_resistor_tolerance": 0 <= self.series_resistor_tolerance < 0.5,
            "ambient_k": self.ambient_k > 0, "rth_k_per_w": self.rth_k_per_w >= 0,
            "tau_thermal_s": self.tau_thermal_s > 0, "handling_s": 0 <= self.handling_s <= 3600,
            "tau_fixture_s": self.tau_fixture_s > 0,
        }
        for name, ok in checks.items():
            if not (ok and math.isfinite(float(getattr(self, name)))):
                raise InputError(f"simulator setting {name}={getattr(self, name)!r} is out of range")
        if self.log_memory_entries is not None and self.log_memory_entries < 1:
            raise InputError("log_memory_entries must be at least 1 (or None to keep everything)")
        if self.series_resistor_actual_ohm is not None and not self.series_resistor_actual_ohm > 0:
            raise InputError("series_resistor_actual_ohm must be > 0")
        object.__setattr__(self, "fault_specs", coerce_faults(self.faults))


def _draw_errors(config: SimConfig) -> tuple[float, SupplyError]:
    rng = np.random.default_rng([config.seed, 7])
    tol = config.series_resistor_tolerance
    resistor = config.series_resistor_actual_ohm
    if resistor is None:
        resistor = config.series_resistor_nominal_ohm * (1.0 + float(rng.uniform(-tol, tol)))
    gain = config.supply_gain_error if config.supply_gain_error is not None else float(rng.uniform(-5e-4, 5e-4))
    offset = config.supply_offset_v if config.supply_offset_v is not None else float(rng.uniform(-3e-3, 3e-3))
    return resistor, SupplyError(gain, offset)


class SimBench:
    """Three simulated instruments on one virtual fixture, served over TCP.

    Parameters
    ----------
    config : SimConfig, optional
        Defaults to ``SimConfig()``.
    """

    def __init__(self, config: SimConfig | None = None):
        self.config = config or SimConfig()
        cfg = self.config
        self._log_stream: IO[str] | None = None
        self.log = BenchLog(max_entries=cfg.log_memory_entries)
        self.clock = VirtualClock(cfg.time_scale)
        resistor, supply_error = _draw_errors(cfg)
        self.bag: tuple[PartPhysics, ...] = make_bag(cfg.seed, cfg.bag_size, rth_k_per_w=cfg.rth_k_per_w,
                                                    tau_thermal_s=cfg.tau_thermal_s)
        fixture = Fixture(cfg.fixture, resistor, supply_error, cfg.ambient_k, cfg.tau_fixture_s)
        self.core = BenchCore(fixture, self.bag, self.clock, self.log, noise_seed=cfg.seed,
                              faults=cfg.fault_specs, handling_s=cfg.handling_s)
        self.instruments = {}
        self._servers: dict[str, InstrumentServer] = {}
        for number, (role, cls) in enumerate(zip(ROLES, (SimSupply, SimMeter, SimSmu)), start=1):
            faults = RoleFaults(role, cfg.fault_specs, seed=cfg.seed)
            instrument = cls(self.core, f"SIM{cfg.seed:04d}-{number}", faults)
            self.instruments[role] = instrument
            self._servers[role] = InstrumentServer(instrument, faults, cfg.latency_s)
        self._started = False

    # ----------------------------------------------------------------- lifecycle
    def start(self, host: str = "127.0.0.1", first_port: int = 0) -> dict[str, str]:
        """Start serving; returns :attr:`resources`.

        Parameters
        ----------
        host : str
            Address to listen on (loopback unless given explicitly).
        first_port : int
            Port of the supply; the meter and SMU take the next two. 0 picks free ports.

        Raises
        ------
        benchlab.errors.InstrumentError
            When a port cannot be bound (e.g. already in use); nothing is left listening.
        """
        if self._started:
            return self.resources
        if not 0 <= first_port <= 65533:
            raise InputError(f"port {first_port} is out of range (0-65533)")
        if self.config.log_path and self._log_stream is None:
            try:
                self._log_stream = open(self.config.log_path, "a", encoding="utf-8")
            except OSError as exc:
                raise InputError(f"cannot open the log file: {exc.strerror}", path=self.config.log_path) from exc
            self.log.attach(self._log_stream)
        for offset, role in enumerate(ROLES):
            port = first_port + offset if first_port else 0
            try:
                self._servers[role].start(host, port)
            except OSError as exc:
                self.stop()
                raise InstrumentError(f"cannot listen on {host}:{port} for the simulated {role}: "
                                      f"{exc.strerror or exc}") from exc
        self._started = True
        self.log.add("bench", "connection", "started " + " ".join(f"{r}={p}" for r, p in self.ports.items()),
                     self.core.now())
        return self.resources

    def stop(self) -> None:
        """Stop every server and close the log file (safe to call twice)."""
        for server in self._servers.values():
            server.stop()
        self._started = False
        if self._log_stream is not None:
            self.log.attach(None)
            self._log_stream.close()
            self._log_stream = None

    def __enter__(self) -> "SimBench":
        return self

    def __exit__(self, *exc_info) -> None:
        self.stop()

    # ----------------------------------------------------------------- views
    @property
    def ports(self) -> dict[str, int]:
        """Role -> bound TCP port (0 before :meth:`start`)."""
        return {role: server.port for role, server in self._servers.items()}

    @property
    def resources(self) -> dict[str, str]:
        """Role -> VISA resource string, keys ``supply``, ``meter``, ``smu``."""
        result = {}
        for role, server in self._servers.items():
            host = server.host if server.host not in ("", "0.0.0.0") else "127.0.0.1"
            result[role] = f"TCPIP0::{host}::{server.port}::SOCKET"
        return result

    @property
    def series_resistor_nominal_ohm(self) -> float:
        """The resistor's marked value (ohm), what the user believes it is."""
        return self.config.series_resistor_nominal_ohm

    @property
    def series_resistor_actual_ohm(self) -> float:
        """The resistor's real value (what a careful user would measure)."""
        return self.core.fixture.resistor_ohm

    @property
    def current_part(self) -> PartPhysics | None:
        """True parameters of the part in the fixture (FOR TESTS ONLY)."""
        return self.core.part if self.core.part_index >= 0 else None

    @property
    def temperature_k(self) -> float:
        """Junction temperature of the part now (K)."""
        with self.core.lock:
            self.core.catch_up()
            return self.core.fixture.temperature_k

    @property
    def fixture_temperature_k(self) -> float:
        """Temperature of the fixture block now (K): what a perfect block sensor would read."""
        with self.core.lock:
            self.core.catch_up()
            return self.core.fixture.block_k

    @property
    def virtual_time_s(self) -> float:
        """Virtual seconds since the bench was built (see :class:`benchlab.sim.clock.VirtualClock`)."""
        return self.clock.now()
