"""SCPI text helpers: the standard error table, error-queue replies, readings and templates.

Pure functions only (no I/O), so the transport and the role classes share one reading of the
standard. Codes and texts follow IEEE 488.2 / SCPI-1999 (negative codes are the standard's,
positive ones belong to the instrument).
"""

from __future__ import annotations

import math
import string
from typing import Iterable, Mapping

# SCPI-1999 vol. 2, SYSTem:ERRor error/event list: the standard negative codes and their texts.
STANDARD_ERRORS: Mapping[int, str] = {
    0: "No error",
    -100: "Command error",
    -101: "Invalid character",
    -102: "Syntax error",
    -103: "Invalid separator",
    -104: "Data type error",
    -105: "GET not allowed",
    -108: "Parameter not allowed",
    -109: "Missing parameter",
    -110: "Command header error",
    -111: "Header separator error",
    -112: "Program mnemonic too long",
    -113: "Undefined header",
    -114: "Header suffix out of range",
    -120: "Numeric data error",
    -121: "Invalid character in number",
    -123: "Exponent too large",
    -124: "Too many digits",
    -128: "Numeric data not allowed",
    -130: "Suffix error",
    -131: "Invalid suffix",
    -134: "Suffix too long",
    -138: "Suffix not allowed",
    -140: "Character data error",
    -141: "Invalid character data",
    -144: "Character data too long",
    -148: "Character data not allowed",
    -150: "String data error",
    -151: "Invalid string data",
    -158: "String data not allowed",
    -160: "Block data error",
    -161: "Invalid block data",
    -168: "Block data not allowed",
    -170: "Expression error",
    -171: "Invalid expression",
    -178: "Expression data not allowed",
    -200: "Execution error",
    -203: "Command protected",
    -210: "Trigger error",
    -211: "Trigger ignored",
    -212: "Arm ignored",
    -213: "Init ignored",
    -214: "Trigger deadlock",
    -215: "Arm deadlock",
    -220: "Parameter error",
    -221: "Settings conflict",
    -222: "Data out of range",
    -223: "Too much data",
    -224: "Illegal parameter value",
    -225: "Out of memory",
    -226: "Lists not same length",
    -230: "Data corrupt or stale",
    -231: "Data questionable",
    -240: "Hardware error",
    -241: "Hardware missing",
    -300: "Device-specific error",
    -310: "System error",
    -311: "Memory error",
    -315: "Configuration memory lost",
    -330: "Self-test failed",
    -350: "Queue overflow",
    -360: "Communication error",
    -400: "Query error",
    -410: "Query INTERRUPTED",
    -420: "Query UNTERMINATED",
    -430: "Query DEADLOCKED",
    -440: "Query UNTERMINATED after indefinite response",
}

# SCPI-1999 vol. 1, numeric data: the values an instrument sends for +INF, -INF and NaN.
_POSITIVE_INFINITY = 9.9e37
_NOT_A_NUMBER = 9.91e37


def describe_error(code: int) -> str:
    """Return the standard text of a SCPI error code.

    Parameters
    ----------
    code : int
        An error code as read from ``SYSTem:ERRor?``.

    Returns
    -------
    str
        The SCPI-1999 text for a standard code, ``"Device-specific error"`` for a positive code,
        or ``"Unknown error"`` for a negative code outside the table.
    """
    if code in STANDARD_ERRORS:
        return STANDARD_ERRORS[code]
    if code > 0:
        return "Device-specific error"
    # The hundreds digit names the class even when the exact code is not listed.
    return STANDARD_ERRORS.get(-(abs(code) // 100) * 100, "Unknown error")


def parse_error_reply(reply: str) -> tuple[int, str]:
    """Split a ``SYSTem:ERRor?`` reply into its code and text.

    Parameters
    ----------
    reply : str
        E.g. ``'-222,"Data out of range"'`` or ``'+0,"No error"'``.

    Returns
    -------
    tuple of (int, str)
        The code and the instrument's text (quotes removed); when the instrument sends no text,
        the standard text of the code.

    Raises
    ------
    ValueError
        When the reply does not start with an integer code.
    """
    head, _, tail = reply.strip().partition(",")
    code = int(head.strip())
    text = tail.strip()
    if len(text) >= 2 and text[0] == text[-1] == '"':
        text = text[1:-1].replace('""', '"')
    # Some instruments add detail after a ';' inside the string; keep it, it helps the user.
    return code, text or describe_error(code)


def parse_reading(text: str) -> float:
    """Turn one numeric reply into a float, mapping the SCPI special values.

    Parameters
    ----------
    text : str
        One NR1/NR2/NR3 number, e.g. ``"1.234E-3"``, ``"+9.9E37"``.

    Returns
    -------
    float
        The value; 9.9E37 becomes ``+inf``, -9.9E37 ``-inf`` and 9.91E37 ``nan``.

    Raises
    ------
    ValueError
        When the text is not a number.
    """
    stripped = text.strip()
    if stripped.upper() in ("NAN", "+NAN"):
        return math.nan
    value = float(stripped)
    # Compare with a relative margin: instruments print these with varying digits.
    if math.isclose(abs(value), _NOT_A_NUMBER, rel_tol=1e-4):
        return math.nan
    if math.isclose(abs(value), _POSITIVE_INFINITY, rel_tol=1e-4):
        return math.copysign(math.inf, value)
    return value


def parse_readings(text: str, separator: str = ",") -> list[float]:
    """Split a list reply (e.g. ``"1.0,2.5E-3,..."``) into floats with :func:`parse_reading`.

    Parameters
    ----------
    text : str
        The reply.
    separator : str
        The character between values.

    Returns
    -------
    list of float
        The values in order; an empty reply gives an empty list.
    """
    stripped = text.strip()
    if not stripped:
        return []
    return [parse_reading(part) for part in stripped.split(separator)]


def parse_bool(text: str) -> bool:
    """Read a SCPI boolean reply (``0``/``1``/``ON``/``OFF``).

    Raises
    ------
    ValueError
        When the reply is none of those.
    """
    word = text.strip().upper()
    if word in ("1", "+1", "ON"):
        return True
    if word in ("0", "+0", "OFF"):
        return False
    raise ValueError(f"not a SCPI boolean: {text!r}")


def template_fields(template: str) -> set[str]:
    """Return the placeholder names used in a command template like ``"VOLT {volts:.6g}"``.

    Raises
    ------
    ValueError
        When the template is malformed (unbalanced braces, positional or indexed fields).
    """
    names: set[str] = set()
    for _, field_name, _, _ in string.Formatter().parse(template):
        if field_name is None:
            continue
        if not field_name.isidentifier():
            raise ValueError(f"placeholder {{{field_name}}} is not a plain name")
        names.add(field_name)
    return names


def render(template: str, **values: object) -> str:
    """Fill a command template with values (``render("VOLT {volts:.6g}", volts=1.5) -> "VOLT 1.5"``)."""
    return template.format(**values)


def render_all(templates: Iterable[str], **values: object) -> list[str]:
    """Fill each template of a multi-line operation with the same values."""
    return [render(template, **values) for template in templates]


def chain(lines: Iterable[str]) -> str:
    """Join program message units into one message (IEEE 488.2 compound message): ``;`` between them, and a
    leading ``:`` on each header that has none (SCPI-1999 vol. 1: after ``;`` a header is otherwise read relative
    to the previous one's path). Common (``*``) commands need no ``:``.

    ``chain(["SOUR:VOLT 1", "READ?"]) -> "SOUR:VOLT 1;:READ?"``
    """
    units = []
    for k, line in enumerate(lines):
        line = line.strip()
        units.append(line if k == 0 or line.startswith((":", "*")) else ":" + line)
    return ";".join(units)


def split_replies(reply: str) -> list[str]:
    """Split the reply to a compound query into the replies of its queries (IEEE 488.2 joins them with ``;``).

    A ``;`` inside a quoted string (an error text) does not split. ``'1.5,2E-3;0,"No error"'`` ->
    ``['1.5,2E-3', '0,"No error"']``; an empty reply gives ``['']``.
    """
    parts, current, quoted = [], [], False
    for char in reply.strip():
        if char == '"':
            quoted = not quoted  # a doubled quote inside a string toggles twice: still quoted
        if char == ";" and not quoted:
            parts.append("".join(current))
            current = []
        else:
            current.append(char)
    parts.append("".join(current))
    return parts
