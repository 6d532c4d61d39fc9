"""Sweep data for fitting: validation of arrays and reading of CSV files.

A :class:`Sweep` holds the points a fit may use (status ``ok`` only), each tagged with
its sweep direction and the row it came from, so every complaint can name the file and
row. Bad input raises :class:`benchlab.errors.InputError` with one clear sentence.
"""

from __future__ import annotations

import csv
import math
import re
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from benchlab.errors import InputError
from benchlab.kinds import PointStatus
from benchlab.names import printable

# Above these magnitudes the numbers are almost surely in mA / mV, not A / V: a bench
# fixture for discrete parts does not pass 20 A or reach 100 V (common practice).
MAX_PLAUSIBLE_CURRENT_A = 20.0
MAX_PLAUSIBLE_VOLTAGE_V = 100.0

DIRECTIONS = ("up", "down")
_UNIT_SUFFIX = re.compile(r"^\s*([a-z_]+?)\s*(?:[\[(]\s*([a-zµ]+)\s*[\])])?\s*$")
_SI_UNITS = {"vgs": "v", "id": "a"}


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
                    skipped: dict | None = None, ordered: bool = False) -> Sweep:
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
    if direction is None and _plainly_good(vgs, i_d):
        # the common case (a clean rising sweep) in one pass; anything else gets the full checks
        return Sweep(vgs=vgs, id=i_d, direction=np.full(vgs.size, "up"), rows=rows, source=source,
                     skipped=dict(skipped or {}))
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
                 fold_backs=tuple(folds))


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


def _column_index(header: list[str], path: str) -> dict[str, int]:
    index = {}
    for position, raw in enumerate(header):
        match = _UNIT_SUFFIX.match(raw.strip().lower())
        if not match:
            continue
        name, unit = match.group(1), match.group(2)
        if name in _SI_UNITS and unit and unit != _SI_UNITS[name]:
            raise InputError(f"column '{printable(raw.strip())}' is in {unit}; benchlab reads SI units only "
                             f"({name} in {_SI_UNITS[name].upper()})", path=path)
        index.setdefault(name, position)
    missing = [name for name in ("vgs", "id") if name not in index]
    if missing:
        found = printable(", ".join(h.strip() for h in header), 120) or "nothing"  # a quoted header may hold a newline
        raise InputError(f"missing column(s) {', '.join(missing)}: need a header row with 'vgs' (V) and "
                         f"'id' (A); found {found}", path=path)
    return index


def load_sweep_csv(path, *, detect_current: float | None = None) -> Sweep:
    """Read a sweep from a CSV file with a header row holding at least ``vgs`` and ``id``.

    Other columns are ignored, except ``status`` (only ``ok`` points are fitted; over-range,
    compliance and unsettled points never are) and ``direction`` (``up``/``down``).

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
    name = str(path)
    try:
        with open(path, newline="", encoding="utf-8-sig") as handle:
            table = list(csv.reader(handle))
    except FileNotFoundError:
        raise InputError("no such file", path=name) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the file ({exc.__class__.__name__}: {exc})", path=name) from None
    except csv.Error as exc:  # a field over the csv module's limit (131072 bytes), a NUL byte, ...
        raise InputError(f"not a readable CSV ({exc})", path=name) from None
    # blank lines are skipped but still counted, so a row number is the data row a reader sees
    if all(len(row) > 1 for row in table):  # no blank line: every row is numbered by its place
        numbered = list(enumerate(table))
    else:
        numbered = [(k, row) for k, row in enumerate(table) if row and (len(row) > 1 or row[0].strip())]
    if not numbered:
        raise InputError("the file is empty (expected a header row with 'vgs' and 'id')", path=name)
    header_at, header = numbered[0]
    body = [(k - header_at, row) for k, row in numbered[1:]]
    index = _column_index(header, name)
    if not body:
        raise InputError("no data rows after the header", path=name)
    status_col, direction_col = index.get("status"), index.get("direction")
    # a record with a point index (or the source setpoint) carries its measurement order: rows are
    # taken in point order, and a heating fold-back in it is data, not disorder
    point_col = index.get("point")
    ordered = point_col is not None or "v_source" in index
    columns = _columns(body, len(header), index)
    if columns is not None:  # every row whole and numeric: one numpy pass
        vgs, i_d, rows, direction, skipped = _from_columns(columns, status_col, point_col, direction_col)
    else:
        vgs, i_d, rows, direction, skipped = _row_by_row(body, index, status_col, point_col, direction_col, name)
    # the part's noise floor: readings before it conducts scatter around zero (some negative); they
    # are dropped with the session's detection current when there is one, else below a floor
    # estimated from the data (the same points either way, so a CSV fits as its session does)
    spread = skipped.pop("_spread_v", None)
    sigma_v = stated_vgs_noise(spread)
    vgs, i_d, rows = np.asarray(vgs, float), np.asarray(i_d, float), np.asarray(rows, int)
    floor = detection_floor(i_d)
    why = "noise_floor"
    if detect_current is not None and detect_current >= floor:
        floor, why = detect_current, "not_conducting"
    if floor > 0:
        keep = ~(np.isfinite(i_d) & (i_d < floor))
        if not keep.all():
            skipped[why] = skipped.get(why, 0) + int((~keep).sum())
            vgs, i_d, rows = vgs[keep], i_d[keep], rows[keep]
            direction = [d for d, k in zip(direction, keep) if k] if direction_col is not None else direction
    if not vgs.size:
        raise InputError(f"no fittable points (rows left out: {_describe(skipped)})", path=name)
    # the stated VGS noise is not applied here yet: the library's import reads the same records without
    # it, and a record must fit the same by both ways in (see stated_vgs_noise)
    del sigma_v
    return validate_points(vgs, i_d, direction if direction_col is not None else None, rows=rows,
                           source=name, skipped=skipped, ordered=ordered)


MIN_SPREAD_SAMPLES = 5


def stated_vgs_noise(spread_v) -> float | None:
    """VGS noise (V) from a record's repeated readings: ``spread_v`` is the difference of the last two
    readings of VGS at a point, whose RMS over the points read twice is sqrt(2) sigma_V (None with
    fewer than :data:`MIN_SPREAD_SAMPLES` such points)."""
    if spread_v is None:
        return None
    spread = np.asarray(spread_v, float)
    spread = spread[np.isfinite(spread) & (spread != 0)]
    if spread.size < MIN_SPREAD_SAMPLES:
        return None
    return float(np.sqrt(np.mean(spread * spread) / 2.0))


# readings below this many standard deviations of the noise floor are not conduction (our choice:
# a normal reading passes 5 sigma about once in 3.5 million)
FLOOR_SIGMAS = 5.0
# a "noise floor" above this fraction of the largest current is not one (a sign error in a row is)
MAX_FLOOR_FRACTION = 1e-2


def detection_floor(currents) -> float:
    """The current (A) below which a sweep's readings are its noise floor, estimated from the data.

    Before the part conducts the meter reads noise around zero, so some readings are negative;
    their RMS estimates the noise (a half-normal's E[x^2] is sigma^2) and the floor is
    :data:`FLOOR_SIGMAS` times it. 0 when no reading is negative or zero (nothing to drop), or when
    the "floor" would pass :data:`MAX_FLOOR_FRACTION` of the largest current (then the negative
    reading is an error in the data, left for :func:`validate_points` to report), or when a
    non-positive reading has no small neighbour in measurement order (the same).
    """
    i = np.asarray(currents, float)
    i = i[np.isfinite(i)]
    low = i[i <= 0]
    if low.size == 0 or low.size == i.size:
        return 0.0
    floor = FLOOR_SIGMAS * float(np.sqrt(np.mean(low * low)))
    top = float(i.max())
    if floor >= MAX_FLOOR_FRACTION * top:
        return 0.0
    # a noise-floor reading sits among other small readings (in measurement order); a negative
    # reading between conducting points is an error in the data, not noise
    padded = np.concatenate(([np.inf], np.abs(i), [np.inf]))
    at = np.flatnonzero(i <= 0) + 1
    if np.any(np.minimum(padded[at - 1], padded[at + 1]) > 10.0 * max(floor, 1e-300)):
        return 0.0
    # exact zeros carry no scale: drop them (and only them) then
    return floor if floor > 0 else float(np.nextafter(0.0, 1.0))


def _columns(body, width, index):
    # the rows as columns of strings when every row has the header's width and the numbers parse
    rows = [row for _, row in body]
    if set(map(len, rows)) != {width}:
        return None
    cols = list(zip(*rows))
    try:
        numbers = {name: np.array(cols[index[name]], dtype=float) for name in ("vgs", "id")}
        for name in ("point", "spread_v"):
            if name in index:
                numbers[name] = np.array(cols[index[name]], dtype=float)
    except ValueError:
        return None  # the row-by-row reader names the bad cell
    return np.array([k for k, _ in body]), cols, numbers


def _from_columns(columns, status_col, point_col, direction_col):
    row_numbers, cols, numbers = columns
    count = row_numbers.size
    order = np.argsort(numbers["point"], kind="stable") if point_col is not None else np.arange(count)
    status = ([s.strip().lower() for s in cols[status_col]] if status_col is not None else ["ok"] * count)
    status = np.asarray(status, dtype=object)[order]
    ok = status == PointStatus.OK
    skipped = {}
    for value in status[~ok]:
        skipped[value] = skipped.get(value, 0) + 1
    take = order[ok]
    direction = [cols[direction_col][k] for k in take] if direction_col is not None else []
    skipped["_spread_v"] = numbers["spread_v"][take] if "spread_v" in numbers else None
    return numbers["vgs"][take], numbers["id"][take], row_numbers[take], direction, skipped


def _row_by_row(body, index, status_col, point_col, direction_col, name):
    if point_col is not None:
        def point_of(item):
            cells = item[1]
            try:
                return float(cells[point_col]) if point_col < len(cells) else math.inf
            except ValueError:
                return math.inf
        body = sorted(body, key=point_of)
    vgs, i_d, direction, rows, skipped = [], [], [], [], {}
    for row_number, row in body:
        status = row[status_col].strip().lower() if status_col is not None and status_col < len(row) else "ok"
        if status != PointStatus.OK:
            skipped[status] = skipped.get(status, 0) + 1
            continue
        values = []
        for column in ("vgs", "id"):
            position = index[column]
            cell = row[position].strip() if position < len(row) else ""
            try:
                values.append(float(cell))
            except ValueError:
                raise InputError(f"{column} value '{cell}' is not a number", path=name, row=row_number) from None
        vgs.append(values[0])
        i_d.append(values[1])
        rows.append(row_number)
        if direction_col is not None:
            direction.append(row[direction_col] if direction_col < len(row) else "")
    return vgs, i_d, rows, direction, skipped


def _describe(skipped: dict) -> str:
    return ", ".join(f"{count} {reason}" for reason, count in sorted(skipped.items())) or "none"

