"""The one-line verdict every sink design ends with: does it do what it is for, and if not, what to do.

Pure functions on plain numbers. A design is usable as it is when its worst output error is within the mismatch target
(default 5 %), every output stays in saturation, the electro-thermal loop settles and the currents do not follow the
supply by more than a sane figure per volt.
"""

from __future__ import annotations

from typing import Any, Sequence

DEFAULT_MISMATCH_TARGET = 0.05  # worst output error a sink is expected to meet unless told otherwise (our choice)
# above this relative change of current per volt of supply the sink is not a current source worth the name
# (our choice: a 12 V rail moving by 0.5 V would move the currents by more than 2.5 %)
MAX_SUPPLY_SENSITIVITY_PER_V = 0.05
# the smallest current a sweep tells from zero (the sweep plan's default detection current): below it nothing is
# known of the part, a design there is off
MIN_DESIGN_CURRENT_A = 2e-6


def supply_sensitivity(i_ref: float, di_ref_dv: float, outputs: Sequence[Any]) -> float:
    """Largest relative change of the reference or an output current per volt of supply (1/V)."""
    values = [abs(di_ref_dv) / i_ref if i_ref > 0 else 0.0]
    values += [abs(o.di_dvsupply) / o.i_out for o in outputs if o.i_out > 0]
    return max(values)


def sink_verdict(*, worst_error: float, worst_part: str | None, target: float | None, source_resistor: float,
                 in_saturation: bool, runaway: dict | None, sensitivity_per_v: float, at_current: float,
                 outputs: int, spread_worst: float | None = None, resistor_tolerance: float | None = None) -> str:
    """One line: ``usable`` or ``NOT USABLE AS IS`` with every reason and the fix for each.

    Parameters
    ----------
    worst_error : float
        Largest |output error| (fraction).
    worst_part : str or None
        The output with that error.
    target : float or None
        The mismatch target (fraction); None for the default (5 %).
    source_resistor : float
        Degeneration already in the design (ohm).
    in_saturation : bool
        Every output keeps its compliance.
    runaway : dict or None
        The electro-thermal verdict (``runaway``, ``verdict``).
    sensitivity_per_v : float
        :func:`supply_sensitivity` of the design (1/V).
    at_current, outputs : float, int
        The design's current and output count (for the suggested ``design match`` command).
    spread_worst : float or None
        The Monte Carlo's worst output error at its 97.5th percentile (fraction), when one was run: a design that
        meets the target only at nominal values is told so.
    resistor_tolerance : float or None
        The resistors' tolerance the Monte Carlo drew from (fraction), for the note.
    """
    goal = DEFAULT_MISMATCH_TARGET if target is None else target
    problems, good, notes = [], [], []
    if outputs and worst_error > goal:
        fixes = []
        if source_resistor <= 0:
            fixes.append(f"add source resistors with --mismatch-target {goal:g}")
        fixes.append(f"pick a better-matched set (benchlab design match --at-current {at_current:.4g} "
                     f"--outputs {outputs})")
        problems.append(f"misses the {goal * 100:g} % mismatch target: worst output error {worst_error * 100:.1f} % "
                        f"({worst_part}); " + " or ".join(fixes))
    elif outputs:
        good.append(f"meets the {goal * 100:g} % mismatch target (worst {worst_error * 100:.2f} %)")
    if outputs and worst_error <= goal and spread_worst is not None and spread_worst > goal:
        tol = "" if resistor_tolerance is None else f" with +/-{resistor_tolerance * 100:g} % resistors"
        fix = (" (the source resistors set the currents: use 1 % parts, --series E96)"
               if source_resistor > 0 and (resistor_tolerance or 0) > 0.01 else "")
        notes.append(f"the target holds at nominal values only: over the Monte Carlo{tol}, 95 % of builds keep each "
                     f"output within {spread_worst * 100:.1f} %{fix}")
    if not in_saturation:
        problems.append("an output leaves saturation: raise the load voltage or lower the source resistors")
    if runaway and runaway.get("runaway"):
        problems.append("the junctions do not settle (" + str(runaway.get("verdict", "thermal runaway")) +
                        "): heat-sink the parts, add source resistors or lower the power")
    elif runaway is not None:
        good.append("thermally stable at the assumed package and heat sink")
    if sensitivity_per_v > MAX_SUPPLY_SENSITIVITY_PER_V:
        notes.append(f"the currents follow the supply by {sensitivity_per_v * 100:.1f} %/V (over "
                     f"{MAX_SUPPLY_SENSITIVITY_PER_V * 100:g} %/V): regulate the supply, or raise it and the "
                     "resistor with it")
    else:
        good.append(f"supply sensitivity {sensitivity_per_v * 100:.2f} %/V")
    head = ("NOT USABLE AS IS: " + "; ".join(problems)) if problems else ("usable: " + ", ".join(good))
    return head + "".join(f"; note: {n}" for n in notes)
