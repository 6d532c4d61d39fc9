"""Argument helpers shared by several command modules."""

from __future__ import annotations

import argparse


def library_option() -> argparse.ArgumentParser:
    """Parent parser with ``--library PATH`` (shared by every command that touches the library)."""
    parent = argparse.ArgumentParser(add_help=False)
    parent.add_argument("--library", metavar="PATH",
                        help="library file (default: $BENCHLAB_LIBRARY, else library.db in the user data folder)")
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
