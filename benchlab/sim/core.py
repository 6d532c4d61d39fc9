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
        Only the DUT faults (``open``, ``short``) are used here.
    """

    def __init__(self, fixture: Fixture, bag: tuple[PartPhysics, ...], clock: VirtualClock, log: BenchLog,
                 noise_seed: int = 0, faults: tuple[FaultSpec, ...] = ()):
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
        return self.fixture.operating_point()

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

    def next_part(self) -> None:
        """Load the next part of the bag (index -1 and an empty fixture once the bag is used up)."""
        if self.part_index >= 0:
            self.part_index += 1
        if self.part_index < 0 or self.part_index >= len(self.bag):
            self.part_index = -1
            self.fixture.load(None, self.now())
            self.log.add("bench", "part", "bag used up", self.now())
            return
        part = self.bag[self.part_index]
        self.fixture.load(part, self.now())
        self.log.add("bench", "part", f"{part.label} loaded", self.now())
