"""SCPI program-message parsing for the simulated bench (IEEE 488.2 / SCPI-1999 syntax).

The command tree is data: each instrument lists ``CommandSpec`` rows (a header pattern
such as ``[SOURce:]VOLTage[:LEVel][:IMMediate][:AMPLitude]``, query or not, a handler
name, how many parameters). :class:`CommandTable` matches typed headers against those
patterns; :func:`split_message` and :func:`parse_unit` turn one received line into
program-message units. Nothing here does I/O.

Header rules (SCPI-1999 vol. 1, ch. 6 and 7): the uppercase part of a mixed-case keyword is
its short form; only the short form or the whole long form is accepted, in any case;
``[ ]`` nodes may be left out; a numeric suffix ``1`` is accepted on any keyword (one
channel). Parameters are NRf numbers (with an optional unit suffix), character data,
or quoted strings.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Mapping

from benchlab.instruments.scpi import STANDARD_ERRORS

# Standard error texts (IEEE 488.2 / SCPI-1999 vol. 2, ch. 21): one table for the whole project, kept with
# the instrument layer's SCPI helpers (a pure module; it does not import pyvisa).
ERROR_TEXT: Mapping[int, str] = STANDARD_ERRORS

# SCPI special values for readings (SCPI-1999 vol. 1, 7.2.1.5: 9.9E37 infinity, 9.91E37 NaN).
PLUS_INFINITY_TEXT = "9.9E37"
MINUS_INFINITY_TEXT = "-9.9E37"
NOT_A_NUMBER_TEXT = "9.91E37"


class ScpiError(Exception):
    """A standard SCPI error raised while executing one program-message unit.

    Parameters
    ----------
    code : int
        Negative standard code, e.g. -222.
    detail : str, optional
        Device-dependent detail appended to the standard text after a ``;``.
    """

    def __init__(self, code: int, detail: str = ""):
        self.code = code
        self.detail = detail
        base = ERROR_TEXT.get(code, "Device-specific error")
        self.text = f"{base}; {detail}" if detail else base
        super().__init__(f"{code},\"{self.text}\"")

    @property
    def is_command_error(self) -> bool:
        """True for -1xx errors, after which the rest of the message is discarded."""
        return -199 <= self.code <= -100


# --------------------------------------------------------------------------- header patterns

@dataclass(frozen=True)
class Keyword:
    """One node of a header pattern: its short and long forms, and whether it may be left out."""

    short: str
    long: str
    optional: bool

    @classmethod
    def from_mixed_case(cls, text: str, optional: bool) -> "Keyword":
        """A keyword from SCPI notation: the uppercase letters are the short form."""
        if text.startswith("*"):
            return cls(text.upper(), text.upper(), optional)
        short = "".join(ch for ch in text if ch.isupper() or ch.isdigit())
        return cls(short or text.upper(), text.upper(), optional)

    def accepts(self, typed: str) -> bool:
        """True when ``typed`` (already uppercased, suffix stripped) is the short or whole long form."""
        return typed == self.short or typed == self.long


_PATTERN_PIECE = re.compile(r"\[:?([A-Za-z*]+):?\]|:?([A-Za-z*]+)")


def compile_pattern(pattern: str) -> tuple[Keyword, ...]:
    """Turn ``"[SOURce:]VOLTage[:LEVel]"`` into its keyword nodes."""
    nodes: list[Keyword] = []
    position = 0
    for match in _PATTERN_PIECE.finditer(pattern):
        if match.start() != position:
            raise ValueError(f"bad command pattern {pattern!r} near {position}")
        position = match.end()
        if match.group(1):
            nodes.append(Keyword.from_mixed_case(match.group(1), optional=True))
        else:
            nodes.append(Keyword.from_mixed_case(match.group(2), optional=False))
    if position != len(pattern) or not nodes:
        raise ValueError(f"bad command pattern {pattern!r}")
    return tuple(nodes)


def _match_nodes(typed: list[str], i: int, nodes: tuple[Keyword, ...], j: int) -> bool:
    if j == len(nodes):
        return i == len(typed)
    node = nodes[j]
    if i < len(typed) and node.accepts(typed[i]) and _match_nodes(typed, i + 1, nodes, j + 1):
        return True
    return node.optional and _match_nodes(typed, i, nodes, j + 1)


@dataclass(frozen=True)
class CommandSpec:
    """One row of an instrument's command table.

    Parameters
    ----------
    pattern : str
        Header pattern in SCPI notation (mixed case, ``[ ]`` optional nodes), without ``?``.
    query : bool
        Whether this row is the query form (header typed with ``?``).
    handler : str
        Name of the instrument method that executes it.
    min_params, max_params : int
        Accepted number of parameters (-109 below, -108 above). ``max_params=-1`` means any.
    """

    pattern: str
    query: bool
    handler: str
    min_params: int = 0
    max_params: int = 0

    @property
    def nodes(self) -> tuple[Keyword, ...]:
        """The compiled keyword nodes of :attr:`pattern`."""
        return compile_pattern(self.pattern)


class CommandTable:
    """Match typed headers against a list of :class:`CommandSpec` rows."""

    def __init__(self, specs: tuple[CommandSpec, ...] | list[CommandSpec]):
        self._rows = [(spec, spec.nodes) for spec in specs]

    def lookup(self, keywords: list[str], query: bool) -> CommandSpec | None:
        """The row whose pattern the typed keywords (uppercase, suffix stripped) match, or None."""
        for spec, nodes in self._rows:
            if spec.query == query and _match_nodes(keywords, 0, nodes, 0):
                return spec
        return None

    @property
    def specs(self) -> list[CommandSpec]:
        """The rows of the table, in match order."""
        return [spec for spec, _ in self._rows]


# --------------------------------------------------------------------------- message parsing

@dataclass(frozen=True)
class Param:
    """One parameter of a program-message unit.

    ``kind`` is ``"number"`` (``value`` a float, ``suffix`` the unit text uppercased),
    ``"char"`` (``value`` the uppercased word) or ``"string"`` (``value`` the unquoted text).
    """

    kind: str
    value: object
    suffix: str = ""
    text: str = ""


@dataclass(frozen=True)
class ProgramUnit:
    """One command of a message: header keywords (uppercased, suffix stripped), query flag, params."""

    keywords: tuple[str, ...]
    query: bool
    common: bool
    absolute: bool
    params: tuple[Param, ...]
    header_text: str


_HEADER = re.compile(r"^(:?)(\*[A-Z]+|[A-Z][A-Z0-9_]*(?::[A-Z][A-Z0-9_]*)*)(\??)$")
_KEYWORD_SUFFIX = re.compile(r"^([A-Z_]*[A-Z_])(\d+)$")
_NRF = re.compile(r"^([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*([A-Za-z]*)$")
_CHAR_DATA = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")


def _split_outside_quotes(text: str, separator: str) -> list[str]:
    parts: list[str] = []
    current: list[str] = []
    quote = ""
    for ch in text:
        if quote:
            current.append(ch)
            if ch == quote:
                quote = ""
        elif ch in "\"'":
            quote = ch
            current.append(ch)
        elif ch == separator:
            parts.append("".join(current))
            current = []
        else:
            current.append(ch)
    if quote:
        raise ScpiError(-102, "unterminated string")
    parts.append("".join(current))
    return parts


def split_message(line: str) -> list[str]:
    """Split one received line into program-message unit texts at ``;`` (not inside quotes).

    Raises
    ------
    ScpiError
        -101 for control or non-ASCII characters, -102 for an unterminated string.
    """
    for ch in line:
        if ord(ch) > 126 or (ord(ch) < 32 and ch not in "\t"):
            raise ScpiError(-101, f"character 0x{ord(ch):02X}" if ord(ch) < 256 else "non-ASCII character")
    return _split_outside_quotes(line, ";")


def parse_param(text: str) -> Param:
    """Classify one parameter text (already stripped)."""
    if not text:
        raise ScpiError(-102, "empty parameter")
    if text[0] in "\"'":
        quote = text[0]
        if len(text) < 2 or text[-1] != quote:
            raise ScpiError(-102, "bad string")
        inner = text[1:-1]
        if quote in inner.replace(quote * 2, ""):
            raise ScpiError(-102, "bad string")
        return Param("string", inner.replace(quote * 2, quote), text=text)
    number = _NRF.match(text)
    if number:
        value = float(number.group(1))
        return Param("number", value, number.group(2).upper(), text)
    if _CHAR_DATA.match(text):
        return Param("char", text.upper(), text=text)
    if text.startswith("#"):
        raise ScpiError(-104, "block data not accepted")
    raise ScpiError(-102, f"cannot parse parameter '{text[:20]}'")


def parse_unit(text: str) -> ProgramUnit | None:
    """Parse one program-message unit; ``None`` for an empty one (e.g. a trailing ``;``)."""
    stripped = text.strip(" \t\r")
    if not stripped:
        return None
    head, _, rest = stripped.replace("\t", " ").partition(" ")
    header = head.upper()
    match = _HEADER.match(header)
    if not match:
        raise ScpiError(-102, f"bad header '{head[:24]}'")
    absolute = match.group(1) == ":"
    query = match.group(3) == "?"
    body = match.group(2)
    common = body.startswith("*")
    keywords: list[str] = []
    for word in body.split(":"):
        suffixed = _KEYWORD_SUFFIX.match(word)
        if suffixed and not common:
            if int(suffixed.group(2)) != 1:
                raise ScpiError(-114, f"'{word}'")
            word = suffixed.group(1)
        keywords.append(word)
    params: list[Param] = []
    rest = rest.strip()
    if rest:
        params = [parse_param(piece.strip()) for piece in _split_outside_quotes(rest, ",")]
    return ProgramUnit(tuple(keywords), query, common, absolute, tuple(params), stripped)


# --------------------------------------------------------------------------- parameter helpers

_SUFFIX_SCALE = {"": 1.0, "M": 1e-3, "U": 1e-6, "N": 1e-9, "K": 1e3}


def _apply_suffix(param: Param, unit: str | None) -> float:
    value = float(param.value)  # type: ignore[arg-type]
    if not param.suffix:
        return value
    if unit and param.suffix.endswith(unit):
        prefix = param.suffix[: -len(unit)]
        if prefix in _SUFFIX_SCALE:
            return value * _SUFFIX_SCALE[prefix]
    raise ScpiError(-131, f"'{param.suffix}'")


_MIN_WORDS = ("MIN", "MINIMUM")
_MAX_WORDS = ("MAX", "MAXIMUM")
_DEF_WORDS = ("DEF", "DEFAULT")


def numeric_value(param: Param, low: float, high: float, *, default: float | None = None,
                  unit: str | None = None, minimum: float | None = None,
                  maximum: float | None = None) -> float:
    """An NRf parameter (or MIN / MAX / DEF) checked against ``[low, high]``.

    Raises
    ------
    ScpiError
        -104 for a string or an unknown word, -131 for a wrong unit suffix, -222 out of range.
    """
    if param.kind == "char":
        word = str(param.value)
        if word in _MIN_WORDS:
            return low if minimum is None else minimum
        if word in _MAX_WORDS:
            return high if maximum is None else maximum
        if word in _DEF_WORDS and default is not None:
            return default
        raise ScpiError(-104, f"'{word}' where a number was expected")
    if param.kind != "number":
        raise ScpiError(-104, "string where a number was expected")
    value = _apply_suffix(param, unit)
    if not math.isfinite(value) or value < low or value > high:
        raise ScpiError(-222, f"{param.text[:24]} not in [{low:g}, {high:g}]")
    return value


def choice_value(param: Param, choices: tuple[str, ...]) -> str:
    """Character data matched against mixed-case choices (short or long form); returns the long form."""
    if param.kind != "char":
        raise ScpiError(-104, "character data expected")
    for choice in choices:
        if Keyword.from_mixed_case(choice, False).accepts(str(param.value)):
            return choice.upper()
    raise ScpiError(-224, f"'{param.value}'")


def boolean_value(param: Param) -> bool:
    """ON / OFF / 1 / 0 (a number is rounded; non-zero is ON, per SCPI-1999 7.3)."""
    if param.kind == "number":
        return round(float(param.value)) != 0  # type: ignore[arg-type]
    return choice_value(param, ("ON", "OFF")) == "ON"


def format_number(value: float) -> str:
    """A reading or setting as NR3 text; infinities and NaN as the SCPI special values."""
    if math.isnan(value):
        return NOT_A_NUMBER_TEXT
    if math.isinf(value):
        return PLUS_INFINITY_TEXT if value > 0 else MINUS_INFINITY_TEXT
    return f"{value:+.9E}"


def quote_string(text: str) -> str:
    """IEEE 488.2 string response data: double quotes, embedded quotes doubled."""
    return '"' + text.replace('"', '""') + '"'


def unquote_string(reply: str) -> str:
    """Inverse of :func:`quote_string` (for clients reading a string reply)."""
    reply = reply.strip()
    if len(reply) >= 2 and reply[0] == reply[-1] == '"':
        return reply[1:-1].replace('""', '"')
    return reply
