"""Engine events from a sweep thread to the app, collected and taken in batches by the app's redraw tick.

Posting one textual message per point wakes the app's event loop for every point, and each wake-up and dispatch
holds the GIL the sweep thread needs for its socket round trips. The sweep thread only appends to this feed
(a lock and a list append, no wake-up); the app takes everything at its next tick (``MAX_REDRAW_HZ``) and once
more when the sweep's own ``SweepFinished`` arrives, so no event is lost or reordered.
"""

from __future__ import annotations

import threading
from typing import Any


class NewCurve:
    """Pushed between two parts of one run (hands-free): the points after it belong to a new curve."""


class EventFeed:
    """Thread-safe buffer of ``(tag, event)`` pairs: ``push`` from any thread, ``take`` from the app."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._items: list[tuple[int, Any]] = []

    def push(self, tag: int, event: Any) -> None:
        """Add the engine's ``event`` of the sweep tagged ``tag`` (called from the sweep thread)."""
        with self._lock:
            self._items.append((tag, event))

    def take(self) -> list[tuple[int, Any]]:
        """Everything pushed since the last call, in order."""
        with self._lock:
            items, self._items = self._items, []
        return items

    def sink(self, tag: int):
        """An ``on_event`` callback for the engine that pushes with ``tag``."""
        return lambda event: self.push(tag, event)
