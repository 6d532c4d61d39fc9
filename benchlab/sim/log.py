"""The simulated bench's log: every command received and every output-state change.

Kept in memory (``SimBench.log``) and, when a path is given, appended to a JSON-lines file
flushed after each entry, so a test running the bench in another process can prove from
the file that the output was switched off.
"""

from __future__ import annotations

import json
import threading
from collections import deque
import time
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import IO, Any, Iterable

OUTPUT_ROLES = ("supply", "smu")


@dataclass(frozen=True)
class LogEntry:
    """One log line.

    ``kind`` is ``command`` (text = the line received), ``output`` (text ``ON``/``OFF``),
    ``part`` (a part was loaded), ``fault`` (an injected fault fired), ``input`` (bad input skipped)
    or ``connection``.
    ``time`` is wall-clock seconds (Unix), ``virtual_s`` the bench's virtual clock.
    """

    time: float
    virtual_s: float
    role: str
    kind: str
    text: str

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dict of the entry."""
        return asdict(self)


class BenchLog:
    """Thread-safe log of a simulated bench.

    Parameters
    ----------
    stream : file-like, optional
        Text stream receiving one JSON object per line, flushed per entry.
    max_entries : int, optional
        Keep only this many of the newest entries in memory (the stream still gets every one), so a
        simulator left running for days does not grow without bound. None keeps everything (tests).
    """

    def __init__(self, stream: IO[str] | None = None, max_entries: int | None = None):
        self._entries: deque[LogEntry] = deque(maxlen=max_entries)
        self._lock = threading.Lock()
        self._stream = stream

    def attach(self, stream: IO[str] | None) -> None:
        """Write every later entry through to ``stream`` (None detaches)."""
        with self._lock:
            self._stream = stream

    def add(self, role: str, kind: str, text: str, virtual_s: float = 0.0) -> LogEntry:
        """Append one entry (and write it through when a stream is attached)."""
        entry = LogEntry(time.time(), virtual_s, role, kind, text)
        with self._lock:
            self._entries.append(entry)
            if self._stream is not None:
                self._stream.write(json.dumps(entry.to_dict()) + "\n")
                self._stream.flush()
        return entry

    def entries(self, role: str | None = None, kind: str | None = None) -> list[LogEntry]:
        """A snapshot of the entries, optionally filtered by role and kind."""
        with self._lock:
            snapshot = list(self._entries)
        return [e for e in snapshot if (role is None or e.role == role) and (kind is None or e.kind == kind)]

    def commands(self, role: str | None = None) -> list[str]:
        """Texts of the commands received (by one role, or all)."""
        return [e.text for e in self.entries(role, "command")]

    def output_history(self, role: str) -> list[bool]:
        """Every output-state change of ``role``, in order (True = on)."""
        return [e.text == "ON" for e in self.entries(role, "output")]

    def last_output_state(self, role: str) -> bool | None:
        """The last output state of ``role`` (None when it never changed: off since power-on)."""
        history = self.output_history(role)
        return history[-1] if history else None

    def output_was_left_on(self) -> bool:
        """True when any role's last recorded output state is ON."""
        return any(self.last_output_state(role) for role in OUTPUT_ROLES)

    def output_was_ever_on(self, role: str | None = None) -> bool:
        """True when the output of ``role`` (or any role) was switched on at some point."""
        roles = OUTPUT_ROLES if role is None else (role,)
        return any(any(self.output_history(r)) for r in roles)

    @classmethod
    def from_lines(cls, lines: Iterable[str]) -> "BenchLog":
        """Rebuild a log from JSON lines (e.g. a ``--log`` file written by another process).

        A torn last line (the writer was killed mid-write) is skipped.
        """
        log = cls()
        for line in lines:
            line = line.strip()
            if not line:
                continue
            try:
                data = json.loads(line)
            except json.JSONDecodeError:
                continue
            log._entries.append(LogEntry(**data))
        return log

    @classmethod
    def read_file(cls, path: str | Path) -> "BenchLog":
        """Load a JSON-lines log file written with ``benchlab sim --log FILE``."""
        with open(path, encoding="utf-8") as handle:
            return cls.from_lines(handle)
