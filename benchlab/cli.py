"""The ``benchlab`` console entry point: one parser, a subcommand per module in ``benchlab.commands``.

Each command module defines ``register(subparsers)``, which adds its subparser(s) and sets
``func`` (taking the parsed namespace, returning an exit code). Errors derived from
:class:`benchlab.errors.BenchlabError` are printed as one line, never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import sys

from benchlab import __version__
from benchlab.errors import BenchlabError

# Order is the order shown in --help.
COMMAND_MODULES: tuple[str, ...] = (
    "demo", "sim", "bench", "sweep", "fit", "library", "parts", "design", "export", "report",
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="benchlab",
        description=(
            "Characterize discrete MOSFETs on a SCPI bench (or the built-in simulated bench): sweep each part "
            "diode-connected, fit threshold and transconductance, keep a device library, pick matched sets and "
            "design current sinks."
        ),
    )
    parser.add_argument("--version", action="version", version=f"benchlab {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMAND_MODULES:
        importlib.import_module(f"benchlab.commands.{name}").register(subparsers)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    try:
        return int(args.func(args) or 0)
    except BenchlabError as exc:
        print(f"benchlab: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("benchlab: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
