"""The one exception hierarchy of benchlab.

Every error a user can see derives from :class:`BenchlabError`; the CLI prints its
message on one line and exits non-zero, never with a traceback. Instrument errors
carry the instrument's own code and text (as read from ``SYSTem:ERRor?``).
"""

from __future__ import annotations


class BenchlabError(Exception):
    """Base of every error benchlab raises on purpose."""

    exit_code = 2


class InputError(BenchlabError):
    """Bad user input (a data file, an argument); names the file and row when known.

    Parameters
    ----------
    message : str
        What is wrong, in words a user understands.
    path : str, optional
        The file the bad input came from.
    row : int, optional
        1-based row (data rows, header excluded) in that file.
    """

    def __init__(self, message: str, *, path: str | None = None, row: int | None = None):
        self.path = path
        self.row = row
        where = ""
        if path is not None:
            where = f"{path}"
            if row is not None:
                where += f", row {row}"
            where += ": "
        super().__init__(where + message)


class ConfigError(InputError):
    """A bench config or instrument profile that cannot be used (names file and key)."""

    def __init__(self, message: str, *, path: str | None = None, key: str | None = None):
        self.key = key
        text = f"key '{key}': {message}" if key else message
        super().__init__(text, path=path)


class InstrumentError(BenchlabError):
    """Something went wrong talking to an instrument."""

    def __init__(self, message: str, *, resource: str | None = None):
        self.resource = resource
        super().__init__(f"{resource}: {message}" if resource else message)


class InstrumentReportedError(InstrumentError):
    """The instrument put an error in its queue (code and text are the instrument's own).

    Parameters
    ----------
    code : int
        The SCPI error code, e.g. -222.
    text : str
        The instrument's description, e.g. ``"Data out of range"``.
    command : str, optional
        The command after which the error was read.
    """

    def __init__(self, code: int, text: str, *, command: str | None = None, resource: str | None = None):
        self.code = code
        self.text = text
        self.command = command
        after = f" after '{command}'" if command else ""
        super().__init__(f"instrument error {code}, \"{text}\"{after}", resource=resource)


class InstrumentTimeout(InstrumentError):
    """The instrument did not answer in time (after the allowed retry)."""


class ConnectionLost(InstrumentError):
    """The connection to the instrument dropped and could not be reopened."""


class SafetyError(BenchlabError):
    """A setpoint or configuration would break a safety limit; nothing was applied."""


class SweepCancelled(BenchlabError):
    """The sweep was stopped by the user (Ctrl-C, SIGTERM, or a cancel request)."""

    exit_code = 130


class FitError(BenchlabError):
    """A sweep could not be fitted with the requested model."""


class LibraryError(BenchlabError):
    """A device-library operation failed (unknown or ambiguous part, bad state change...)."""


class PartUnavailableError(LibraryError):
    """A design asked for a part that is no longer in stock (another engineer reserved or used it first).

    ``label``, ``lot``, ``state``; ``design_id``, ``at`` (ISO UTC) and ``operator`` of the design that took it,
    when a design did.
    """

    def __init__(self, message: str, *, label: str, lot: str, state: str, design_id: int | None = None,
                 at: str | None = None, operator: str | None = None):
        super().__init__(message)
        self.label, self.lot, self.state = label, lot, state
        self.design_id, self.at, self.operator = design_id, at, operator


class DesignError(BenchlabError):
    """A design request has no valid solution (e.g. the supply cannot reach the current)."""
