"""Hands-free characterization: probe the fixture, sweep each part once it has sat, judge and store it, wait for
it to be taken out, and ask the technician when nothing shows up.

The probe (:mod:`benchlab.sweep.probe`, a few volts through a 1 mA limit) sees a part only when it conducts, so an
open part looks just like an empty fixture. When nothing has been seen for the technician's handling time plus a
margin, the loop asks (``on_question``) and waits, still probing, for one of two answers given through a
:class:`HandsFreeControl`: sweep anyway (the engine then classifies the part, an open one as ``open``), or mark
it open without a sweep (stored as rejected, the label advances). A part seated meanwhile withdraws the question.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from benchlab.errors import BenchlabError, InputError, LibraryError
from benchlab.kinds import PartClass
from benchlab.services.station import AcceptanceWindow, LabelPattern, PartVerdict, judge, store
from benchlab.sweep.plan import MAX_SETTLE_S

NO_PART_MARGIN_S = 1.0  # asked after the handling time plus half of it, at least this much more
SWEEP_ANYWAY = "sweep"
MARK_OPEN = "open"
MARKED_OPEN = "open: nothing conducted at the hands-free probe; marked open by the technician, not swept"


@dataclass
class HandsFreeSettings:
    """How the hands-free loop watches the fixture."""

    settle_s: float = 1.0  # a part must sit (conducting) this long before its sweep starts
    poll_s: float = 0.1  # between two looks at the fixture
    idle_timeout_s: float | None = None  # stop when no part arrives for this long (None: wait until cancelled)
    max_parts: int | None = None
    handling_s: float | None = None  # the technician's time to swap parts (None: never ask about an empty fixture)

    def __post_init__(self) -> None:
        if not (isinstance(self.settle_s, (int, float)) and 0 <= self.settle_s <= MAX_SETTLE_S):
            raise InputError(f"hands-free settle time must be 0 to {MAX_SETTLE_S:g} s, got {self.settle_s!r}")
        if not (isinstance(self.poll_s, (int, float)) and 0 < self.poll_s <= MAX_SETTLE_S):
            raise InputError(f"hands-free poll interval must be above 0 and at most {MAX_SETTLE_S:g} s, "
                             f"got {self.poll_s!r}")
        if self.handling_s is not None and not (isinstance(self.handling_s, (int, float))
                                                and 0 <= self.handling_s <= MAX_SETTLE_S):
            raise InputError(f"hands-free handling time must be 0 to {MAX_SETTLE_S:g} s, got {self.handling_s!r}")

    @property
    def ask_after_s(self) -> float | None:
        """How long an empty-looking fixture is watched before the technician is asked (None: never)."""
        if self.handling_s is None:
            return None
        return self.handling_s + max(NO_PART_MARGIN_S, 0.5 * self.handling_s)


@dataclass
class HandsFreeState:
    parts: int = 0
    verdicts: list = field(default_factory=list)


class HandsFreeControl:
    """The technician's answer to "no part seen" (thread-safe: the UI answers, the loop takes it)."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._answer: str | None = None
        self.asking = False  # True while the loop waits for an answer

    def answer(self, what: str) -> bool:
        """Give ``SWEEP_ANYWAY`` or ``MARK_OPEN``; False when no question is open (the answer is dropped)."""
        if what not in (SWEEP_ANYWAY, MARK_OPEN):
            raise InputError(f"no such answer {what!r}")
        with self._lock:
            if not self.asking:
                return False
            self._answer = what
            return True

    def _ask(self) -> None:
        with self._lock:
            self.asking, self._answer = True, None

    def _close(self) -> str | None:
        with self._lock:
            answer, self._answer, self.asking = self._answer, None, False
        return answer

    def _take(self) -> str | None:
        with self._lock:
            answer, self._answer = self._answer, None
            if answer is not None:
                self.asking = False
        return answer


def store_marked_open(library: str | Path | None, lot: str, label: str, *, operator: str | None = None) -> str:
    """Put a part the technician marked open in the library (state rejected, no curve); returns what happened."""
    from benchlab.services import library as libsvc

    spec = f"{lot}/{label}"
    try:
        libsvc.add_part(library, label, lot=lot, notes="marked open at the hands-free probe")
        libsvc.set_state(library, spec, "rejected", MARKED_OPEN, operator=operator)
    except LibraryError as exc:
        return f"not stored in the library ({exc})"
    return f"{spec} stored as rejected (open, not swept)"


def marked_open_verdict(label: str) -> PartVerdict:
    """The verdict of a part marked open by the technician (no sweep: complete, failed, nothing measured)."""
    return PartVerdict(label, PartClass.OPEN, MARKED_OPEN, complete=True, passed=False,
                       failures=(MARKED_OPEN,), lost_contact=False)


def hands_free(handle, plan, window: AcceptanceWindow, labels: LabelPattern, *, lot: str, sessions_root: str | Path,
               library: str | Path | None, settings: HandsFreeSettings, cancel: threading.Event,
               on_event: Callable[[Any], None] | None = None, on_status: Callable[[str], None] | None = None,
               on_verdict: Callable[[PartVerdict, str], None] | None = None, operator: str = "",
               ambient_c: float | None = None, sleep: Callable[[float], None] = time.sleep,
               control: HandsFreeControl | None = None,
               on_question: Callable[[str], None] | None = None) -> HandsFreeState:
    """Watch the fixture with a harmless probe; sweep each part once it has sat for ``settle_s``, judge it,
    store it (accepted when it passes, rejected with the reasons when not; nothing when the sweep did
    not complete or the part dropped out), then wait for it to be taken out. With ``settings.handling_s`` and a
    ``control``, a fixture that stays empty-looking for ``settings.ask_after_s`` raises ``on_question`` and the
    loop goes on as the technician answers through ``control``. The output is off on return.
    """
    from benchlab.services.characterize import sweep_one
    from benchlab.sweep.probe import FixtureProbe

    say = on_status or (lambda text: None)
    state = HandsFreeState()
    probe = FixtureProbe(plan, handle.bench)
    ask_after = settings.ask_after_s if control is not None else None

    def wait_for(seated: bool, label: str = "") -> str | None:
        """``"seated"``/``"removed"``, an answer to the question, or None (cancelled, idle timeout)."""
        since = None
        started = time.monotonic()
        asked = False
        while not cancel.is_set():
            reading = probe.read()
            now = time.monotonic()
            if reading.seated == seated:
                since = since or now
                if not seated or now - since >= settings.settle_s:
                    if asked:
                        control._close()  # a part turned up: the question is withdrawn
                    return "seated" if seated else "removed"
            else:
                since = None
            if seated and ask_after is not None:
                if not asked and since is None and now - started >= ask_after:
                    asked = True
                    control._ask()
                    (on_question or say)(f"no part seen for {now - started:.0f} s: an empty fixture, or an open "
                                         f"part in it ({label})?")
                elif asked and (answer := control._take()) is not None:
                    return answer
            if seated and settings.idle_timeout_s is not None and now - started > settings.idle_timeout_s:
                return None
            sleep(settings.poll_s)
        return None

    try:
        while not cancel.is_set() and (settings.max_parts is None or state.parts < settings.max_parts):
            probe.start()
            say(f"waiting for a part ({labels.label} next)")
            got = wait_for(True, labels.label)
            if got is None:
                break
            if got == MARK_OPEN:
                verdict = marked_open_verdict(labels.label)
                note = store_marked_open(library, lot, labels.label, operator=operator or None)
                state.parts += 1
                state.verdicts.append(verdict)
                if on_verdict:
                    on_verdict(verdict, note)
                labels = labels.advanced()  # an open part cannot be seen leaving: straight on to the next
                continue
            problems = probe.stop()
            if problems:
                raise BenchlabError("; ".join(problems))
            say(f"sweeping {labels.label}")
            outcome, csv_path = sweep_one(handle, plan, labels.label, lot=lot, sessions_root=sessions_root,
                                          operator=operator, ambient_c=ambient_c, on_event=on_event, cancel=cancel,
                                          seat=False)
            verdict = judge(outcome, csv_path.parent, window)
            note = "not stored"
            if verdict.storable:
                try:
                    note = store(verdict, library, lot, accept=verdict.passed, reason="; ".join(verdict.failures),
                                 operator=operator or None)
                except LibraryError as exc:
                    # a shared library that is out of reach never stops the bag: the session is on disk
                    note = (f"not stored in the library ({exc}); the sweep is kept in {verdict.session_path}: "
                            f"benchlab library import {verdict.session_path}")
            state.parts += 1
            state.verdicts.append(verdict)
            if on_verdict:
                on_verdict(verdict, note)
            if not outcome.complete and not verdict.lost_contact:
                break
            labels = labels.advanced()
            probe.start()
            say("take the part out")
            if wait_for(False) is None:
                break
    finally:
        if control is not None:
            control._close()
        probe.stop()
        handle.bench.safe_off()
    return state


__all__ = ["HandsFreeControl", "HandsFreeSettings", "HandsFreeState", "MARK_OPEN", "SWEEP_ANYWAY", "hands_free",
           "marked_open_verdict", "store_marked_open"]
