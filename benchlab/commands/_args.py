"""Argument helpers shared by every command module: the rules of benchlab's command language.

- A quantity is read by :func:`quantity` (one syntax everywhere: ``20m``, ``20mA``, ``0.02``, ``-5m``);
  counts by :func:`whole_number`.
- ``--out`` is only ever where results are written; ``--json`` prints one JSON object per line.
- A simulator setting is spelled ``--sim-<name>`` on every command (:func:`add_sim_options`).
- An option given where it has no effect is refused (:func:`refuse_given`), never ignored.
- Errors name the option the user typed (:func:`name_options`), never an internal field.
"""

from __future__ import annotations

import argparse
import json
import re
from typing import Any, Callable, Iterable, Mapping

from benchlab.choices import SIM_BAG_SIZE, SIM_SERIES_RESISTOR_OHM, SIM_TIME_SCALE
from benchlab.errors import BenchlabError, InputError
from benchlab.kinds import Fixture
from benchlab.units import parse_quantity

# argparse only takes '-5' and '-.5' as values; a quantity like '-1e-5' or '-5m' would read as an option
NEGATIVE_QUANTITY = re.compile(r"^-(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?\s*[^\s-]*$")


class Parser(argparse.ArgumentParser):
    """The benchlab argument parser: negative quantities (``--vth-tempco -5m``) are values, not options, and
    options are never abbreviated."""

    def __init__(self, *args: Any, **kwargs: Any):
        kwargs.setdefault("allow_abbrev", False)  # one name per option: '--out' never stands for '--outputs'
        super().__init__(*args, **kwargs)
        self._negative_number_matcher = NEGATIVE_QUANTITY

    def error(self, message: str):  # type: ignore[override]
        """A usage error is one line like every other error, naming the option (argparse prints the usage block too)."""
        self.exit(2, f"benchlab: error: {message} (see '{self.prog} --help')\n")


def library_option() -> argparse.ArgumentParser:
    """Parent parser with ``--library PATH`` (shared by every command that touches the library)."""
    parent = argparse.ArgumentParser(add_help=False)
    parent.add_argument("--library", metavar="PATH|URL",
                        help="library file or postgresql://user@host/db URL (default: $BENCHLAB_LIBRARY, else "
                             "library.db in the user data folder)")
    parent.add_argument("--operator", metavar="NAME",
                        help="who is working, kept with every state change (default: your login name)")
    return parent


def operator_name(args: argparse.Namespace) -> str:
    """Who is at the bench: ``--operator`` as typed, else the login name (the one rule of sweep, bag and ui)."""
    if args.operator is not None:
        return args.operator
    from benchlab.services.characterize import default_operator

    return default_operator()


def json_option(parser: argparse.ArgumentParser, what: str = "the result") -> None:
    """Add ``--json``: print ``what`` as JSON, one object per line."""
    parser.add_argument("--json", action="store_true", help=f"print {what} as JSON (one object per line)")


def print_json(*objects: Any, default: Callable[[Any], Any] | None = None) -> None:
    """Print each object as one line of JSON (JSON Lines)."""
    for obj in objects:
        print(json.dumps(obj, default=default))


def whole_number(text: str) -> int:
    """argparse type: an integer >= 0."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a whole number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be 0 or more, got {value}")
    return value


def counting_number(text: str) -> int:
    """argparse type: an integer >= 1."""
    value = whole_number(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be 1 or more, got {value}")
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
    parse.unit = unit  # type: ignore[attr-defined]  # read by the test that walks the parser
    parse.sign = sign  # type: ignore[attr-defined]
    return parse


def quantity_list(unit: str, sign: str = "nonnegative", min_count: int = 1) -> Callable[[str], tuple[float, ...]]:
    """argparse type: at least ``min_count`` comma-separated quantities in ``unit`` (``1,1.5,2V`` or ``500m,1``)."""
    one = quantity(unit, sign)

    def parse(text: str) -> tuple[float, ...]:
        values = tuple(one(v.strip()) for v in text.split(",") if v.strip())
        if len(values) < min_count:
            raise argparse.ArgumentTypeError(f"give at least {min_count} comma-separated value(s) in {unit}, "
                                             f"got {text!r}")
        return values

    parse.__name__ = f"list of quantities in {unit}"
    parse.min_count = min_count  # type: ignore[attr-defined]
    parse.unit = unit  # type: ignore[attr-defined]
    parse.sign = sign  # type: ignore[attr-defined]
    return parse


# ------------------------------------------------------------------------------------------ the simulated bench
SIM_DEFAULTS: dict[str, Any] = {"fixture": "resistor", "seed": 1, "bag_size": SIM_BAG_SIZE,
                                "time_scale": SIM_TIME_SCALE, "latency": 0.0, "resistor": SIM_SERIES_RESISTOR_OHM,
                                "handling": 0.0, "fault": [], "log": None}

_SIM_FAULT_HELP = (
    "inject a fault, KIND[@ROLE][=VALUE]; ROLE is supply, meter, smu or all (default). Kinds: slow=S[/N] (replies S "
    "seconds late, after N messages), mute=N (no replies after N messages), hang=N (neither executes nor replies "
    "after N messages), drop=N (connection closed at message N), error=HEADER[/CODE] (that command refused with "
    "CODE, default -240), garble=N (N-th reply garbled), open=N / short=N (the part fails open / short after N "
    "readings), pull=N (the operator pulls the N-th part out in the middle of its sweep; with --sim-handling). "
    "Repeat for several.")


def add_sim_options(parser: argparse.ArgumentParser, *names: str, title: str = "simulated bench") -> None:
    """Add the simulator settings ``names`` as ``--sim-<name>`` (same spelling, meaning and default everywhere).

    Every option defaults to None so that a setting given where no simulator runs can be refused;
    :func:`sim_settings` fills in the defaults.
    """
    group = parser.add_argument_group(title)
    specs = {
        "fixture": dict(choices=tuple(Fixture), help="resistor: supply -> series resistor -> part, meter across the "
                                               "part; smu: source-measure unit straight across the part "
                                               "(default resistor)"),
        "seed": dict(type=whole_number, metavar="N", help="seed of the simulated bag, resistor error and noise "
                                                          "(default 1)"),
        "bag_size": dict(type=counting_number, metavar="N",
                         help=f"parts in the simulated bag, labelled Q01... (default {SIM_BAG_SIZE})"),
        "time_scale": dict(type=quantity("", "nonnegative"), metavar="X",
                           help="real seconds slept per second of instrument time: 0 no waiting (default), "
                                "1 real time"),
        "latency": dict(type=quantity("s", "nonnegative"), metavar="S",
                        help="extra real delay before each reply, like a LAN round trip (default 0)"),
        "resistor": dict(type=quantity("ohm"), metavar="OHMS",
                         help=f"nominal series resistor of the resistor fixture (default {SIM_SERIES_RESISTOR_OHM:g})"),
        "handling": dict(type=quantity("s", "nonnegative"), metavar="S",
                         help="simulate an operator: when the output goes off after a sweep the part is taken out "
                              "(the fixture is empty), and the next part of the bag is seated S later (default 0: "
                              "no operator, parts change on SIMulation:PART:NEXT)"),
        "fault": dict(action="append", metavar="SPEC", help=_SIM_FAULT_HELP),
        "log": dict(metavar="FILE", help="append the simulator's log (every command and output change) to FILE "
                                         "as JSON lines"),
    }
    for name in names:
        group.add_argument("--sim-" + name.replace("_", "-"), dest="sim_" + name, default=None, **specs[name])


def sim_settings(args: argparse.Namespace, names: Iterable[str] = tuple(SIM_DEFAULTS)) -> dict[str, Any]:
    """The simulator settings ``names`` from ``args`` (defaults filled in), keyed by name."""
    out = {}
    for name in names:
        value = getattr(args, "sim_" + name, None)
        out[name] = SIM_DEFAULTS[name] if value is None else value
    return out


def refuse_given(args: argparse.Namespace, options: Iterable[str], reason: str) -> None:
    """Refuse options that were given but would have no effect (``reason`` says why), naming the first."""
    for option in options:
        value = getattr(args, option.lstrip("-").replace("-", "_"), None)
        if value is not None and value != [] and value is not False:
            raise InputError(f"{option} {reason}")


def name_options(exc: BenchlabError, options: Mapping[str, str]) -> BenchlabError:
    """Write the option a user typed (``--max-current``) for each internal field name (``max_current_a``)."""
    text = str(exc)
    for field, option in sorted(options.items(), key=lambda kv: -len(kv[0])):
        text = re.sub(rf"\b{re.escape(field)}\b", option, text)
    exc.args = (text,)
    return exc
