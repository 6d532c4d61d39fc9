"""Argument helpers shared by several command modules."""

from __future__ import annotations

import argparse
from typing import Callable

from benchlab.units import parse_quantity


def library_option() -> argparse.ArgumentParser:
    """Parent parser with ``--library PATH`` (shared by every command that touches the library)."""
    parent = argparse.ArgumentParser(add_help=False)
    parent.add_argument("--library", metavar="PATH|URL",
                        help="library file or postgresql://user@host/db URL (default: $BENCHLAB_LIBRARY, else "
                             "library.db in the user data folder)")
    parent.add_argument("--operator", metavar="NAME",
                        help="who is working, kept with every state change (default: your login name)")
    return parent


def whole_number(text: str) -> int:
    """argparse type: an integer >= 0."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be 0 or more, got {value}")
    return value


_SIGN_RULES = {
    "any": (lambda v: True, ""),
    "positive": (lambda v: v > 0, "must be above 0"),
    "nonnegative": (lambda v: v >= 0, "must be 0 or more"),
}


def quantity(unit: str, sign: str = "positive", why: str = "") -> Callable[[str], float]:
    """argparse type: a quantity in ``unit`` read by :func:`benchlab.units.parse_quantity`.

    Parameters
    ----------
    unit : str
        The SI unit (a key of :data:`benchlab.units.UNIT_SPELLINGS`).
    sign : {"positive", "nonnegative", "any"}
        Which values make sense; the others are refused with ``why`` as the reason.
    why : str
        The reason given when the sign is wrong (e.g. "the threshold is entered as a magnitude").

    Returns
    -------
    callable
        ``str -> float``; argparse reports its ``ArgumentTypeError`` with the option the user typed.
    """
    accept, rule = _SIGN_RULES[sign]

    def parse(text: str) -> float:
        try:
            value = parse_quantity(text, unit)
        except ValueError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None
        if not accept(value):
            raise argparse.ArgumentTypeError(f"{rule}, got {text}" + (f" ({why})" if why else ""))
        return value

    parse.__name__ = f"quantity in {unit}" if unit else "number"
    parse.unit = unit  # read by the test that walks the parser
    return parse
