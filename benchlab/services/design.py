"""Service behind ``benchlab design sink|match|bin``: resolve parts (library or inline), run the design, save.

Parts come from the device library (``--ref``, ``--outputs-from``, ``--outputs N``) or inline
(``--ref-model "vth=2.95,kp=2.5"``, invented values); the design itself is pure code in ``benchlab.design``.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, replace
from typing import Any, Callable, Sequence

import numpy as np

from benchlab.bounds import MAX_WARM_K, check_at_most, check_operating_current
from benchlab.design.matching import MatchedSet, MatchResult, VgsBin, bin_by_vgs, current_grid, match_sets, orientation_errors
from benchlab.design.parts import Part, parse_inline_model, parts_to_arrays
from benchlab.design.sink import SinkDesign, SinkOptions, analyze_sink, check_supply_voltage, synthesize_sink
from benchlab.design.verdict import MIN_DESIGN_CURRENT_A
from benchlab.errors import DesignError, InputError, LibraryError, PartUnavailableError
from benchlab.units import format_si


@dataclass(frozen=True)
class SinkRequest:
    """What ``benchlab design sink`` was asked (plain data, straight from the command line)."""

    supply: float
    current: float | None = None
    resistor: float | None = None
    ref: str | None = None
    out: tuple[str, ...] = ()
    outputs: int | None = None
    ref_model: str | None = None
    out_models: tuple[str, ...] = ()
    lot: str | None = None
    options: SinkOptions = field(default_factory=SinkOptions)
    save: bool = False


def part_from_record(record, lib=None) -> Part:
    """A library :class:`PartRecord` as a design :class:`Part` (it must have a curve); with ``lib`` it carries
    the part's measured thermal values too."""
    if record.params is None:
        raise LibraryError(f"part '{record.spec}' has no fitted or hand-entered curve; fit or enter it first")
    thermal = {}
    if lib is not None:
        from benchlab.library.thermal import measured_thermal

        thermal = measured_thermal(lib, record.id)
    return Part(label=record.label, params=record.params, stderr=dict(record.stderr or {}), lot=record.lot,
                part_id=record.id, thermal=thermal)


def _open(library_path, operator: str | None = None):
    from benchlab.services.library import open_library

    return open_library(library_path, operator=operator)


def _stock(lib, lot: str | None, polarity: str = "N") -> list:
    # in-stock parts of one polarity that have a curve: the only ones design may pick
    return [r for r in lib.parts(lot=lot, state="in_stock") if r.params is not None and r.polarity == polarity]


def _check_request(req: SinkRequest) -> None:
    check_supply_voltage(req.supply)
    if (req.current is None) == (req.resistor is None):
        raise InputError("give exactly one of --at-current (design the resistor) or --resistor (analyse it)")
    if req.current is not None:
        check_operating_current(req.current, "the target current")
    if req.resistor is not None and not req.resistor > 0:
        raise InputError("--resistor must be positive")
    if req.resistor is not None and req.supply / req.resistor < MIN_DESIGN_CURRENT_A:
        # the reference carries less than supply / R: below what a sweep detects nothing is known of the parts
        raise DesignError(f"{req.supply:g} V through {req.resistor:g} ohm carries at most "
                          f"{req.supply / req.resistor:.3g} A, below the {MIN_DESIGN_CURRENT_A * 1e6:g} uA a sweep "
                          "detects: the parts would be off; raise the supply or lower the resistor")
    if req.ref and req.ref_model:
        raise InputError("give the reference either from the library (--ref) or inline (--ref-model), not both")
    picks = sum(bool(x) for x in (req.out, req.out_models, req.outputs is not None))
    if picks > 1:
        raise InputError("give the outputs one way: --outputs-from, --output-model, or --outputs N")
    if req.outputs is not None and req.outputs < 1:
        raise InputError("--outputs must be at least 1")
    if not (req.ref or req.ref_model) and req.outputs is None:
        raise InputError("name a reference (--ref PART or --ref-model) or let the tool pick a set with --outputs N")


def _operating_current(req: SinkRequest, candidates: Sequence[Part]) -> float:
    if req.current is not None:
        return req.current
    # resistor given: estimate the current from the median part on that line (good enough to pick a set)
    vgs = np.array([float(p.params.vgs_at(1e-3)) for p in candidates])
    median = candidates[int(np.argsort(vgs)[len(vgs) // 2])]
    from benchlab.models import solve_resistor_line

    current = solve_resistor_line(median.params, req.supply, req.resistor, req.options.source_resistor_ohm)[1]
    if current < MIN_DESIGN_CURRENT_A:
        # the parts would be off on that line: no set can be picked for it (the designer refuses the same)
        raise DesignError(f"{req.supply:g} V through {req.resistor:g} ohm gives a typical part of the stock about "
                          f"{current:.3g} A, below the {MIN_DESIGN_CURRENT_A * 1e6:g} uA a sweep detects: raise the "
                          "supply or lower the resistor")
    return current


def best_outputs_for(ref: Part, candidates: Sequence[Part], count: int, current: float) -> list[Part]:
    """The ``count`` candidates whose current at the reference's VGS is closest to ``current`` (exact metric)."""
    pool = [p for p in candidates if p.name != ref.name]
    if len(pool) < count:
        raise DesignError(f"only {len(pool)} other part(s) in stock; {count} output(s) asked")
    arrays = parts_to_arrays([ref, *pool])
    errors = orientation_errors(arrays, np.zeros(len(pool), dtype=int), np.arange(1, len(pool) + 1),
                                np.array([current]))[:, 0]
    order = np.argsort(np.abs(errors), kind="stable")[:count]
    return [pool[i] for i in order]


def resolve_parts(req: SinkRequest, lib=None) -> tuple[Part, list[Part], list]:
    """The reference and outputs the request names, and the library records among them (for saving)."""
    records: dict[str, Any] = {}

    def from_library(spec: str) -> Part:
        if lib is None:
            raise InputError("naming parts needs a device library (use --ref-model / --output-model without one)")
        record = lib.get_part(spec)
        if record.polarity != "N":
            raise InputError(f"part '{record.spec}' is {record.polarity}-channel; the sink is built from N-channel parts")
        part = part_from_record(record, lib)
        records[part.name] = record
        return part

    ref = None
    if req.ref_model:
        ref = parse_inline_model(req.ref_model, "REF")
    elif req.ref:
        ref = from_library(req.ref)
    outputs: list[Part] = []
    if req.out_models:
        outputs = [parse_inline_model(text, f"OUT{k}") for k, text in enumerate(req.out_models, start=1)]
    elif req.out:
        outputs = [from_library(s) for s in req.out]
    elif req.outputs is not None:
        if lib is None:
            raise InputError("--outputs N picks parts from the device library; name the library or give parts inline")
        stock_records = _stock(lib, req.lot)
        stock = [part_from_record(r, lib) for r in stock_records]
        by_name = {p.name: r for p, r in zip(stock, stock_records)}
        if ref is not None:
            stock = [p for p in stock if p.name != ref.name]
            current = _operating_current(req, [ref])
            outputs = best_outputs_for(ref, stock, req.outputs, current)
        else:
            if len(stock) < req.outputs + 1:
                raise DesignError(f"{len(stock)} part(s) with curves in stock; a set of {req.outputs + 1} is needed")
            current = _operating_current(req, stock)
            found = match_sets(stock, current_grid(current), req.outputs + 1, count=1).sets
            if not found:  # e.g. a resistor so large the parts barely conduct
                raise DesignError(f"no set of {req.outputs + 1} parts can be matched at {current:.3g} A")
            best = found[0]
            ref = stock[best.ref_index]
            outputs = [stock[i] for i in best.output_indices]
        for p in [ref, *outputs]:
            if p.name in by_name:
                records[p.name] = by_name[p.name]
    return ref, outputs, [records[p.name] for p in [ref, *outputs] if p.name in records]


def sink_netlist_text(design: SinkDesign) -> str:
    """The ngspice netlist (``.op``) of a design, linear parts made exact at their design currents."""
    from benchlab.design.spice import sink_netlist

    return sink_netlist(design.supply, design.r_chosen, design.parts[0], design.parts[1:], design.load_voltage,
                        source_resistor_ohm=design.source_resistor,
                        operating_currents=[design.i_ref, *(o.i_out for o in design.outputs)])


def _with_range_caution(design: SinkDesign, lib, records) -> SinkDesign:
    """Add a caution when a library part works at a current outside the range its curve was fitted on."""
    if lib is None or not records:
        return design
    currents = {design.ref: design.i_ref, **{o.part: o.i_out for o in design.outputs}}
    outside = []
    for record in records:
        current = currents.get(record.spec)
        if current is None or record.fit_id is None:
            continue
        window = lib.fit_window(record.fit_id)
        if window is None:
            continue  # hand-entered or imported without a fit window: nothing to compare with
        i_min, i_max = window
        if current > i_max or current < i_min:
            outside.append(f"{record.spec} at {format_si(current, 'A')} (fitted on {format_si(i_min, 'A')} .. {format_si(i_max, 'A')})")
    if not outside:
        return design
    caution = ("Outside the measured range: " + "; ".join(outside) + ". There the curve is an extrapolation of the "
               "fit, not a measurement; sweep these parts up to the design current (within their power rating, "
               "with the heat sink they will have) before trusting these numbers.")
    cautions = list(design.cautions)
    cautions.insert(max(len(cautions) - 1, 0), caution)  # the closing estimate-and-codes caution stays last
    return replace(design, cautions=tuple(cautions))


def recorded_sink_netlist(library_path: str | os.PathLike | None, design_id: int,
                          taken_names: Sequence[str] = ()) -> str:
    """The ngspice netlist of a sink design recorded in the library (``benchlab export spice --design``).

    Rebuilt from the parts, resistors and voltages stored with the design, so it is the netlist
    ``benchlab design sink --spice`` wrote when the design was made.

    Raises
    ------
    LibraryError
        When the library holds no such design, or the design is not a current sink.
    """
    from benchlab.design.spice import sink_netlist
    from benchlab.services.library import open_library

    with open_library(library_path) as lib:
        stored = lib.design(int(design_id))
    if stored.get("kind") != "sink" or not stored.get("parts"):
        raise LibraryError(f"design {design_id} is not a current-sink design: no netlist to export")
    try:
        parts = [Part.from_dict(p) for p in stored["parts"]]
        currents = [float(stored["i_ref"]), *(float(o["i_out"]) for o in stored["outputs"])]
        return sink_netlist(float(stored["supply"]), float(stored["r_chosen"]), parts[0], parts[1:],
                            float(stored["load_voltage"]), source_resistor_ohm=float(stored["source_resistor"]),
                            operating_currents=currents, title=f"benchlab current sink, design {int(design_id)}",
                            taken_names=taken_names)
    except (KeyError, TypeError, ValueError) as exc:
        raise LibraryError(f"design {design_id} is stored without what a netlist needs ({exc})") from exc


RESERVE_ATTEMPTS = 5  # searches for a set when other engineers keep taking parts from under this one


def design_sink(req: SinkRequest, library_path: str | os.PathLike | None = None, *,
                spice_path: str | None = None, operator: str | None = None) -> tuple[SinkDesign, int | None]:
    """Run ``benchlab design sink``: returns the design and, with ``save``, the library design id.

    The library is opened only when parts are named from it (or ``save`` is asked). With
    ``spice_path`` the design's netlist is written there. Every check runs before anything is
    written: a request that fails writes no file and reserves no part. When the tool picked the parts
    (``--outputs N``) and another engineer reserves one of them first, the search runs again on what is
    left, and the design's cautions say which part was taken by which design.
    """
    _check_request(req)
    needs_library = bool(req.ref or req.out or req.outputs is not None or req.save)
    lib = _open(library_path, operator) if needs_library else None
    taken: list[str] = []
    try:
        for attempt in range(RESERVE_ATTEMPTS):
            ref, outputs, records = resolve_parts(req, lib)
            if req.current is not None:
                design = synthesize_sink(req.supply, req.current, ref, outputs, req.options)
            else:
                design = analyze_sink(req.supply, req.resistor, ref, outputs, req.options)
            design = _with_range_caution(design, lib, records)
            if taken:
                design = replace(design, cautions=(*taken, *design.cautions))
            if req.save:
                if len(records) != 1 + len(outputs):
                    raise InputError("--save records the design in the library and reserves its parts: every part "
                                     "must come from the library (not --ref-model / --output-model); nothing was saved")
                busy = [r for r in records if r.state != "in_stock"]
                if busy:
                    raise lib.design_store.unavailable(busy[0])
            if spice_path:
                write_text(spice_path, sink_netlist_text(design))
            if not req.save:
                return design, None
            try:
                return design, lib.record_design(dict(design.to_dict(), kind="sink"), records, state="reserved")
            except PartUnavailableError as exc:
                if req.outputs is None or attempt == RESERVE_ATTEMPTS - 1:
                    raise  # named parts: the engineer chose them, so say so rather than pick others
                taken.append(_taken_note(exc))
        raise AssertionError("unreachable")
    finally:
        if lib is not None:
            lib.close()


def _taken_note(exc: PartUnavailableError) -> str:
    return str(exc).replace("; the design was not saved", "") + "; the set was searched again on what is left"


@dataclass(frozen=True)
class ReservedMatch:
    """A matched set recorded as a design (its parts reserved): the search that found it and what happened."""

    design_id: int
    result: MatchResult
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"design_id": self.design_id, **self.result.to_dict(), "notes": list(self.notes)}


def reserve_set(library_path, matched: MatchedSet, *, currents: Sequence[float] = (),
                operator: str | None = None) -> int:
    """Record one matched set found earlier (e.g. picked from a list on screen) as a design and reserve its
    parts, all or nothing.

    Raises
    ------
    PartUnavailableError
        When one of its parts was reserved or used since the search (naming the design that took it, when
        and by whom); nothing is reserved then, and the caller searches again on what is left.
    """
    names = [matched.ref, *matched.outputs]
    design = {"kind": "match", "currents": [float(c) for c in currents], "size": len(names),
              "set": matched.to_dict(), "sets": [names]}
    with _open(library_path, operator) as lib:
        return lib.record_design(design, names, state="reserved")


def reserve_match(library_path, current: float, size: int, *, current_max: float | None = None,
                  lot: str | None = None, polarity: str = "N", operator: str | None = None,
                  confirm: Callable[[MatchResult], bool] | None = None) -> ReservedMatch:
    """Run ``benchlab design match --save``: find the best set among the in-stock parts and reserve it.

    When another engineer reserves one of its parts between the search and the reservation, the
    library refuses the whole set (naming the part, the design that took it and when) and the search
    runs again on what is left, up to ``RESERVE_ATTEMPTS`` times.

    Parameters
    ----------
    confirm : callable, optional
        Called with each search's result before its best set is reserved (a UI asks the engineer here);
        returning False reserves nothing and raises ``DesignError``.

    Returns
    -------
    ReservedMatch
        The design id, the search that found the reserved set (its first set), and one note per retry.
    """
    currents = current_grid(current, current_max)
    notes: list[str] = []
    with _open(library_path, operator) as lib:
        for attempt in range(RESERVE_ATTEMPTS):
            records = _stock(lib, lot, polarity)
            stock = [part_from_record(r) for r in records]
            if len(stock) < size:
                where = f" in lot '{lot}'" if lot else ""
                raise DesignError(f"{len(stock)} in-stock part(s) with curves{where}; a set needs {size}"
                                  + (" (" + "; ".join(notes) + ")" if notes else ""))
            result = match_sets(stock, currents, size, count=1)
            if not result.sets:
                raise DesignError(f"no set of {size} could be formed from the {len(stock)} in-stock part(s)")
            if confirm is not None and not confirm(result):
                raise DesignError("the set was not confirmed; nothing was reserved")
            best = result.sets[0]
            chosen = [records[best.ref_index], *(records[i] for i in best.output_indices)]
            design = {"kind": "match", "currents": list(result.currents), "size": size, "method": result.method,
                      "objective": result.objective, "set": best.to_dict(),
                      "sets": [[best.ref, *best.outputs]], "notes": list(notes)}
            try:
                design_id = lib.record_design(design, chosen, state="reserved")
            except PartUnavailableError as exc:
                if attempt == RESERVE_ATTEMPTS - 1:
                    raise
                notes.append(_taken_note(exc))
                continue
            return ReservedMatch(design_id=design_id, result=result, notes=tuple(notes))
    raise AssertionError("unreachable")


def match_parts(library_path, current: float, size: int, *, current_max: float | None = None,
                lot: str | None = None, count: int | None = None, polarity: str = "N",
                warm_k: float = 0.0) -> MatchResult:
    """Run ``benchlab design match`` on the in-stock parts of the library (one polarity); ``warm_k`` makes the
    threshold temperature coefficient a criterion (see :func:`benchlab.design.matching.match_sets`)."""
    currents = current_grid(current, current_max)
    if count is not None and count < 1:
        raise InputError("--sets must be at least 1")
    check_at_most(warm_k, MAX_WARM_K, "the warm step", "K")
    with _open(library_path) as lib:
        stock = [part_from_record(r, lib) for r in _stock(lib, lot, polarity)]
    if len(stock) < size:
        where = f" in lot '{lot}'" if lot else ""
        raise DesignError(f"{len(stock)} in-stock part(s) with curves{where}; a set needs {size}")
    return match_sets(stock, currents, size, count, warm_k=warm_k)


def bin_parts(library_path, current: float, width: float, *, lot: str | None = None,
              save: bool = False) -> tuple[tuple[VgsBin, ...], int | None]:
    """Run ``benchlab design bin``: VGS windows at ``current``; with ``save`` the binning is stored."""
    with _open(library_path) as lib:
        stock = [part_from_record(r) for r in lib.parts(lot=lot, state="in_stock") if r.params is not None]
        if not stock:
            raise DesignError("no in-stock parts with curves to bin" + (f" in lot '{lot}'" if lot else ""))
        bins = bin_by_vgs(stock, current, width)
        binning_id = None
        if save:
            members = {f"{b.low:.4f}-{b.high:.4f}": list(b.parts) for b in bins if b.count}
            binning_id = lib.record_binning({"current": current, "width": width, "lot": lot, "by": "vgs"}, members)
    return bins, binning_id


def write_text(path: str, text: str) -> None:
    """Write ``text`` to ``path`` (via a temporary file, so a failed write leaves nothing half-written)."""
    from benchlab.services.library import write_output

    write_output(text, path)
