"""In-memory instruments implementing the role interfaces, driven by a DeviceParams part.

They log every command (so tests can check the order things were sent in) and enforce nothing
themselves: the safety guard under test must.
"""

from __future__ import annotations

import math

from benchlab.models import DeviceParams, solve_resistor_line

# A power-MOSFET-like part (values invented for the tests, in the usual datasheet ranges).
PART = DeviceParams(model="ekv", vth=3.0, kp=0.8, theta=0.1, n=1.5)


class FakeClock:
    """A clock that only moves when the engine sleeps (tests never wait)."""

    def __init__(self):
        self.t = 0.0

    def __call__(self) -> float:
        return self.t

    def sleep(self, seconds: float) -> None:
        assert seconds >= 0
        self.t += seconds


class FakeBench:
    """Supply + series resistor + part + meter across the part, or a SMU across the part."""

    def __init__(self, part: DeviceParams | None = PART, resistor_ohm: float = 10.0, clock: FakeClock | None = None,
                 leak_ohm: float | None = None, noise_v: float = 0.0):
        self.part = part
        self.r = resistor_ohm
        self.leak_ohm = leak_ohm
        self.noise_v = noise_v
        self.clock = clock or FakeClock()
        self.log: list[tuple] = []
        self.output = False
        self.voltage = 0.0
        self.limit = 0.0
        self.smu_mode = "voltage"
        self.smu_level = 0.0
        self.smu_compliance = 0.0
        self.fail_on: str | None = None  # name of a method that raises
        self.fail_after = 0
        self.fail_exc: BaseException = RuntimeError("instrument exploded")
        self.reads = 0
        self.on_read = None  # hook(bench) called at each meter read
        self.over_range_from: int | None = None  # meter reads from this count on return +inf
        self.supply = _Supply(self)
        self.meter = _Meter(self)
        self.smu = _SMU(self)

    def _maybe_fail(self, name: str) -> None:
        if self.fail_on == name:
            if self.fail_after <= 0:
                raise self.fail_exc
            self.fail_after -= 1

    def part_current(self, vgs: float) -> float:
        i = 0.0 if self.part is None else float(self.part.current(vgs))
        if self.leak_ohm:
            i += vgs / self.leak_ohm
        return i

    def operating_point(self) -> tuple[float, float]:
        """(vgs, id) for the resistor fixture, honouring the supply's current limit."""
        if not self.output or self.voltage <= 0:
            return 0.0, 0.0
        if self.part is None and not self.leak_ohm:
            return self.voltage, 0.0
        lo, hi = 0.0, self.voltage
        for _ in range(60):  # bisection: (Vs - v)/R = I(v)
            mid = 0.5 * (lo + hi)
            if (self.voltage - mid) / self.r > self.part_current(mid):
                lo = mid
            else:
                hi = mid
        v = 0.5 * (lo + hi)
        i = (self.voltage - v) / self.r
        if i > self.limit:  # constant-current mode: the supply drops its voltage
            i = self.limit
            lo, hi = 0.0, self.voltage
            for _ in range(60):
                mid = 0.5 * (lo + hi)
                if self.part_current(mid) < i:
                    lo = mid
                else:
                    hi = mid
            v = 0.5 * (lo + hi)
        return v, i

    def supply_output_voltage(self) -> float:
        v, i = self.operating_point()
        return v + i * self.r

    def check_exact(self, vs: float) -> tuple[float, float]:
        return solve_resistor_line(self.part, vs, self.r)


class _Supply:
    identity = "FAKE,PSU,0,0"
    resource = "fake::supply"

    def __init__(self, bench: FakeBench):
        self.b = bench

    def set_current_limit(self, amps):
        self.b._maybe_fail("set_current_limit")
        self.b.log.append(("limit", amps))
        self.b.limit = amps

    def set_voltage(self, volts):
        self.b._maybe_fail("set_voltage")
        self.b.log.append(("volt", volts))
        self.b.voltage = volts

    def set_output(self, on):
        self.b._maybe_fail("set_output" if on else "set_output_off")
        self.b.log.append(("output", bool(on)))
        self.b.output = bool(on)

    def output_is_on(self):
        return self.b.output

    def measure_voltage(self):
        self.b._maybe_fail("measure_voltage")
        return self.b.supply_output_voltage()

    def measure_current(self):
        return self.b.operating_point()[1]

    def close(self):
        pass


class _Meter:
    identity = "FAKE,DMM,0,0"
    resource = "fake::meter"

    def __init__(self, bench: FakeBench):
        self.b = bench

    function = "volt"

    def configure_voltage(self, range_volts=None, nplc=1.0):
        self.b.log.append(("meter", "volt", nplc))
        self.function = "volt"

    def configure_current(self, range_amps=None, nplc=1.0):
        self.b.log.append(("meter", "curr", nplc))
        self.function = "curr"

    def read(self):
        self.b._maybe_fail("read")
        self.b.reads += 1
        if self.b.on_read:
            self.b.on_read(self.b)
        if self.b.over_range_from is not None and self.b.reads >= self.b.over_range_from:
            return math.inf  # the SCPI over-range value 9.9E37, as the role classes report it
        v, i = self.b.operating_point()
        if self.function == "curr":
            return i
        if self.b.noise_v and i > 1e-4:  # a part that oscillates once it conducts
            v += self.b.noise_v * (1 if self.b.reads % 2 else -1)
        return v

    def close(self):
        pass


class _SMU:
    identity = "FAKE,SMU,0,0"
    resource = "fake::smu"

    def __init__(self, bench: FakeBench):
        self.b = bench
        self.lists: list[list[float]] = []

    def configure_source(self, mode, compliance):
        self.b.log.append(("configure", mode, compliance))
        self.b.smu_mode, self.b.smu_compliance, self.b.smu_level = mode, compliance, 0.0

    def set_level(self, value):
        self.b._maybe_fail("set_level")
        self.b.log.append(("level", value))
        self.b.smu_level = value

    def set_nplc(self, nplc):
        self.b.log.append(("nplc", nplc))

    def set_output(self, on):
        self.b._maybe_fail("set_output" if on else "set_output_off")
        self.b.log.append(("output", bool(on)))
        self.b.output = bool(on)

    def output_is_on(self):
        return self.b.output

    def _point(self, level):
        b = self.b
        if not b.output:
            return 0.0, 0.0, False
        if b.smu_mode == "voltage":
            i = b.part_current(level)
            if i > b.smu_compliance:
                return level, b.smu_compliance, True  # simplification: reads the limit
            return level, i, False
        # forcing current: find VGS with I(VGS) = level, capped at the voltage compliance
        if b.part_current(b.smu_compliance) < level:
            return b.smu_compliance, b.part_current(b.smu_compliance), True
        lo, hi = 0.0, b.smu_compliance
        for _ in range(60):
            mid = 0.5 * (lo + hi)
            if b.part_current(mid) < level:
                lo = mid
            else:
                hi = mid
        return 0.5 * (lo + hi), level, False

    def measure(self):
        self.b._maybe_fail("measure")
        self.b.reads += 1
        if self.b.on_read:
            self.b.on_read(self.b)
        v, i, comp = self._point(self.b.smu_level)
        self._comp = comp
        return v, i

    def in_compliance(self):
        return getattr(self, "_comp", False)

    def run_list(self, levels, dwell_s):
        self.b.log.append(("list", list(levels)))
        self.lists.append(list(levels))
        out = []
        for level in levels:
            self.b.smu_level = level
            v, i, _ = self._point(level)
            out.append((v, i))
        return out

    def close(self):
        pass


def applied_voltages(log) -> list[float]:
    return [entry[1] for entry in log if entry[0] in ("volt", "level")]


def finite(x: float) -> bool:
    return math.isfinite(x)
