"""Messages the worker threads post to the app (``post_message`` is safe from a thread and never waits)."""

from __future__ import annotations

from typing import Any

import functools

from textual.css.query import NoMatches
from textual.message import Message


def _quiet(handler):
    """A message handler that does nothing once the views are gone (a late message while the app closes)."""

    @functools.wraps(handler)
    def wrapper(self, *args, **kwargs):
        try:
            return handler(self, *args, **kwargs)
        except NoMatches:
            return None
    return wrapper


class SweepFinished(Message):
    """Posted from the sweep worker's ``finally``, after the output is off: the only sign the bench is idle."""

    def __init__(self, tag: int, verdict: Any = None, error: str | None = None, problems: tuple[str, ...] = ()):
        super().__init__()
        self.tag = tag
        self.verdict = verdict
        self.error = error
        self.problems = problems


class HandsFreeNews(Message):
    """What the hands-free loop is doing, or a part it judged (``verdict``, ``note``)."""

    def __init__(self, tag: int, text: str = "", verdict: Any = None, note: str = "", question: bool = False):
        super().__init__()
        self.tag = tag
        self.text = text
        self.verdict = verdict
        self.note = note
        self.question = question  # ``text`` asks the technician: no part seen (an empty fixture or an open part?)


class Connected(Message):
    def __init__(self, handle: Any, plan: Any):
        super().__init__()
        self.handle = handle
        self.plan = plan


class Problem(Message):
    """An error to show in the app, in one line (never a traceback)."""

    def __init__(self, text: str):
        super().__init__()
        self.text = text


class OutputState(Message):
    def __init__(self, states: dict):
        super().__init__()
        self.states = states
