"""Sweep data for fitting: validation of arrays, and the CSV adapter on the one sweep reader.

Files are parsed by :func:`benchlab.sweepfile.read_table` and their fittable points chosen by
:func:`benchlab.sweepfile.fit_points` (the rule the library import and refit apply too);
:func:`load_sweep_csv` validates what they give.

A :class:`Sweep` holds the points a fit may use (status ``ok`` only), each tagged with
its sweep direction and the row it came from, so every complaint can name the file and
row. Bad input raises :class:`benchlab.errors.InputError` with one clear sentence.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from benchlab.errors import InputError
from benchlab.sweepfile import (FLOOR_SIGMAS, MAX_FLOOR_FRACTION, MIN_SPREAD_SAMPLES, FitPoints, detection_floor,
                                read_plain_many, read_table, stated_vgs_noise)

# re-exported: the floor and the stated VGS noise are part of the one fitting rule in benchlab.sweepfile
__all__ = ["FLOOR_SIGMAS", "MAX_FLOOR_FRACTION", "MIN_SPREAD_SAMPLES", "Sweep", "detection_floor", "load_sweep_csv",
           "load_sweeps_csv", "stated_vgs_noise", "step_noise", "sweep_from_points", "validate_points"]

# Above these magnitudes the numbers are almost surely in mA / mV, not A / V: a bench
# fixture for discrete parts does not pass 20 A or reach 100 V (common practice).
MAX_PLAUSIBLE_CURRENT_A = 20.0
MAX_PLAUSIBLE_VOLTAGE_V = 100.0

DIRECTIONS = ("up", "down")


@dataclass(frozen=True, eq=False)
class Sweep:
    """Validated points of one sweep, in measurement order.

    Attributes
    ----------
    vgs, id : ndarray
        Gate-source voltage (V) and drain current (A > 0) of every fittable point.
    direction : ndarray of str
        ``up`` or ``down`` per point.
    rows : ndarray of int
        1-based data row of each point in its file (or index + 1 for arrays).
    source : str or None
        The file the points came from.
    skipped : dict
        Rows left out of the fit, counted by reason (``over_range``, ``compliance``,
        ``unsettled``, ``not_conducting``).
    """

    vgs: np.ndarray
    id: np.ndarray
    direction: np.ndarray
    rows: np.ndarray
    source: str | None = None
    skipped: dict = field(default_factory=dict)
    fold_backs: tuple = ()  # (row, vgs, id) where VGS and ID fell together far beyond the noise
    sigma_v: float | None = None  # VGS noise (V) the record states (repeated readings), None when unknown

    def select(self, direction: str) -> tuple[np.ndarray, np.ndarray]:
        """VGS and ID of one direction's points, sorted by rising current (then VGS)."""
        keep = self.direction == direction
        order = np.lexsort((self.vgs[keep], self.id[keep]))
        return self.vgs[keep][order], self.id[keep][order]

    def in_order(self, direction: str) -> tuple[np.ndarray, np.ndarray]:
        """VGS and ID of one direction's points in measurement order."""
        keep = self.direction == direction
        return self.vgs[keep], self.id[keep]

    def fit_points(self) -> tuple[np.ndarray, np.ndarray]:
        """Points a fit uses: the up sweep (the coolest pass) when there is one, else the down sweep."""
        return self.select("up" if np.any(self.direction == "up") else "down")

    @cached_property
    def has_both_directions(self) -> bool:
        return bool(np.any(self.direction == "up") and np.any(self.direction == "down"))


def step_noise(values) -> float:
    """Standard deviation of one reading's noise in a sequence taken in measurement order.

    From second differences, which cancel a smooth curve's slope: for independent noise s they
    scatter as N(curvature, 6 s^2); the median absolute value / 0.6745 is robust to the few
    places a sweep bends sharply (MAD estimate, Hampel, J. Am. Stat. Assoc. 69 (1974) 383).
    """
    values = np.asarray(values, float)
    if values.size < 5:
        return 0.0
    d2 = np.diff(values, 2)
    return float(np.median(np.abs(d2)) / (0.6745 * np.sqrt(6.0)))


# a joint step back (VGS and ID both against the sweep's direction) is noise unless both steps
# exceed this many standard deviations of a difference of two readings (our choice: normal noise
# passes 5 sigma about once in 3 million steps)
REVERSAL_NOISE_SIGMAS = 5.0


def _significant_back(vgs, i_d, sign):
    """Steps (between consecutive points) where VGS and ID both go back by far more than the noise."""
    dv, di = sign * np.diff(vgs), sign * np.diff(i_d)
    sv = step_noise(vgs) * np.sqrt(2.0) * REVERSAL_NOISE_SIGMAS
    # the current's noise taken relative to the reading (it grows with the current)
    si = step_noise(np.log(np.maximum(np.abs(i_d), 1e-300))) * np.sqrt(2.0) * REVERSAL_NOISE_SIGMAS
    return (dv < -sv) & (di < -si * np.abs(i_d[1:]))


def validate_points(vgs, i_d, direction=None, *, rows=None, source: str | None = None,
                    skipped: dict | None = None, ordered: bool = False, sigma_v: float | None = None) -> Sweep:
    """Check measured points and wrap them as a :class:`Sweep`.

    Parameters
    ----------
    vgs, i_d : array_like
        Gate-source voltage (V) and drain current (A), in measurement order.
    direction : array_like of str, optional
        ``up``/``down`` per point. Without it the order is inferred: rising VGS is an up
        sweep, and one turn back down (a repeated, falling pass) is a down sweep.
    rows : array_like of int, optional
        Row numbers to name in errors (default: 1-based position).
    source : str, optional
        File name to name in errors.
    skipped : dict, optional
        Counts of points already left out, carried into the result.
    ordered : bool
        The order is known to be the measurement order (a session record's point index or
        source setpoint): VGS and ID falling together far beyond the sweep's own noise is then a
        heating fold-back, kept and reported in ``fold_backs``, not a row out of order. Joint
        steps back within the noise (meter noise where the part is steep) are always accepted.
    sigma_v : float, optional
        The VGS noise (V) the record states (repeated readings); the fit's effective-variance weights
        then take it as given (``benchlab.extract.eiv``). None: estimated from the residuals.

    Returns
    -------
    Sweep

    Raises
    ------
    InputError
        Empty data, mismatched lengths, NaN/inf, zero or negative current, numbers that look
        like mA or mV, unsorted or duplicate points.
    """
    vgs = np.asarray(vgs, dtype=float).ravel()
    i_d = np.asarray(i_d, dtype=float).ravel()
    rows = np.arange(1, vgs.size + 1) if rows is None else np.asarray(rows, dtype=int).ravel()
    if isinstance(direction, np.ndarray) and direction.dtype.kind == "U" and direction.size == vgs.size \
            and not (direction != "up").any():
        direction = None  # a record whose points are all up: the same as no direction, which gets the fast path
        if not _plainly_good(vgs, i_d):
            direction = np.full(vgs.size, "up")
    if direction is None and _plainly_good(vgs, i_d):
        # the common case (a clean rising sweep) in one pass; anything else gets the full checks
        return Sweep(vgs=vgs, id=i_d, direction=np.full(vgs.size, "up"), rows=rows, source=source,
                     skipped=dict(skipped or {}), sigma_v=sigma_v)
    if vgs.size != i_d.size:
        raise InputError(f"vgs has {vgs.size} values but id has {i_d.size}", path=source)
    if vgs.size == 0:
        raise InputError("no data points to fit", path=source)
    for name, values in (("vgs", vgs), ("id", i_d)):
        bad = np.flatnonzero(~np.isfinite(values))
        if bad.size:
            raise InputError(f"{name} is not a finite number ({values[bad[0]]})", path=source, row=int(rows[bad[0]]))
    bad = np.flatnonzero(i_d <= 0)
    if bad.size and np.all(i_d < 0):
        raise InputError("every drain current is negative: a P-channel sweep is fitted as magnitudes "
                         "(give |VGS| and |ID|, both positive)", path=source, row=int(rows[0]))
    if bad.size:
        raise InputError(f"drain current {i_d[bad[0]]:g} A is zero or negative; only conducting points "
                         "(id > 0) can be fitted: remove the row or mark its status", path=source,
                         row=int(rows[bad[0]]))
    big = np.flatnonzero(i_d > MAX_PLAUSIBLE_CURRENT_A)
    if big.size:
        raise InputError(f"drain current {i_d[big[0]]:g} looks like mA, not A (the id column must be in "
                         "amperes: divide by 1000)", path=source, row=int(rows[big[0]]))
    big = np.flatnonzero(np.abs(vgs) > MAX_PLAUSIBLE_VOLTAGE_V)
    if big.size:
        raise InputError(f"vgs {vgs[big[0]]:g} looks like mV, not V (the vgs column must be in volts)",
                         path=source, row=int(rows[big[0]]))
    if direction is None:
        direction = _infer_direction(vgs, i_d, rows, source, ordered)
    else:
        direction = np.asarray(direction)
        if direction.dtype.kind != "U" or not np.isin(direction, DIRECTIONS).all():  # not written by the reader
            direction = np.asarray([str(d).strip().lower() for d in direction])
        unknown = np.flatnonzero(~np.isin(direction, DIRECTIONS))
        if unknown.size:
            raise InputError(f"direction '{direction[unknown[0]]}' is not 'up' or 'down'", path=source,
                             row=int(rows[unknown[0]]))
    folds = []
    for name, sign in (("up", 1.0), ("down", -1.0)):
        idx = np.flatnonzero(direction == name)
        dv, di = sign * np.diff(vgs[idx]), sign * np.diff(i_d[idx])
        same = (dv == 0) & (di == 0)
        if np.any(same):
            k = idx[1:][same][0]
            raise InputError(f"duplicate point: vgs {vgs[k]:g} V, id {i_d[k]:g} A repeats the row before",
                             path=source, row=int(rows[k]))
        # VGS alone may step back by meter noise where the part is steep, and both together by a
        # little; both going back by far more than the noise means the rows are out of order (or,
        # in a record whose order is known, that the part folded back as it heated)
        back = _significant_back(vgs[idx], i_d[idx], sign) if idx.size > 1 else np.zeros(0, bool)
        if np.any(back) and not ordered:
            k = idx[1:][back][0]
            raise InputError(f"unsorted point: vgs {vgs[k]:g} V, id {i_d[k]:g} A goes back against the "
                             f"{name} sweep's order", path=source, row=int(rows[k]))
        folds += [(int(rows[k]), float(vgs[k]), float(i_d[k])) for k in idx[1:][back]]
    return Sweep(vgs=vgs, id=i_d, direction=direction, rows=rows, source=source, skipped=dict(skipped or {}),
                 fold_backs=tuple(folds), sigma_v=sigma_v)


def _plainly_good(vgs, i_d) -> bool:
    if vgs.size == 0 or vgs.size != i_d.size:
        return False
    # rising current with no joint step back (VGS alone may jitter back by noise where the part is steep)
    dv, di = np.diff(vgs), np.diff(i_d)
    rising = (di > 0) & ~((dv <= 0) & (di <= 0))
    return bool(rising.all() and i_d[0] > 0 and i_d[-1] <= MAX_PLAUSIBLE_CURRENT_A
                and abs(vgs[0]) <= MAX_PLAUSIBLE_VOLTAGE_V and abs(vgs[-1]) <= MAX_PLAUSIBLE_VOLTAGE_V
                and np.isfinite(vgs).all() and np.isfinite(i_d).all())  # a NaN anywhere takes the full checks


def _infer_direction(vgs, i_d, rows, source, ordered=False):
    # a rising sweep, then at most one turn into a falling pass. A step counts as falling when
    # VGS and ID both fall by more than the noise (either alone, or both by a little, is meter noise)
    falling = _significant_back(vgs, i_d, 1.0)
    rising = _significant_back(vgs, i_d, -1.0)
    direction = np.full(vgs.size, "up", dtype=object)
    if not np.any(falling):
        return direction.astype(str)
    if not np.any(rising) and np.all(np.diff(i_d)[:3] < 0):
        direction[:] = "down"
        return direction.astype(str)
    first = int(np.flatnonzero(falling)[0])
    # the turn is the top of the rising pass (the last steps before it may be small)
    turn = int(np.argmax(i_d[:first + 1]))
    later = np.flatnonzero(rising[first:])
    if (turn == 0 or later.size) and not ordered:
        k = first + 1 + (int(later[0]) if later.size else 0)
        raise InputError(f"unsorted point: vgs {vgs[k]:g} V is out of order (expected a rising sweep, "
                         "optionally followed by one falling pass)", path=source, row=int(rows[k]))
    if later.size:  # an ordered record that rises again after falling: one rising pass that folded back
        return direction.astype(str)
    direction[turn + 1:] = "down"
    return direction.astype(str)


def sweep_from_points(points: FitPoints) -> Sweep:
    """Validate a record's fittable points (see :func:`benchlab.sweepfile.fit_points`) as a :class:`Sweep`,
    carrying the VGS noise the record states (``sigma_v``), which the fit's errors-in-variables weights use."""
    return validate_points(points.vgs, points.id, points.direction, rows=points.rows, source=points.source,
                           skipped=points.skipped, ordered=points.ordered, sigma_v=points.sigma_v)


def load_sweep_csv(path, *, detect_current: float | None = None) -> Sweep:
    """Read a sweep from a CSV file with a header row holding at least ``vgs`` and ``id``.

    A thin adapter on the one sweep reader (:func:`benchlab.sweepfile.read_table`, which also finds
    columns in anyone else's CSV) and its one rule for fittable points
    (:func:`benchlab.sweepfile.fit_points`): status ``ok`` only, in point order, above the noise floor.

    Parameters
    ----------
    path : str or Path
        The CSV file (comma-separated, SI units).
    detect_current : float, optional
        For session records written by the sweep engine: ``ok`` points below this current
        (the plan's detection current: the part did not conduct yet) are left out and
        counted instead of being rejected as zero/negative currents. Without it (and with it,
        when higher) the floor estimated by :func:`detection_floor` is used.

    Returns
    -------
    Sweep

    Raises
    ------
    InputError
        Missing or unreadable file, empty file, wrong columns, or bad points (see
        :func:`validate_points`), naming the file and row.
    """
    table = read_table(path)
    if not len(table):
        raise InputError("no data rows after the header", path=str(path))
    return sweep_from_points(table.fit_points(detect_current))


def _plainly_good_many(found: list[FitPoints]) -> np.ndarray:
    """:func:`_plainly_good` of many sweeps' points at once (one pass over all of them)."""
    if not found:
        return np.zeros(0, dtype=bool)
    sizes = np.array([f.vgs.size for f in found])
    vgs, i_d = np.concatenate([f.vgs for f in found]), np.concatenate([f.id for f in found])
    ends = np.cumsum(sizes)
    starts = ends - sizes
    dv, di = np.diff(vgs), np.diff(i_d)
    step_bad = ~((di > 0) & ~((dv <= 0) & (di <= 0)))
    bad = np.concatenate(([0], np.cumsum(step_bad)))  # the steps between one sweep's points: starts .. ends - 2
    inner = np.maximum(ends - 1, starts)
    first, last = i_d[np.minimum(starts, vgs.size - 1)], i_d[ends - 1]
    finite = np.concatenate(([0], np.cumsum(~(np.isfinite(vgs) & np.isfinite(i_d)))))
    return ((sizes > 0) & (bad[inner] - bad[starts] == 0) & (first > 0) & (last <= MAX_PLAUSIBLE_CURRENT_A)
            & (np.abs(vgs[np.minimum(starts, vgs.size - 1)]) <= MAX_PLAUSIBLE_VOLTAGE_V)
            & (np.abs(vgs[ends - 1]) <= MAX_PLAUSIBLE_VOLTAGE_V) & (finite[ends] - finite[starts] == 0))


def load_sweeps_csv(paths, detect_currents=None) -> list:
    """:func:`load_sweep_csv` of many files at once: plain CSVs are read and checked together
    (:func:`benchlab.sweepfile.read_plain_many`), every other file one by one; the results are the same.

    Parameters
    ----------
    paths : sequence of str or Path
    detect_currents : sequence of float or None, optional
        Each file's ``detect_current`` (see :func:`load_sweep_csv`); default None for all.

    Returns
    -------
    list of Sweep or InputError
        In the order of ``paths``: the sweep, or the error :func:`load_sweep_csv` raises for that file.
    """
    detect_currents = [None] * len(paths) if detect_currents is None else list(detect_currents)
    # a detection current belongs to a session record, which the batched path does not take
    plain = read_plain_many([p if d is None else None for p, d in zip(paths, detect_currents)]) if paths else []
    batch = [k for k, f in enumerate(plain) if f is not None]
    good = _plainly_good_many([plain[k] for k in batch])
    out: list = [None] * len(paths)
    for k, ok in zip(batch, good.tolist()):
        if ok:  # as validate_points' fast path: a clean rising sweep
            f = plain[k]
            out[k] = Sweep(vgs=f.vgs, id=f.id, direction=np.full(f.vgs.size, "up"), rows=f.rows, source=f.source,
                           skipped={}, sigma_v=None)
    for k, path in enumerate(paths):
        if out[k] is None:
            try:
                out[k] = (sweep_from_points(plain[k]) if plain[k] is not None
                          else load_sweep_csv(path, detect_current=detect_currents[k]))
            except InputError as exc:
                out[k] = exc
    return out
