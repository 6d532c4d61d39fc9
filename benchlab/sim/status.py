"""IEEE 488.2 status reporting of one simulated instrument: error queue, ESR, ESE, STB."""

from __future__ import annotations

from collections import deque

from benchlab.sim.scpi import ERROR_TEXT

ERROR_QUEUE_SIZE = 16

# Standard event status register bits (IEEE 488.2, 11.5.1).
ESR_OPERATION_COMPLETE = 1 << 0
ESR_QUERY_ERROR = 1 << 2
ESR_DEVICE_ERROR = 1 << 3
ESR_EXECUTION_ERROR = 1 << 4
ESR_COMMAND_ERROR = 1 << 5
ESR_POWER_ON = 1 << 7

# Status byte bits: 2 = error/event queue not empty (SCPI-1999), 5 = ESB summary, 6 = MSS.
STB_ERROR_QUEUE = 1 << 2
STB_EVENT_SUMMARY = 1 << 5
STB_MASTER_SUMMARY = 1 << 6

# Invented convenience default: the error bits are enabled into ESB from power-on.
DEFAULT_ESE = ESR_QUERY_ERROR | ESR_DEVICE_ERROR | ESR_EXECUTION_ERROR | ESR_COMMAND_ERROR


def _esr_bit_for(code: int) -> int:
    if -199 <= code <= -100:
        return ESR_COMMAND_ERROR
    if -299 <= code <= -200:
        return ESR_EXECUTION_ERROR
    if -399 <= code <= -300 or code > 0:
        return ESR_DEVICE_ERROR
    if -499 <= code <= -400:
        return ESR_QUERY_ERROR
    return 0


class StatusModel:
    """Error queue (FIFO of 16; on overflow the newest entry becomes -350) and status registers."""

    def __init__(self) -> None:
        self._queue: deque[tuple[int, str]] = deque()
        self.esr = ESR_POWER_ON
        self.ese = DEFAULT_ESE

    def push(self, code: int, text: str | None = None) -> None:
        """Queue an error (SCPI-1999 vol. 2, 21.8: when full, the last entry is replaced by -350)."""
        self.esr |= _esr_bit_for(code)
        entry = (code, text if text is not None else ERROR_TEXT.get(code, "Device-specific error"))
        if len(self._queue) >= ERROR_QUEUE_SIZE:
            self._queue[-1] = (-350, ERROR_TEXT[-350])
            return
        self._queue.append(entry)

    def pop(self) -> tuple[int, str]:
        """Oldest error, or ``(0, "No error")``."""
        if not self._queue:
            return 0, ERROR_TEXT[0]
        return self._queue.popleft()

    @property
    def count(self) -> int:
        """Number of errors in the queue."""
        return len(self._queue)

    def clear(self) -> None:
        """``*CLS``: empty the queue and the event register."""
        self._queue.clear()
        self.esr = 0

    def read_esr(self) -> int:
        """``*ESR?``: read and clear."""
        value, self.esr = self.esr, 0
        return value

    def status_byte(self) -> int:
        """``*STB?`` (not cleared by reading)."""
        value = 0
        if self._queue:
            value |= STB_ERROR_QUEUE
        if self.esr & self.ese:
            value |= STB_EVENT_SUMMARY
        if value:
            value |= STB_MASTER_SUMMARY
        return value
