"""The simulated bench's part handling as a small role: which part is in the fixture, load the next.

The simulator answers these on its source instrument (supply or SMU) under its own ``SIMulation:``
tree (``docs/scpi.md``); a real bench has no such commands, so only the simulator's part loader
uses this class. Like every role class it is handed an open instrument and opens nothing itself.
"""

from __future__ import annotations

import json
from typing import Any

from benchlab.errors import InstrumentError


class SimPartHandler:
    """Part commands of the simulator, over an open :class:`~benchlab.instruments.scpi_roles.ScpiInstrument`.

    Parameters
    ----------
    instrument : ScpiInstrument
        The simulated source instrument (the part commands live there); its error queue is read
        after every command, so a refused one raises the simulator's code and text.
    """

    def __init__(self, instrument: Any):
        self.instrument = instrument

    def _query(self, command: str) -> str:
        reply = self.instrument.transport.query(command)
        self.instrument.check_errors(command)
        return reply.strip().strip('"')

    def index(self) -> int:
        """0-based index of the part in the fixture, -1 when the fixture is empty or the bag used up."""
        reply = self._query("SIMulation:PART:INDex?")
        try:
            return int(float(reply))
        except ValueError:
            raise InstrumentError(f"unexpected reply {reply!r} to SIMulation:PART:INDex?",
                                  resource=self.instrument.resource) from None

    def label(self) -> str | None:
        """Label of the part in the fixture, or ``None`` when there is none."""
        if self.index() < 0:
            return None
        return self._query("SIMulation:PART:LABel?") or None

    def load_next(self) -> None:
        """Put the next part of the bag in the fixture (the simulator refuses while the output is on)."""
        self.instrument.send("SIMulation:PART:NEXT", idempotent=False)  # sent twice it would skip a part

    def truth(self) -> dict[str, Any]:
        """The simulated part's true parameters (for tests and demos)."""
        reply = self.instrument.transport.query("SIMulation:PART:TRUTh?")
        self.instrument.check_errors("SIMulation:PART:TRUTh?")
        text = reply.strip()
        if text.startswith('"') and text.endswith('"'):
            text = text[1:-1].replace('""', '"')
        return json.loads(text or "{}")


__all__ = ["SimPartHandler"]
