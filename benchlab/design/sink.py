"""Current-sink design: a diode-connected reference fed through a resistor, outputs sharing its gate.

Synthesis (:func:`synthesize_sink`): from supply, target current and parts, solve the reference
for VGS, compute the exact resistor, take the nearest preferred value (E24 by default) and
recompute everything with it. Analysis (:func:`analyze_sink`): from supply, resistor and parts,
solve the operating point exactly. Both report per output: current, error vs the reference,
compliance, dissipation, supply sensitivity, temperature drift, optionally a Monte Carlo spread,
and the cautions with this design's numbers.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Sequence

from benchlab.bounds import check_operating_current
from benchlab.design.cautions import OutputHeat, sink_cautions
from benchlab.design.eseries import nearest_preferred, series_decade, series_tolerance, series_values
from benchlab.design.mirror import output_in_circuit, resistor_for_current, solve_mirror
from benchlab.design.montecarlo import run_monte_carlo
from benchlab.design.parts import Part
from benchlab.design.part_thermal import DEFAULT_VTH_TEMPCO, loop_gain, thermal_values, ztc_position
from benchlab.design.thermal import self_heated_point
from benchlab.design.verdict import MIN_DESIGN_CURRENT_A, sink_verdict, supply_sensitivity
from benchlab.errors import DesignError, InputError


# The highest supply or load voltage the designer accepts: the top of the low-voltage range (1500 V DC in IEC 60038
# and the EU Low Voltage Directive, from memory). Above it insulation, clearances and licensed practice decide, not
# a fitted curve; it also keeps absurd entries (1e300 V) from becoming a saved design.
MAX_SINK_VOLTAGE_V = 1500.0
# Monte Carlo draws: a percentile's sampling error falls as 1/sqrt(N), so past a million draws the printed 95 % band
# no longer moves, while time and memory grow with N (1e6 draws of a 1 + 2 sink: about 6 s and 0.4 GB; 1e8 ran out
# of memory instead of ending with an answer).
MAX_MONTE_CARLO = 1_000_000


def check_supply_voltage(supply_v: float) -> None:
    """Refuse a supply the designer does not handle (not a positive number up to ``MAX_SINK_VOLTAGE_V``)."""
    if not (isinstance(supply_v, (int, float)) and 0 < supply_v <= MAX_SINK_VOLTAGE_V):
        raise InputError(f"the supply must be a positive voltage up to {MAX_SINK_VOLTAGE_V:g} V (got {supply_v!r})")

@dataclass(frozen=True)
class SinkOptions:
    """Design choices; every default is stated in the result.

    Parameters
    ----------
    series : str
        E-series for the resistors (E24 default, E96 for 1 % parts).
    load_voltage : float or None
        Voltage across each output (drain to ground) for dissipation and compliance; None means
        the supply voltage (the load drops nothing: the worst case for dissipation).
    source_resistor_ohm : float
        Degeneration resistor in every source (0: none).
    mismatch_target : float or None
        If set, the smallest preferred source resistor that brings the worst |error| under it
        is found and used (overrides ``source_resistor_ohm``).
    compliance_margin_v : float
        Added to VGS - Vth (+ I Rs) in the compliance voltage.
    vth_tempco : float
        Threshold temperature coefficient (V/K) for the drift figures.
    delta_t_k : float
        Temperature step for the drift figures (K).
    monte_carlo : int
        Number of Monte Carlo samples (0: none).
    seed : int
        Monte Carlo seed.
    resistor_tolerance : float or None
        Tolerance band of the resistors (None: the one usually sold with the series).
    thermal_resistance : float or None
        Thermal resistance of each part without a measured one (K/W; default the 62 K/W package assumption).
        When set, or when any part has a measured Rth, or a heat sink is given, the steady state with every
        part at its own self-heated temperature is solved too.
    heatsink_k_per_w : float
        Heat sink added to every part's own thermal resistance (K/W).

    Parts with measured thermal values (``Part.thermal``) use them; the others use ``vth_tempco``, the
    KP ~ T^-1.5 law and the thermal resistance above, and the design says which value came from where.
    """

    series: str = "E24"
    load_voltage: float | None = None
    source_resistor_ohm: float = 0.0
    mismatch_target: float | None = None
    compliance_margin_v: float = 0.2
    vth_tempco: float = -5e-3
    delta_t_k: float = 25.0
    monte_carlo: int = 0
    seed: int = 1
    resistor_tolerance: float | None = None
    thermal_resistance: float | None = None
    heatsink_k_per_w: float = 0.0

    def validated(self) -> "SinkOptions":
        """These options, after checking every value (an ``InputError`` names the first bad one)."""
        series_decade(self.series)
        if self.source_resistor_ohm < 0:
            raise InputError("the source (degeneration) resistor must be >= 0 ohm")
        if self.mismatch_target is not None and not 0 < self.mismatch_target < 1:
            raise InputError("the mismatch target is a fraction between 0 and 1 (0.01 for 1 %)")
        if self.monte_carlo < 0 or self.monte_carlo == 1:
            raise InputError("the Monte Carlo needs 0 (off) or at least 2 samples")
        if self.monte_carlo > MAX_MONTE_CARLO:
            raise InputError(f"the number of Monte Carlo samples must be at most {MAX_MONTE_CARLO:,} (got {self.monte_carlo:,})")
        if self.load_voltage is not None and not 0 <= self.load_voltage <= MAX_SINK_VOLTAGE_V:
            raise InputError(f"the load voltage must be between 0 and {MAX_SINK_VOLTAGE_V:g} V")
        if self.resistor_tolerance is not None and not 0 <= self.resistor_tolerance < 1:
            raise InputError("the resistor tolerance is a fraction between 0 and 1")
        if self.thermal_resistance is not None and not self.thermal_resistance > 0:
            raise InputError("the thermal resistance must be a positive number of K/W")
        if not self.heatsink_k_per_w >= 0:
            raise InputError("the heat-sink figure must be 0 K/W or more")
        return self


@dataclass(frozen=True)
class OutputResult:
    """One output of the sink (currents in A, voltages in V, powers in W, drifts relative)."""

    part: str
    i_out: float
    error: float
    vgs: float
    v_compliance: float
    in_compliance: bool
    p_part: float
    p_source_resistor: float
    di_dvsupply: float
    drift_per_k: float
    tc_fixed_vgs: float
    region: str = "saturation"
    ztc: str = ""  # where its operating point lies against its ZTC point
    loop_gain: float = 0.0  # electro-thermal loop gain at a fixed gate voltage (above 1: runaway)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (SI units)."""
        return dict(self.__dict__)


@dataclass(frozen=True)
class SinkDesign:
    """A designed (or analysed) current sink; ``to_dict()`` is the ``--json`` output."""

    mode: str
    supply: float
    i_target: float | None
    r_exact: float | None
    r_chosen: float
    series: str
    resistor_tolerance: float
    source_resistor: float
    vg: float
    vgs: float
    i_ref: float
    ref: str
    load_voltage: float
    compliance_margin: float
    p_ref: float
    p_resistor: float
    di_ref_dvsupply: float
    drift_ref_per_k: float
    vth_tempco: float
    outputs: tuple[OutputResult, ...]
    cautions: tuple[str, ...]
    parts: tuple[Part, ...] = field(repr=False)
    monte_carlo: dict | None = None
    degeneration: dict | None = None
    self_heating: dict | None = None
    thermal: tuple[dict, ...] = ()  # each part's thermal values and their sources (reference first)
    runaway: dict | None = None  # the electro-thermal verdict
    verdict: str = ""  # one line: usable, or not and what to do (benchlab.design.verdict)

    @property
    def worst_error(self) -> float:
        """Largest |error| among the outputs (0 with no outputs)."""
        return max((abs(o.error) for o in self.outputs), default=0.0)

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (SI units)."""
        data = {k: getattr(self, k) for k in (
            "mode", "supply", "i_target", "r_exact", "r_chosen", "series", "resistor_tolerance", "source_resistor",
            "vg", "vgs", "i_ref", "ref", "load_voltage", "compliance_margin", "p_ref", "p_resistor",
            "di_ref_dvsupply", "drift_ref_per_k", "vth_tempco")}
        data["worst_error"] = self.worst_error
        data["outputs"] = [o.to_dict() for o in self.outputs]
        data["cautions"] = list(self.cautions)
        data["parts"] = [p.to_dict() for p in self.parts]
        data["monte_carlo"] = self.monte_carlo
        data["degeneration"] = self.degeneration
        data["self_heating"] = self.self_heating
        data["thermal"] = list(self.thermal)
        data["runaway"] = self.runaway
        data["verdict"] = self.verdict
        return data


def _check_parts(ref: Part, outputs: Sequence[Part]) -> None:
    names = [ref.name, *(p.name for p in outputs)]
    if len(set(names)) != len(names):
        raise InputError("a part cannot be used twice in one sink (reference and outputs must differ)")


def _supply_sensitivity(ref: Part, outputs: Sequence[Part], i_ref: float, i_outs: Sequence[float],
                        r: float, rs: float) -> tuple[float, list[float]]:
    # Vs = I (R + Rs) + VGS(I): dI/dVs = 1 / (R + Rs + 1/gm); outputs follow the gate node.
    inv_gm_ref = 1.0 / float(ref.params.gm_at(i_ref))
    d_ref = 1.0 / (r + rs + inv_gm_ref)
    dvg = (inv_gm_ref + rs) * d_ref
    d_out = []
    for part, i_out in zip(outputs, i_outs):
        gm = float(part.params.gm_at(i_out)) if i_out > 0 else 0.0
        d_out.append(dvg / (1.0 / gm + rs) if gm > 0 else 0.0)
    return d_ref, d_out


def analyze_sink(supply_v: float, resistor_ohm: float, ref: Part, outputs: Sequence[Part],
                 options: SinkOptions = SinkOptions(), *, i_target: float | None = None,
                 r_exact: float | None = None) -> SinkDesign:
    """Exact operating point and figures of a sink with a given resistor.

    Parameters
    ----------
    supply_v : float
        Supply of the reference branch (V).
    resistor_ohm : float
        Reference branch resistor (ohm).
    ref : Part
        Diode-connected reference part.
    outputs : sequence of Part
        Output parts.
    options : SinkOptions
        Load voltage, degeneration, temperature and Monte Carlo settings.
    i_target, r_exact : float, optional
        Filled in by :func:`synthesize_sink` (None for a plain analysis).

    Returns
    -------
    SinkDesign
    """
    check_supply_voltage(supply_v)
    options = options.validated()
    _check_parts(ref, outputs)
    rs = float(options.source_resistor_ohm)
    load_v = supply_v if options.load_voltage is None else float(options.load_voltage)
    out_params = [p.params for p in outputs]
    point = solve_mirror(supply_v, resistor_ohm, ref.params, out_params, rs, drain_v=load_v)
    if point.i_ref < MIN_DESIGN_CURRENT_A:
        # below what a sweep can tell from zero the part is off: its curve there is an extrapolation, not data
        raise DesignError(f"the reference part {ref.name} carries only {point.i_ref:.3g} A on {supply_v:g} V through "
                          f"{resistor_ohm:g} ohm, below the {MIN_DESIGN_CURRENT_A * 1e6:g} uA a sweep detects: it is "
                          f"off (its threshold is about {ref.params.vth:.2f} V); raise the supply or lower the resistor")
    d_ref, d_outs = _supply_sensitivity(ref, outputs, point.i_ref, point.i_out, resistor_ohm, rs)
    if any(region != "saturation" for region in point.regions):
        # below saturation the closed form does not hold: central difference on the exact solve
        h = 1e-5 * supply_v
        up = solve_mirror(supply_v + h, resistor_ohm, ref.params, out_params, rs, drain_v=load_v)
        down = solve_mirror(supply_v - h, resistor_ohm, ref.params, out_params, rs, drain_v=load_v)
        d_outs = [d if region == "saturation" else (u - w) / (2 * h)
                  for d, region, u, w in zip(d_outs, point.regions, up.i_out, down.i_out)]

    tempco_source = "" if options.vth_tempco == DEFAULT_VTH_TEMPCO else "option --vth-tempco"
    tvals = [thermal_values(p.name, p.params, p.thermal, vth_tempco=options.vth_tempco,
                            vth_tempco_source=tempco_source, rth=options.thermal_resistance,
                            heatsink=options.heatsink_k_per_w) for p in (ref, *outputs)]
    # Everything at +delta_t: resistors assumed not to drift, all parts at the same temperature, each with its
    # own coefficients.
    hot = [tv.at(p.params, p.params.temperature_k + options.delta_t_k) for p, tv in zip((ref, *outputs), tvals)]
    hot_point = solve_mirror(supply_v, resistor_ohm, hot[0], hot[1:], rs, drain_v=load_v)
    drift_ref = (hot_point.i_ref / point.i_ref - 1.0) / options.delta_t_k

    results = []
    heat = []
    for k, part in enumerate(outputs):
        i_out, vgs = point.i_out[k], point.vgs_out[k]
        compliance = max(vgs - part.params.vth, 0.0) + i_out * rs + options.compliance_margin_v
        p_rs = i_out * i_out * rs
        # one output warming alone by 1 K at a fixed gate voltage (its own self-heating)
        tv = tvals[1 + k]
        warm = tv.at(part.params, part.params.temperature_k + 1.0)
        i_warm = output_in_circuit(warm, point.vg, rs, load_v)[0]
        tc = (i_warm / i_out - 1.0) if i_out > 0 else 0.0
        drift = (hot_point.i_out[k] / i_out - 1.0) / options.delta_t_k if i_out > 0 else 0.0
        result = OutputResult(part=part.name, i_out=i_out, error=i_out / point.i_ref - 1.0, vgs=vgs,
                              v_compliance=compliance, in_compliance=load_v >= compliance,
                              p_part=max(load_v - i_out * rs, 0.0) * i_out, p_source_resistor=p_rs,
                              di_dvsupply=d_outs[k], drift_per_k=drift, tc_fixed_vgs=tc, region=point.regions[k],
                              ztc=ztc_position(tv, vgs),
                              loop_gain=loop_gain(tv, tc, i_out, max(load_v - i_out * rs, 0.0)))
        results.append(result)
        heat.append(OutputHeat(part.name, result.p_part, tc, result.in_compliance, compliance))

    p_ref = point.vgs_ref * point.i_ref
    p_resistor = point.i_ref ** 2 * resistor_ohm
    p_sources = point.i_ref ** 2 * rs + sum(r.p_source_resistor for r in results)
    tolerance = series_tolerance(options.series) if options.resistor_tolerance is None else options.resistor_tolerance
    self_heating = None
    if (options.thermal_resistance is not None or options.heatsink_k_per_w
            or any("rth" in p.thermal for p in (ref, *outputs))):
        self_heating = self_heated_point(supply_v, resistor_ohm, ref.params, [p.params for p in outputs], load_v,
                                         [tv.rth for tv in tvals], source_resistor_ohm=rs,
                                         vth_tempco=[tv.vth_tempco for tv in tvals],
                                         kp_exponent=[tv.kp_exponent for tv in tvals])
    runaway = _runaway_verdict(results, self_heating)
    cautions = sink_cautions(supply_v=supply_v, load_voltage=load_v, p_ref=p_ref, p_resistor=p_resistor,
                             r_chosen=resistor_ohm, outputs=heat, p_source_resistors=p_sources,
                             self_heating=self_heating, output_names=[p.name for p in outputs])
    monte_carlo = None
    if options.monte_carlo:
        monte_carlo = run_monte_carlo(supply_v, resistor_ohm, ref, outputs, samples=options.monte_carlo,
                                      seed=options.seed, resistor_tolerance=tolerance,
                                      source_resistor_ohm=rs).to_dict()
    worst = max(results, key=lambda r: abs(r.error), default=None)
    verdict = sink_verdict(worst_error=abs(worst.error) if worst else 0.0, worst_part=worst.part if worst else None,
                           target=options.mismatch_target, source_resistor=rs,
                           in_saturation=all(r.in_compliance for r in results), runaway=runaway,
                           sensitivity_per_v=supply_sensitivity(point.i_ref, d_ref, results),
                           at_current=point.i_ref, outputs=len(results),
                           spread_worst=monte_carlo["worst_error_p97_5"] if monte_carlo else None,
                           resistor_tolerance=tolerance)
    return SinkDesign(
        mode="synthesis" if i_target is not None else "analysis", supply=float(supply_v), i_target=i_target,
        r_exact=r_exact, r_chosen=float(resistor_ohm), series=options.series.upper(), resistor_tolerance=tolerance,
        source_resistor=rs, vg=point.vg, vgs=point.vgs_ref, i_ref=point.i_ref, ref=ref.name, load_voltage=load_v,
        compliance_margin=options.compliance_margin_v, p_ref=p_ref, p_resistor=p_resistor, di_ref_dvsupply=d_ref,
        drift_ref_per_k=drift_ref, vth_tempco=options.vth_tempco, outputs=tuple(results), cautions=cautions,
        parts=(ref, *outputs), monte_carlo=monte_carlo,
        self_heating=self_heating.to_dict() if self_heating is not None else None,
        thermal=tuple(tv.to_dict() for tv in tvals), runaway=runaway, verdict=verdict)


def _runaway_verdict(results: Sequence[OutputResult], self_heating) -> dict[str, Any]:
    """Runaway when any output's electro-thermal loop gain reaches 1 or the self-heated solve does not settle."""
    worst = max(results, key=lambda r: r.loop_gain, default=None)
    gain = worst.loop_gain if worst is not None else 0.0
    solved = self_heating is not None and self_heating.runaway
    runaway = gain >= 1.0 or solved
    why = (f"loop gain {gain:.2f} at {worst.part}" if worst is not None else "no outputs")
    if solved:
        why += "; the self-heated steady state does not settle"
    return {"runaway": bool(runaway), "worst_loop_gain": gain, "part": worst.part if worst else None,
            "verdict": ("THERMAL RUNAWAY: " if runaway else "thermally stable: ") + why}


def _synthesize_once(supply_v: float, target_a: float, ref: Part, outputs: Sequence[Part],
                     options: SinkOptions) -> SinkDesign:
    r_exact, _ = resistor_for_current(supply_v, target_a, ref.params, options.source_resistor_ohm)
    r_chosen = nearest_preferred(r_exact, options.series)
    return analyze_sink(supply_v, r_chosen, ref, outputs, options, i_target=target_a, r_exact=r_exact)


def _holds_over_spread(supply_v: float, design: SinkDesign, ref: Part, outputs: Sequence[Part],
                       options: SinkOptions, source_resistor_ohm: float) -> bool:
    """With a Monte Carlo asked for, a source resistor is good enough only when 95 % of builds (resistor tolerance
    and fit errors drawn) keep every output within the mismatch target, not just the nominal values."""
    if not options.monte_carlo or options.mismatch_target is None:
        return True
    tolerance = series_tolerance(options.series) if options.resistor_tolerance is None else options.resistor_tolerance
    spread = run_monte_carlo(supply_v, design.r_chosen, ref, outputs, samples=options.monte_carlo, seed=options.seed,
                             resistor_tolerance=tolerance, source_resistor_ohm=source_resistor_ohm)
    return spread.worst_error_p97_5 <= options.mismatch_target


def synthesize_sink(supply_v: float, target_a: float, ref: Part, outputs: Sequence[Part],
                    options: SinkOptions = SinkOptions()) -> SinkDesign:
    """Design the sink for a target current: exact resistor, nearest preferred value, recomputed.

    With ``options.mismatch_target`` the smallest preferred source resistor (same series,
    from 0.1 ohm up) that brings the worst output error under the target is found and used;
    with ``options.monte_carlo`` too, it must also hold for 95 % of the drawn builds (resistor
    tolerance and fit errors), not only at nominal values. The search and its outcome are
    reported in ``degeneration``.

    Parameters
    ----------
    supply_v : float
        Supply of the reference branch (V).
    target_a : float
        Wanted reference current (A).
    ref, outputs : Part
        The reference and output parts.
    options : SinkOptions

    Returns
    -------
    SinkDesign
    """
    check_supply_voltage(supply_v)
    check_operating_current(target_a, "the target current")
    options = options.validated()
    _check_parts(ref, outputs)
    if options.mismatch_target is None:
        return _synthesize_once(supply_v, target_a, ref, outputs, options)
    target = options.mismatch_target
    cheap = replace(options, monte_carlo=0, thermal_resistance=None)
    plain = _synthesize_once(supply_v, target_a, ref, outputs, replace(cheap, source_resistor_ohm=0.0))
    tried = [(0.0, plain.worst_error)]
    chosen = 0.0 if plain.worst_error <= target else None
    nominal, over_spread = None, False
    if chosen is not None:
        if _holds_over_spread(supply_v, plain, ref, outputs, options, 0.0):
            over_spread = bool(options.monte_carlo)
        else:
            nominal, chosen = 0.0, None  # met at nominal values only: look for a source resistor that holds
    out_of_compliance = None  # first source resistor whose drop takes an output out of saturation
    if chosen is None:
        # largest Rs the supply can afford at the target current (the reference still needs its VGS)
        limit = (supply_v - float(ref.params.vgs_at(target_a))) / target_a
        for rs in series_values(options.series, 0.1, max(limit, 0.1)):
            try:
                design = _synthesize_once(supply_v, target_a, ref, outputs, replace(cheap, source_resistor_ohm=rs))
            except DesignError:
                break
            if not all(o.in_compliance for o in design.outputs):
                # the source drop only grows with Rs: no larger value can keep the outputs in saturation
                # (and for laws without a triode form the error there would be a fiction)
                out_of_compliance = rs
                break
            tried.append((rs, design.worst_error))
            if design.worst_error <= target:
                nominal = rs if nominal is None else nominal
                if _holds_over_spread(supply_v, design, ref, outputs, options, rs):
                    chosen, over_spread = rs, bool(options.monte_carlo)
                    break
    if chosen is None and nominal is not None:
        # no value holds for 95 % of the builds (e.g. 5 % resistors setting the currents): take the smallest that
        # meets the target at nominal values; the verdict says it holds at nominal values only
        chosen = nominal
    if chosen is None:
        best_rs, best_err = min(tried, key=lambda t: t[1])
        why = ""
        load_v = supply_v if options.load_voltage is None else float(options.load_voltage)
        if not all(o.in_compliance for o in plain.outputs):
            why = f"; with {load_v:g} V across each output they are out of saturation even without a source resistor"
        elif out_of_compliance is not None:
            why = (f"; with {load_v:g} V across each output, {out_of_compliance:g} ohm or more in the source "
                   "takes the outputs out of saturation")
        raise DesignError(f"no {options.series.upper()} source resistor brings the worst mismatch under "
                          f"{target * 100:g} % at {target_a:g} A from {supply_v:g} V (best {best_err * 100:.2f} % "
                          f"with {best_rs:g} ohm{why})")
    final = _synthesize_once(supply_v, target_a, ref, outputs, replace(options, source_resistor_ohm=chosen))
    suggestion = {"target": target, "suggested_ohm": chosen, "worst_error": final.worst_error,
                  "worst_error_without": plain.worst_error, "tried": len(tried),
                  "over_spread": over_spread}
    return replace(final, degeneration=suggestion)
