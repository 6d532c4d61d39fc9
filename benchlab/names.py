"""The one rule for part labels and lot names, on every way in, and safe forms of them on every way out.

A label or lot name becomes a file name (``<label>.csv`` in a session folder), a SPICE model name, a CSV cell and
HTML text, so it is held to what is a safe file name on every system: 1-64 letters, digits, ``_ . + -``, starting
with a letter or digit. The whole string must match (``re.fullmatch``: a ``$`` would accept a trailing newline).
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

from benchlab.errors import InputError

NAME_RULE = "use 1-64 letters, digits, '_', '.', '+' or '-', starting with a letter or digit"
_NAME_RE = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.+-]{0,63}")
# cells a spreadsheet would read as a formula (common practice for CSV exports: prefix them with an apostrophe)
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def is_valid_name(name: Any) -> bool:
    """True when ``name`` is a usable label or lot name (see the module docstring)."""
    return isinstance(name, str) and _NAME_RE.fullmatch(name) is not None and name not in (".", "..")


def check_name(kind: str, name: Any, *, error: type[Exception] = InputError, path: str | None = None) -> str:
    """Return ``name`` when it is a usable label or lot name; otherwise raise ``error`` saying why.

    Parameters
    ----------
    kind : str
        What the name is, for the message (``"part label"``, ``"lot name"``).
    name : any
        The value to check (from the command line or read from a file).
    error : exception class
        Raised on a bad name (``InputError`` by default; the library passes its own).
    path : str, optional
        The file the name was read from (named in the message).
    """
    if is_valid_name(name):
        return name
    shown = printable(name) if isinstance(name, str) else repr(name)
    where = f"{path}: " if path else ""
    raise error(f"{where}bad {kind} '{shown}': {NAME_RULE}")


def printable(text: Any, limit: int = 80) -> str:
    """``text`` with control characters (newline, NUL, ...) shown as escapes and cut to ``limit`` characters."""
    value = "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))
    return value if len(value) <= limit else value[:limit - 3] + "..."


def inside(folder: Path, name: str, suffix: str = "") -> Path:
    """``folder / (name + suffix)``, refused unless it is a valid name that stays inside ``folder``.

    Every file name read from a session or import file goes through here, so a crafted ``parts`` entry such as
    ``../victim/data`` can never make benchlab read or write outside the folder.
    """
    check_name("part label", name, path=str(folder))
    target = (folder / f"{name}{suffix}")
    if target.resolve().parent != folder.resolve():
        raise InputError(f"part label '{printable(name)}' names a file outside the session folder", path=str(folder))
    return target


def check_session_names(meta: dict, path: str) -> list[str]:
    """The part labels a ``session.json`` lists (``parts``) and its lot name, each checked; returns the labels.

    Every reader of a session folder (resume, library import) calls this before it writes anything, so a crafted
    entry such as ``../../x`` gets one error naming the file and the entry instead of being passed over.

    Raises
    ------
    InputError
        ``parts`` is not a list, or an entry (or the lot) is not a usable name; the message names ``path`` and
        the entry.
    """
    parts = meta.get("parts")
    if not isinstance(parts, list):
        raise InputError(f"'parts' must be a list of part labels, got {type(parts).__name__}", path=path)
    for n, label in enumerate(parts, start=1):
        if not is_valid_name(label):
            shown = printable(label) if isinstance(label, str) else repr(label)
            raise InputError(f"bad part label '{shown}' (entry {n} of 'parts'): {NAME_RULE}", path=path)
    if meta.get("lot") is not None:
        check_name("lot name", meta["lot"], path=path)
    return parts


def csv_cell(value: Any) -> Any:
    """A CSV cell a spreadsheet shows as text: a string starting with ``= + - @`` (or tab/CR) gets a leading
    apostrophe (common practice against formula injection); numbers are left as they are."""
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        try:
            float(value)  # '-0.5' is a number, not a formula
            return value
        except ValueError:
            return "'" + value
    return value


def spice_comment(text: Any) -> str:
    """``text`` made safe for a SPICE comment line: no line breaks or control characters can start a new card."""
    return printable(text, limit=200)
