"""Fault injection for the simulated bench.

A fault is written ``KIND[@ROLE][=VALUE]`` (on the command line: ``--fault mute@meter=12``).
ROLE is ``supply``, ``meter``, ``smu`` or ``all`` (the default). Kinds:

``slow=S[/N]``  every reply (after the first N messages, default 0) is held back S extra real seconds.
``mute=N``       after N messages the instrument still executes commands but sends no replies.
``hang=N``       after N messages the instrument neither executes nor replies (until the bench stops).
``drop=N``       the N-th message is executed, then the connection is closed without a reply (once).
``error=HEADER[/CODE]`` each command with that header (``VOLT``, ``OUTP``, ``MEAS:CURR?``...) is
                 refused with error CODE (default -240, hardware error) queued instead of executing.
``garble=N``     the N-th reply line of the instrument is garbled (digits turned into letters).
``open=N``       the part in the fixture fails open after N readings (counted over the whole bench).
``short=N``      the part fails short after N readings.
``pull=N``       the operator pulls the N-th part of the bag (1-based) out of the fixture in the middle of its
                 sweep (after 6 readings at which it conducted): the fixture is empty from then on.
``flaky=P``      each message has probability P (0 to 0.5, seeded by the bench's seed) of one transport fault,
                 drawn evenly from: its reply FLAKY_SLOW_S late, the connection dropped after it, refused
                 with -240 instead of executed, its reply garbled, its reply withheld (a hung reply).
``unsettled=V[/N]`` the instrument's readings never settle (after its first N readings, default 0):
                 volts readings swing +/-V/2 about the true value from one reading to the next, and a
                 SMU forcing volts sees its current swing by the same VGS wobble (a part oscillating).

Messages are lines received, counted per instrument over all its connections since the bench started.
"""

from __future__ import annotations

import random
from dataclasses import dataclass

from benchlab.errors import InputError

FAULT_KINDS = ("slow", "mute", "hang", "drop", "error", "garble", "open", "short", "unsettled", "pull", "flaky")
FAULT_ROLES = ("supply", "meter", "smu", "all")
DEFAULT_INJECTED_ERROR = -240
FLAKY_SLOW_S = 0.05
FLAKY_KINDS = ("slow", "drop", "error", "garble", "mute")


@dataclass(frozen=True)
class FaultSpec:
    """One injected fault (see the module docstring for the meaning of each kind)."""

    kind: str
    role: str = "all"
    value: str = ""

    def applies_to(self, role: str) -> bool:
        """True when this fault acts on the instrument ``role``."""
        return self.role in ("all", role)

    @property
    def count(self) -> int:
        """The N of ``mute``, ``hang``, ``drop``, ``garble``, ``open``, ``short``."""
        return int(self.value)

    @property
    def seconds(self) -> float:
        """The S of ``slow``."""
        return float(self.value.split("/", 1)[0])

    @property
    def slow_after(self) -> int:
        """The N of ``slow=S/N`` or ``unsettled=V/N`` (0 when not given)."""
        parts = self.value.split("/", 1)
        return int(parts[1]) if len(parts) == 2 else 0

    @property
    def error_header(self) -> str:
        """The HEADER of ``error=HEADER[/CODE]``."""
        return self.value.split("/", 1)[0]

    @property
    def error_code(self) -> int:
        """The CODE of ``error=HEADER[/CODE]`` (default -240)."""
        parts = self.value.split("/", 1)
        return int(parts[1]) if len(parts) == 2 else DEFAULT_INJECTED_ERROR

    def to_text(self) -> str:
        """The spec back as ``KIND[@ROLE][=VALUE]`` text."""
        role = "" if self.role == "all" else f"@{self.role}"
        value = f"={self.value}" if self.value else ""
        return f"{self.kind}{role}{value}"


def _is_queueable_error_code(code: int) -> bool:
    # SCPI-1999 vol. 2, ch. 21: the standard errors are -100..-499 (command, execution, device-specific, query),
    # positive codes are the device's own, 0 is "No error" (a 16-bit range, from memory)
    return -499 <= code <= -100 or 1 <= code <= 32767


def parse_fault(text: str) -> FaultSpec:
    """Parse ``KIND[@ROLE][=VALUE]``.

    Raises
    ------
    benchlab.errors.InputError
        With one clear message for an unknown kind or role or a bad value.
    """
    raw = text.strip()
    head, has_value, value = raw.partition("=")
    kind, _, role = head.partition("@")
    kind = kind.strip().lower()
    role = (role.strip().lower() or "all").replace("-", "_")
    value = value.strip()
    if kind not in FAULT_KINDS:
        raise InputError(f"fault '{raw}': unknown kind '{kind}' (expected one of {', '.join(FAULT_KINDS)})")
    if role not in FAULT_ROLES:
        raise InputError(f"fault '{raw}': unknown role '{role}' (expected one of {', '.join(FAULT_ROLES)})")
    if kind == "garble" and not has_value:
        value = "1"
    if kind in ("slow", "unsettled"):
        seconds, _, after = value.partition("/")
        try:
            ok = 0 <= float(seconds) <= (3600 if kind == "slow" else 100) and (not after or after.isdigit())
        except ValueError:
            ok = False
        if not ok:
            what = "seconds from 0 to 3600" if kind == "slow" else "volts from 0 to 100"
            raise InputError(f"fault '{raw}': {kind} needs {what} and an optional whole count, "
                             f"e.g. {kind}=0.5 or {kind}=0.5/20")
    elif kind == "flaky":
        try:
            ok = 0 <= float(value) <= 0.5
        except ValueError:
            ok = False
        if not ok:
            raise InputError(f"fault '{raw}': flaky needs a probability per message from 0 to 0.5, e.g. flaky=0.02")
    elif kind == "error":
        header, _, code = value.partition("/")
        if not header:
            raise InputError(f"fault '{raw}': error needs a command header, e.g. error@supply=OUTP")
        if code and not code.lstrip("-").isdigit():
            raise InputError(f"fault '{raw}': the error code must be an integer, e.g. /-240")
        if code and not _is_queueable_error_code(int(code)):
            raise InputError(f"fault '{raw}': the error code must be a standard one (-100 to -499, e.g. /-240) "
                             "or a positive device-specific one (1 to 32767); 0 means no error")
    else:
        if not value.isdigit() or (kind in ("garble", "pull") and int(value) < 1):
            raise InputError(f"fault '{raw}': {kind} needs a whole count, e.g. {kind}=10")
    return FaultSpec(kind, role, value)


def coerce_faults(faults) -> tuple[FaultSpec, ...]:
    """Accept ``FaultSpec`` objects or spec strings (as given to ``SimConfig.faults``)."""
    return tuple(f if isinstance(f, FaultSpec) else parse_fault(str(f)) for f in faults or ())


class RoleFaults:
    """Per-instrument fault bookkeeping, consulted by the server for each message."""

    def __init__(self, role: str, faults: tuple[FaultSpec, ...], seed: int = 0):
        mine = [f for f in faults if f.applies_to(role)]
        self.flaky_p = max((float(f.value) for f in mine if f.kind == "flaky"), default=0.0)
        self._flaky_rng = random.Random(f"{seed}:{role}")
        self.flaky_fired: dict[str, int] = {kind: 0 for kind in FLAKY_KINDS}
        self.role = role
        self._slow = [(f.slow_after, f.seconds) for f in mine if f.kind == "slow"]
        self.mute_after = min((f.count for f in mine if f.kind == "mute"), default=None)
        self.hang_after = min((f.count for f in mine if f.kind == "hang"), default=None)
        self.drop_at = min((f.count for f in mine if f.kind == "drop"), default=None)
        self.garble_at = {f.count for f in mine if f.kind == "garble"}
        self.error_rules = [(f.error_header, f.error_code) for f in mine if f.kind == "error"]
        unsettled = [(f.slow_after, f.seconds) for f in mine if f.kind == "unsettled"]
        self.unsettled_after, self.unsettled_v = min(unsettled) if unsettled else (0, 0.0)
        self.readings = 0
        self.messages_seen = 0
        self.replies_sent = 0
        self.drop_done = False

    def note_message(self) -> int:
        """Count one received message; returns its 1-based number."""
        self.messages_seen += 1
        return self.messages_seen

    def extra_delay_s(self, number: int) -> float:
        """Extra real delay for the reply to message ``number``."""
        return sum(seconds for after, seconds in self._slow if number > after)

    def flaky_pick(self) -> str | None:
        """For a ``flaky`` fault: the transport fault this message gets (one of FLAKY_KINDS), or None."""
        if not self.flaky_p or self._flaky_rng.random() >= self.flaky_p:
            return None
        kind = self._flaky_rng.choice(FLAKY_KINDS)
        self.flaky_fired[kind] += 1
        return kind

    def reading_wobble_v(self) -> float:
        """Count one reading; the volts an ``unsettled`` fault adds to it (alternating +/-V/2, else 0)."""
        self.readings += 1
        if not self.unsettled_v or self.readings <= self.unsettled_after:
            return 0.0
        return self.unsettled_v / 2 * (1 if self.readings % 2 else -1)

    def hung(self, number: int) -> bool:
        """True when message ``number`` arrives after a ``hang`` fault fired (ignore it)."""
        return self.hang_after is not None and number > self.hang_after

    def muted(self, number: int) -> bool:
        """True when the reply to message ``number`` must be withheld (``mute``)."""
        return self.mute_after is not None and number > self.mute_after

    def drop_now(self, number: int) -> bool:
        """True once, at the message where the ``drop`` fault closes the connection."""
        if self.drop_at is not None and not self.drop_done and number >= self.drop_at:
            self.drop_done = True
            return True
        return False

    def garble_next_reply(self) -> bool:
        """Count one reply line; True when it is the one to garble."""
        self.replies_sent += 1
        return self.replies_sent in self.garble_at


def garble(reply: str) -> str:
    """A reply made unreadable but still one line: digits become letters, a junk prefix."""
    return "#?" + "".join(chr(ord("A") + int(ch)) if ch.isdigit() else ch for ch in reply)
