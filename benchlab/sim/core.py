"""Shared state of one simulated bench: clock, log, bag, fixture, noise and DUT faults.

The three instruments hold a reference to one :class:`BenchCore`. Each instrument executes its
messages under its own lock and every command under the core's lock, so the circuit is always
solved from one consistent state; the core's lock is let go while an operation takes time
(integration, settling, dwell), so a meter busy integrating never holds up the supply's
``OUTP OFF``.
"""

from __future__ import annotations

import threading
import time

import numpy as np

from benchlab.sim.clock import VirtualClock
from benchlab.sim.faults import FaultSpec
from benchlab.sim.fixture import Fixture, OperatingPoint
from benchlab.sim.log import BenchLog
from benchlab.sim.physics import PartPhysics

POWER_LINE_CYCLE_S = 0.02  # 50 Hz mains
# The simulated operator (``handling_s`` > 0) tells a sweep from a harmless probe by the source's current
# limit: a source switched on with a limit or compliance above this is sweeping; at or below it, probing.
OPERATOR_PROBE_LIMIT_A = 2e-3
# A ``pull=N`` fault takes the N-th part of the bag out after this many readings of its sweep at which it
# conducted more than PULL_CONDUCTING_A (so the sweep has seen it conduct, and sees it stop).
PULL_AFTER_SWEEP_READINGS = 6
PULL_CONDUCTING_A = 1e-4
# An open part looks like an empty fixture to a probe: the operator who sees a probe on and no sweep
# start for this long (at least NOT_DETECTED_MIN_S) takes the part out as a dud and seats the next.
NOT_DETECTED_HANDLINGS = 3.0
NOT_DETECTED_MIN_S = 2.0


class BenchCore:
    """State shared by the simulated instruments.

    Parameters
    ----------
    fixture : Fixture
        The circuit around the part.
    bag : tuple of PartPhysics
        The parts, in the order ``SIMulation:PART:NEXT`` loads them.
    clock : VirtualClock
        Virtual time.
    log : BenchLog
        Where commands, output changes and fired faults are recorded.
    noise_seed : int
        Seed of the measurement-noise generator.
    faults : tuple of FaultSpec
        Only the DUT faults (``open``, ``short``) and the operator's ``pull`` are used here.
    handling_s : float
        The simulated operator (0: none, parts change only on ``SIMulation:PART:NEXT``): when a source
        goes off after a sweep the operator takes the part out (the fixture is empty), and seats the
        next part of the bag ``handling_s`` virtual seconds later, once no source is sweeping.
    """

    def __init__(self, fixture: Fixture, bag: tuple[PartPhysics, ...], clock: VirtualClock, log: BenchLog,
                 noise_seed: int = 0, faults: tuple[FaultSpec, ...] = (), handling_s: float = 0.0):
        self.lock = threading.RLock()
        self._wake = threading.Condition(self.lock)
        self.fixture = fixture
        self.bag = bag
        self.clock = clock
        self.log = log
        self._noise = np.random.default_rng(noise_seed)
        self.part_index = 0
        self.readings_taken = 0
        self._dut_faults = sorted((f.count, f.kind) for f in faults if f.kind in ("open", "short"))
        self._pull_parts = {f.count - 1 for f in faults if f.kind == "pull"}  # 0-based bag indices
        self.handling_s = float(handling_s)
        self._sweep_readings = 0  # readings taken by a sweeping source since the part was seated
        self._conducting_readings = 0  # of those, the ones at which the part conducted
        self._pending_index: int | None = None  # the operator's next part, while the fixture is empty
        self._seat_at: float | None = None
        self._watched_from = 0.0  # since when a probe has watched the seated part (no sweep yet)
        fixture.load(bag[0] if bag else None, clock.now())
        if not bag:
            self.part_index = -1

    # ----------------------------------------------------------------- time and readings
    def now(self) -> float:
        """Virtual seconds since the bench started."""
        return self.clock.now()

    def catch_up(self) -> None:
        """Bring the part's temperature up to the present (call before changing any setting)."""
        self.fixture.advance(self.clock.now())

    def spend(self, nominal_s: float) -> None:
        """Let ``nominal_s`` of virtual time pass (settling, dwell), the part heating meanwhile."""
        self.catch_up()
        self.clock.spend(nominal_s, wait=self._wait_unlocked)
        self.catch_up()

    def _wait_unlocked(self, seconds: float) -> None:
        """Sleep ``seconds`` of real time with the core's lock let go (it is held again on return)."""
        deadline = time.monotonic() + seconds
        with self._wake:  # re-entrant: the caller already holds the lock; wait() lets go of every level
            while (left := deadline - time.monotonic()) > 0:
                self._wake.wait(left)

    def take_reading(self, integration_s: float) -> OperatingPoint:
        """Integrate for ``integration_s`` and return the operating point at the end of it.

        Counts the reading and fires a pending open/short DUT fault when its count is reached.
        """
        self.spend(integration_s)
        while self._dut_faults and self.readings_taken >= self._dut_faults[0][0]:
            count, kind = self._dut_faults.pop(0)
            self.fixture.fail(kind, self.clock.now())
            label = self.fixture.part.label if self.fixture.part else "-"
            self.log.add("bench", "fault", f"part {label} failed {kind} after {count} readings", self.now())
        self.readings_taken += 1
        point = self.fixture.operating_point()
        if self.sweeping():
            self._sweep_readings += 1
            if point.part_i > PULL_CONDUCTING_A:
                self._conducting_readings += 1
            if self.part_index in self._pull_parts and self._conducting_readings >= PULL_AFTER_SWEEP_READINGS:
                self._pull_parts.discard(self.part_index)
                self.take_out("pulled out in the middle of its sweep")
                point = self.fixture.operating_point()
        return point

    def noise(self, sigma: float) -> float:
        """One Gaussian noise sample of standard deviation ``sigma``."""
        return float(self._noise.normal(0.0, sigma)) if sigma > 0 else 0.0

    # ----------------------------------------------------------------- bag
    @property
    def part(self) -> PartPhysics | None:
        """The part in the fixture (None when the bag is used up)."""
        return self.fixture.part

    def outputs_on(self) -> bool:
        """True when the supply's or the SMU's output is on."""
        state = self.fixture.sources
        return state.supply_on or state.smu_on

    def sweeping(self) -> bool:
        """True when a source is on with more than a probe's current limit (see OPERATOR_PROBE_LIMIT_A)."""
        src = self.fixture.sources
        if self.fixture.kind == "resistor":
            return src.supply_on and src.supply_i_limit > OPERATOR_PROBE_LIMIT_A
        limit = src.smu_i_compliance if src.smu_function == "VOLTAGE" else src.smu_level_i
        return src.smu_on and limit > OPERATOR_PROBE_LIMIT_A

    def take_out(self, why: str) -> None:
        """The operator takes the part out of the fixture; the next is seated after the handling time."""
        label = self.fixture.part.label if self.fixture.part is not None else "-"
        self._pending_index = self.part_index + 1
        self.part_index = -1
        self.fixture.load(None, self.now())
        self._sweep_readings = self._conducting_readings = 0
        self._seat_at = self.now() + self.handling_s if self.handling_s > 0 else None
        self.log.add("bench", "operator", f"{label} {why}", self.now())

    def output_changed(self, on: bool) -> None:
        """A source was switched: with an operator, a source going off after a sweep ends the part's turn."""
        if on:
            self._watched_from = self.now()
        if not on and self.handling_s > 0 and self._sweep_readings > 0 and self.part_index >= 0:
            self.take_out("taken out after its sweep")

    def operator_tick(self) -> None:
        """Seat the operator's next part once the handling time has passed and no source is sweeping."""
        if self._seat_at is not None and self.now() >= self._seat_at and not self.sweeping():
            self.next_part()
        elif (self.handling_s > 0 and self.part_index >= 0 and self._sweep_readings == 0 and self.outputs_on()
              and not self.sweeping()
              and self.now() - self._watched_from > max(NOT_DETECTED_MIN_S, NOT_DETECTED_HANDLINGS * self.handling_s)):
            self.take_out("not detected by the probe (an open part?): taken out")

    def next_part(self) -> None:
        """Load the next part of the bag (index -1 and an empty fixture once the bag is used up)."""
        self._seat_at = None
        self._sweep_readings = self._conducting_readings = 0
        self._watched_from = self.now()
        if self._pending_index is not None:  # the fixture is empty between two parts
            self.part_index, self._pending_index = self._pending_index, None
        elif self.part_index >= 0:
            self.part_index += 1
        if self.part_index < 0 or self.part_index >= len(self.bag):
            self.part_index = -1
            self.fixture.load(None, self.now())
            self.log.add("bench", "part", "bag used up", self.now())
            return
        part = self.bag[self.part_index]
        self.fixture.load(part, self.now())
        self.log.add("bench", "part", f"{part.label} loaded", self.now())
