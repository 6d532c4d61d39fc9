"""The ``benchlab`` console entry point: one parser, a subcommand per module in ``benchlab.commands``.

Each command module defines ``register(subparsers)``, which adds its subparser(s) and sets
``func`` (taking the parsed namespace, returning an exit code). Errors derived from
:class:`benchlab.errors.BenchlabError` are printed as one line, never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import warnings

from benchlab import __version__
from benchlab.commands._args import Parser
from benchlab.errors import BenchlabError

# Order is the order shown in --help.
COMMAND_MODULES: tuple[str, ...] = (
    "demo", "sim", "bench", "sweep", "thermal", "fit", "library", "parts", "design", "export", "report", "ui",
)


def build_parser(command: str | None = None) -> argparse.ArgumentParser:
    """The ``benchlab`` parser with every command module's subcommands registered (``command``: only the module of
    that name, enough to parse a command line that starts with it; argparse's help texts cost a few ms each)."""
    parser = Parser(
        prog="benchlab",
        description=(
            "Characterize discrete MOSFETs on a SCPI bench (or the built-in simulated bench): sweep each part "
            "diode-connected, fit threshold and transconductance, keep a device library, pick matched sets and "
            "design current sinks."
        ),
    )
    parser.add_argument("--version", action="version", version=f"benchlab {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in (command,) if command in COMMAND_MODULES else COMMAND_MODULES:
        importlib.import_module(f"benchlab.commands.{name}").register(subparsers)
    _describe_subcommands(parser)
    return parser


def _describe_subcommands(parser: argparse.ArgumentParser) -> None:
    """Give every (sub)subcommand without a description its one-line help, so its own ``--help`` says what it does."""
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            helps = {choice.dest: choice.help for choice in action._choices_actions}
            for name, sub in action.choices.items():
                if not sub.description and helps.get(name):
                    text = helps[name]
                    sub.description = text[0].upper() + text[1:] + ("" if text.endswith(".") else ".")
                _describe_subcommands(sub)


def _show_deprecation(message, category, filename, lineno, file=None, line=None) -> None:
    """Print a warning (old names in a user's files) as one line, without the source location."""
    print(f"benchlab: warning: {message}", file=sys.stderr)


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit code (a ``BenchlabError`` is printed as one line, exit code from the error)."""
    words = sys.argv[1:] if argv is None else argv
    # a command line naming its command needs that command's parser only (a command module named as its command)
    parser = build_parser(words[0] if words and words[0] in COMMAND_MODULES else None)
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 0
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("always", FutureWarning)
            warnings.showwarning = _show_deprecation
            return int(args.func(args) or 0)
    except BenchlabError as exc:
        print(f"benchlab: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("benchlab: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader went away (`benchlab parts list --json | head`): stop quietly
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141
    except OSError as exc:
        # a folder or file the system refuses (a file in the way, no permission, a read-only or missing place):
        # the one line a user needs, never a traceback
        print(f"benchlab: error: {os_error_text(exc)}", file=sys.stderr)
        return 2


def os_error_text(exc: OSError) -> str:
    """One line for an ``OSError``: where, and what the system said (e.g. a file standing where a folder must go)."""
    import errno

    where = exc.filename if exc.filename is not None else ""
    why = exc.strerror or str(exc)
    hint = {errno.ENOTDIR: "a file stands where a folder is needed", errno.ENOENT: "it does not exist and "
            "cannot be made there", errno.EACCES: "no permission", errno.EROFS: "read-only file system",
            errno.EEXIST: "something of that name is already there", errno.ENOSPC: "the disk is full"}.get(exc.errno)
    text = f"{where}: {why}" if where else why
    return f"cannot write or read there: {text}" + (f" ({hint})" if hint else "")


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
