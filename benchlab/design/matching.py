"""Matched sets from a bag of measured parts, and VGS binning.

The metric (for a reference part r and an output part o): at each current I of the operating
range, the output's current at the reference's gate voltage, relative to I,

    e(r, o, I) = I_o(VGS_r(I)) / I - 1,

using each part's whole fitted curve (not only its threshold). The error of a set is the
largest |e| over its outputs and over the currents of the range (a log-spaced grid of
``points`` currents including both ends; a single current when no range is given).

Pairs (:func:`match_pairs`): the cost of a pair is the smaller of its two orientations (either
part may be the reference). Selection is greedy-lexicographic and exactly optimal for that
objective: the first pair has the smallest cost of all pairs in the bag, the second the
smallest among the remaining parts, and so on. Speed comes from sorting the parts by VGS at
one current of the range and costing only near neighbours; a proven lower bound on every pair
left out (from the convexity of all drain-current laws in VGS) decides when a window is wide
enough, and the window grows until it is. The tests check it against brute force.

Sets of a reference and N >= 2 outputs (:func:`match_sets`): heuristic. Each free part is tried
as reference with the N outputs of smallest error among its N + 2 neighbours on each side in
VGS order; sets are taken best first while their parts are free, then the remaining parts are
re-sorted and the search repeats. When the error grows with the VGS distance from the
reference (e.g. equal KP at a single current) the first set is the exact optimum.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any, Sequence

import numpy as np

from benchlab.bounds import MAX_GATE_V, MAX_WARM_K, check_at_most, check_operating_current
from benchlab.design.parts import Part, PartArrays, parts_to_arrays
from benchlab.design.verdict import MIN_DESIGN_CURRENT_A
from benchlab.errors import InputError

DEFAULT_RANGE_POINTS = 7


def current_grid(i_min: float, i_max: float | None = None, points: int = DEFAULT_RANGE_POINTS) -> np.ndarray:
    """Currents at which sets are compared: ``i_min`` alone, or ``points`` log-spaced from i_min to i_max."""
    i_min = check_operating_current(i_min)
    if i_max is not None:
        i_max = check_operating_current(i_max, "the top of the current range")
    if i_max is None or i_max == i_min:
        return np.array([float(i_min)])
    if not i_max > i_min:
        raise InputError(f"the top of the current range ({i_max} A) must be above its bottom ({i_min} A)")
    return np.geomspace(i_min, i_max, max(int(points), 2))


def orientation_errors(arrays: PartArrays, ref, out, currents: np.ndarray, vgs_table: np.ndarray | None = None):
    """Errors e(ref[k], out[k], I) for index arrays ``ref``/``out``, shape (len(ref), len(currents)).

    ``vgs_table`` (parts x currents, from :func:`vgs_table`) saves solving VGS again.
    """
    ref = np.asarray(ref)
    out = np.asarray(out)[:, None]
    currents = np.asarray(currents, dtype=float)[None, :]
    vgs = vgs_table[ref] if vgs_table is not None else arrays.vgs_at(currents, ref[:, None])
    return arrays.current(vgs, out) / currents - 1.0


def vgs_table(arrays: PartArrays, currents: np.ndarray) -> np.ndarray:
    """VGS of every part at every current of the grid, shape (parts, currents)."""
    currents = np.asarray(currents, dtype=float)
    return arrays.vgs_at(currents[None, :], np.arange(len(arrays))[:, None])


def signed_worst(errors: np.ndarray) -> np.ndarray:
    """The entry of largest magnitude along the last axis, with its sign."""
    pick = np.argmax(np.abs(errors), axis=-1)
    return np.take_along_axis(errors, pick[..., None], axis=-1)[..., 0]


def pair_costs(arrays: PartArrays, a, b, currents: np.ndarray,
               table: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Cost of pairs (a[k], b[k]) and whether a[k] is the better reference."""
    cost_ab = np.max(np.abs(orientation_errors(arrays, a, b, currents, table)), axis=1)
    cost_ba = np.max(np.abs(orientation_errors(arrays, b, a, currents, table)), axis=1)
    return np.minimum(cost_ab, cost_ba), cost_ab <= cost_ba


@dataclass(frozen=True)
class MatchedSet:
    """A reference and its outputs; ``errors`` is each output's signed worst error over the range."""

    ref: str
    outputs: tuple[str, ...]
    worst_error: float
    errors: tuple[float, ...]
    ref_index: int
    output_indices: tuple[int, ...]
    vgs_ref: float

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (SI units)."""
        return {"ref": self.ref, "outputs": list(self.outputs), "worst_error": self.worst_error,
                "errors": list(self.errors), "ref_index": self.ref_index,
                "output_indices": list(self.output_indices), "vgs_ref": self.vgs_ref}


@dataclass(frozen=True)
class MatchResult:
    """Sets in the order chosen (best first), and what was optimised."""

    currents: tuple[float, ...]
    size: int
    method: str
    objective: str
    sets: tuple[MatchedSet, ...]
    unmatched: int

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (SI units)."""
        return {"currents": list(self.currents), "size": self.size, "method": self.method,
                "objective": self.objective, "sets": [s.to_dict() for s in self.sets], "unmatched": self.unmatched}


def _bound_terms(arrays: PartArrays, i0: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    # For a part b with VGS_b(i0) = V and any other gate voltage V' at distance d, convexity of every
    # law in VGS gives |I_b(V') - i0| / i0 >= min(d * t_b, min(d, delta_b) * s_b):
    # the tangent bounds the side above V, the chord from V - delta_b bounds the side below it.
    gm = arrays.gm_at(i0)
    t = gm / i0
    delta = i0 / np.maximum(gm, 1e-300)
    vgs = arrays.vgs_at(i0)
    s = (i0 - arrays.current(vgs - delta)) / (i0 * delta)
    return t, delta, s


def _lower_bound(d: np.ndarray, t: np.ndarray, delta: np.ndarray, s: np.ndarray) -> np.ndarray:
    return np.minimum(d * t, np.minimum(d, delta) * s)


def _radius_bound(r: float, terms: list[tuple[np.ndarray, np.ndarray, np.ndarray]], scales: Sequence[float],
                  idle: np.ndarray) -> float:
    # A pair that is not within r of each other in every (scaled) coordinate is more than r / scale
    # apart in VGS at some anchor current; there its error is at least the weakest part's convexity bound.
    return float(min(np.min(_lower_bound(r / k, t[idle], delta[idle], s[idle]))
                     for (t, delta, s), k in zip(terms, scales)))


def match_pairs(parts: Sequence[Part], currents: np.ndarray, count: int | None = None, *,
                neighbours: float = 8.0, arrays: PartArrays | None = None) -> MatchResult:
    """Greedy-lexicographic optimal pairs (see the module docstring).

    Each part is a point whose coordinates are its VGS at the lowest, middle and highest current
    of the range. Candidates are the pairs closer than a radius r in every coordinate (a k-d tree
    query); any other pair is more than r apart at some anchor current, so its cost is at least
    the convexity bound at r. Candidates cheaper than that bound are taken exactly as brute force
    would; then r doubles when too few could be proven, and the remaining parts are searched again.

    Parameters
    ----------
    parts : sequence of Part
        In-stock parts with fitted curves.
    currents : ndarray
        Current grid from :func:`current_grid`.
    count : int, optional
        Stop after this many pairs (default: as many as the bag allows).
    neighbours : float
        Rough number of candidates per part in the first search (a speed knob only: the
        result does not depend on it).
    arrays : PartArrays, optional
        Pre-packed curves of ``parts`` (saves packing again).

    Returns
    -------
    MatchResult
    """
    from scipy.spatial import cKDTree

    arrays = parts_to_arrays(parts) if arrays is None else arrays
    n = len(arrays)
    currents = np.asarray(currents, dtype=float)
    anchors = sorted({float(currents[0]), float(currents[len(currents) // 2]), float(currents[-1])})
    terms = [_bound_terms(arrays, i) for i in anchors]
    # scale each VGS coordinate by the typical error per volt at its current, so one radius means
    # about the same error at every anchor (a speed choice; the bound below uses the true minima)
    scales = [float(np.median(np.minimum(t, s))) for t, _, s in terms]
    scales = [k if np.isfinite(k) and k > 0 else 1.0 for k in scales]
    raw = np.column_stack([arrays.vgs_at(i) for i in anchors])
    coords = raw * np.array(scales)[None, :]
    vgs0 = raw[:, len(anchors) // 2]
    table = vgs_table(arrays, currents)
    free = np.ones(n, dtype=bool)
    limit = n // 2 if count is None else min(int(count), n // 2)
    pairs: list[tuple[int, int, float]] = []
    spread = float(np.subtract(*np.percentile(coords[:, len(anchors) // 2], [90, 10]))) if n > 1 else 0.0
    radius = max(neighbours * spread / max(0.8 * n, 1.0), 1e-9)
    while len(pairs) < limit:
        idle = np.flatnonzero(free)
        m = idle.size
        if m < 2:
            break
        diameter = float(np.max(np.ptp(coords[idle], axis=0)))
        if m * (m - 1) // 2 <= 4 * neighbours * m or radius > diameter:
            # few parts left, or the radius already spans them all: cost every pair (exact, no bound needed)
            a, b = (idle[x] for x in np.triu_indices(m, k=1))
            bound = np.inf
        else:
            found = cKDTree(coords[idle]).query_pairs(radius, p=np.inf, output_type="ndarray")
            a, b = idle[found[:, 0]], idle[found[:, 1]]
            bound = _radius_bound(radius, terms, scales, idle)
        cost, a_is_ref = pair_costs(arrays, a, b, currents, table)
        ranked = np.lexsort((np.maximum(a, b), np.minimum(a, b), cost))
        ranked = ranked[cost[ranked] <= bound]  # only these are proven; the rest waits for a wider search
        accepted = 0
        is_free = free.tolist()
        for ea, eb, ec, ref_first in zip(a[ranked].tolist(), b[ranked].tolist(), cost[ranked].tolist(),
                                         a_is_ref[ranked].tolist()):
            if len(pairs) >= limit:
                break
            if is_free[ea] and is_free[eb]:
                is_free[ea] = is_free[eb] = False
                pairs.append((ea, eb, ec) if ref_first else (eb, ea, ec))
                accepted += 1
        free = np.array(is_free, dtype=bool)
        if accepted * 8 < m:
            radius *= 2.0  # too few pairs proven: search wider
    chosen: list[MatchedSet] = []
    if pairs:
        refs = np.array([p[0] for p in pairs])
        outs = np.array([p[1] for p in pairs])
        signed = signed_worst(orientation_errors(arrays, refs, outs, currents))
        chosen = [MatchedSet(ref=parts[r].name, outputs=(parts[o].name,), worst_error=c, errors=(float(e),),
                             ref_index=r, output_indices=(o,), vgs_ref=float(vgs0[r]))
                  for (r, o, c), e in zip(pairs, signed)]
    return MatchResult(currents=tuple(float(c) for c in currents), size=2, method="exact greedy",
                       objective="pairs taken best first; each is the pair of smallest worst-case error among the "
                                 "parts still free (exact)",
                       sets=tuple(chosen), unmatched=int(free.sum()))


def brute_force_pairs(parts: Sequence[Part], currents: np.ndarray, count: int | None = None) -> list[float]:
    """Costs of the greedy-lexicographic pairs found by costing every pair (reference for tests/benchmarks)."""
    arrays = parts_to_arrays(parts)
    n = len(arrays)
    a, b = np.triu_indices(n, k=1)
    cost, _ = pair_costs(arrays, a, b, np.asarray(currents, dtype=float))
    free = np.ones(n, dtype=bool)
    out: list[float] = []
    limit = n // 2 if count is None else min(count, n // 2)
    for e in np.argsort(cost, kind="stable"):
        if len(out) >= limit:
            break
        if free[a[e]] and free[b[e]]:
            free[a[e]] = free[b[e]] = False
            out.append(float(cost[e]))
    return out


def _warmed(parts: Sequence[Part], warm_k: float) -> list[Part]:
    """Every part ``warm_k`` hotter with its own coefficients (measured, else the designer's default assumption)."""
    from dataclasses import replace

    from benchlab.design.part_thermal import thermal_values

    out = []
    for p in parts:
        values = thermal_values(p.name, p.params, p.thermal)
        out.append(replace(p, params=values.at(p.params, p.params.temperature_k + warm_k)))
    return out


def _conducting_only(result: MatchResult) -> MatchResult:
    """``result`` without the sets an output of which would not conduct (carry under what a sweep detects) at the
    smallest operating current; their parts count as unmatched."""
    floor = -(1.0 - MIN_DESIGN_CURRENT_A / min(result.currents))
    keep = tuple(s for s in result.sets if min(s.errors, default=0.0) > floor)
    dropped = len(result.sets) - len(keep)
    return replace(result, sets=keep, unmatched=result.unmatched + dropped * result.size)


def match_sets(parts: Sequence[Part], currents: np.ndarray, size: int, count: int | None = None, *,
               warm_k: float = 0.0) -> MatchResult:
    """Sets of one reference and ``size - 1`` outputs (pairs go to :func:`match_pairs` unless ``warm_k``).

    With ``warm_k`` > 0 the threshold temperature coefficient is a criterion too: each set's error is the worst
    over the currents at the parts' temperature and with every part ``warm_k`` hotter, each with its own
    coefficients (``Part.thermal``, measured; else the default assumption), so parts that drift together
    are preferred.

    Parameters
    ----------
    parts : sequence of Part
        In-stock parts with fitted curves.
    currents : ndarray
        Current grid from :func:`current_grid`.
    size : int
        Parts per set (2 for a simple mirror, N + 1 for N outputs).
    count : int, optional
        Stop after this many sets.

    Returns
    -------
    MatchResult
    """
    size = int(size)
    if size < 2:
        raise InputError(f"a matched set needs at least 2 parts, got size {size}")
    if len(parts) < size:
        raise InputError(f"{len(parts)} part(s) in stock cannot make a set of {size}")
    warm_k = check_at_most(warm_k, MAX_WARM_K, "the warm step", "K")
    if size == 2 and not warm_k:
        return _conducting_only(match_pairs(parts, currents, count))
    arrays = parts_to_arrays(parts)
    warm_arrays = parts_to_arrays(_warmed(parts, warm_k)) if warm_k else None
    currents = np.asarray(currents, dtype=float)
    vgs0 = arrays.vgs_at(float(currents[len(currents) // 2]))
    n_out = size - 1
    reach = n_out + 2
    free = np.ones(len(arrays), dtype=bool)
    limit = len(arrays) // size if count is None else min(int(count), len(arrays) // size)
    chosen: list[MatchedSet] = []
    while len(chosen) < limit and free.sum() >= size:
        order = np.flatnonzero(free)
        order = order[np.argsort(vgs0[order], kind="stable")]
        m = order.size
        offsets = np.array([k for k in range(-reach, reach + 1) if k != 0])
        pos = np.arange(m)[:, None] + offsets[None, :]
        valid = (pos >= 0) & (pos < m)
        cand = order[np.clip(pos, 0, m - 1)]
        refs = np.repeat(order[:, None], offsets.size, axis=1)
        errs = orientation_errors(arrays, refs.ravel(), cand.ravel(), currents)
        if warm_arrays is not None:
            errs = np.concatenate([errs, orientation_errors(warm_arrays, refs.ravel(), cand.ravel(), currents)], axis=1)
        worst = np.max(np.abs(errs), axis=1).reshape(m, offsets.size)
        signed = signed_worst(errs).reshape(m, offsets.size)
        # an output that would carry less than a sweep detects at an operating current does not conduct there:
        # it makes no set (the error would read -100 %)
        grid = np.tile(currents, errs.shape[1] // currents.size)
        dead = np.any(grid[None, :] * (1.0 + errs) < MIN_DESIGN_CURRENT_A, axis=1).reshape(m, offsets.size)
        worst = np.where(valid & ~dead, worst, np.inf)
        pick = np.argsort(worst, axis=1, kind="stable")[:, :n_out]
        set_cost = np.take_along_axis(worst, pick, axis=1).max(axis=1)
        for r in np.argsort(set_cost, kind="stable"):
            if len(chosen) >= limit or not np.isfinite(set_cost[r]):
                break
            members = cand[r, pick[r]]
            if not free[order[r]] or not free[members].all():
                continue
            free[order[r]] = False
            free[members] = False
            ref = int(order[r])
            chosen.append(MatchedSet(ref=parts[ref].name, outputs=tuple(parts[i].name for i in members),
                                     worst_error=float(set_cost[r]),
                                     errors=tuple(float(x) for x in signed[r, pick[r]]), ref_index=ref,
                                     output_indices=tuple(int(i) for i in members), vgs_ref=float(vgs0[ref])))
    return MatchResult(currents=tuple(float(c) for c in currents), size=size, method="heuristic",
                       objective=f"sets of 1 reference + {n_out} outputs taken best first by worst-case error"
                                 + (f" at the parts' temperature and {warm_k:g} K warmer (each part's own tempco)"
                                    if warm_k else "")
                                 + f"; outputs sought among the {reach} VGS neighbours on each side (heuristic)",
                       sets=tuple(chosen), unmatched=int(free.sum()))


def brute_force_best_set(parts: Sequence[Part], currents: np.ndarray, size: int) -> float:
    """Smallest worst-case error of any one set of ``size`` parts (every subset, every reference)."""
    from itertools import combinations

    arrays = parts_to_arrays(parts)
    n = len(arrays)
    ref, out = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")
    cost = np.max(np.abs(orientation_errors(arrays, ref.ravel(), out.ravel(), currents)), axis=1).reshape(n, n)
    best = np.inf
    for subset in combinations(range(n), size):
        for r in subset:
            best = min(best, max(cost[r, o] for o in subset if o != r))
    return float(best)


@dataclass(frozen=True)
class VgsBin:
    """Parts whose VGS at the operating current falls in ``[low, high)``."""

    low: float
    high: float
    count: int
    parts: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Plain-JSON form (SI units)."""
        return {"low": self.low, "high": self.high, "count": self.count, "parts": list(self.parts)}


def bin_by_vgs(parts: Sequence[Part], current: float, width: float) -> tuple[VgsBin, ...]:
    """Windows of VGS at ``current``, edges at whole multiples of ``width`` (so bins are comparable across bags).

    Parameters
    ----------
    parts : sequence of Part
    current : float
        Operating current (A).
    width : float
        Bin width (V).

    Returns
    -------
    tuple of VgsBin
        Occupied and empty bins from the lowest to the highest occupied one, in ascending VGS.
    """
    if not width > 0:
        raise InputError(f"the bin width must be a positive voltage, got {width}")
    check_at_most(width, MAX_GATE_V, "the bin width", "V")  # a wider bin holds every part
    current_grid(current)
    if not parts:
        return ()
    vgs = parts_to_arrays(parts).vgs_at(float(current))
    index = np.floor(vgs / width + 1e-9).astype(int)
    bins = []
    for k in range(int(index.min()), int(index.max()) + 1):
        members = np.flatnonzero(index == k)
        members = members[np.argsort(vgs[members], kind="stable")]
        bins.append(VgsBin(low=k * width, high=(k + 1) * width, count=int(members.size),
                           parts=tuple(parts[i].name for i in members)))
    return tuple(bins)
