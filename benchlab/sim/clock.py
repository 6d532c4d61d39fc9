"""The simulator's virtual clock.

Virtual time = real time elapsed since the bench started + what the nominal durations of
operations (integration, settling, dwell) added beyond the real sleep taken for them. An
operation of nominal length ``d`` sleeps ``d * time_scale`` for real and moves the clock by
``d`` in total, so with ``time_scale`` 1 the clock is real time, with 0.001 a test runs a
thousand times faster and still sees the same thermal history, and with 0 nothing sleeps.
"""

from __future__ import annotations

import threading
import time
from typing import Callable


class VirtualClock:
    """Monotonic virtual time in seconds since construction.

    Parameters
    ----------
    time_scale : float
        Real sleep per nominal second (>= 0).
    real_time : callable, optional
        Source of real monotonic time (injected for tests).
    sleep : callable, optional
        Real sleep function (injected for tests).
    """

    def __init__(self, time_scale: float = 1.0, *, real_time: Callable[[], float] = time.monotonic,
                 sleep: Callable[[float], None] = time.sleep):
        if not time_scale >= 0:
            raise ValueError("time_scale must be >= 0")
        self.time_scale = float(time_scale)
        self._real_time = real_time
        self._sleep = sleep
        self._start = real_time()
        self._extra = 0.0
        self._lock = threading.Lock()

    def now(self) -> float:
        """Virtual seconds since the clock started."""
        with self._lock:
            return self._extra + (self._real_time() - self._start)

    def spend(self, nominal_s: float, wait: Callable[[float], None] | None = None) -> None:
        """Take an operation of nominal length ``nominal_s``: sleep the scaled part, book the rest.

        ``wait`` replaces the clock's own sleep for this call (the bench passes one that lets the other
        instruments run meanwhile); an injected sleep (tests) always wins.
        """
        if nominal_s <= 0:
            return
        real_part = nominal_s * self.time_scale
        if real_part > 0:
            (wait if wait is not None and self._sleep is time.sleep else self._sleep)(real_part)
        with self._lock:
            self._extra += nominal_s - real_part
