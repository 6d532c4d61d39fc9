"""The sweep record's CSV format (docs/session-format.md), its one reader and its one fitting rule.

A shared, pure module (beside ``models.py`` and ``kinds.py``): the sweep engine's writer
(``benchlab.sweep.session``) takes its column list from here, and every reader uses :func:`read_table`
to parse a file and :func:`fit_points` to choose the points a fit may use: ``benchlab fit`` and the
Python API (``benchlab.extract.sweepdata.load_sweep_csv``), the library import
(``benchlab.library.sessions``), the library refit (from stored points) and the session reader
(``benchlab.sweep.session.read_sweep``). ``extract/`` and ``library/`` may not import ``sweep/`` (see
DEVELOPERS.md), so the format lives below all three.

One rule for a cut record: the recorder ends every row with a newline in one write, so in a record
(a file with the recorder's ``point`` and ``status`` columns) a last line with no
newline is the point in flight when the process died: it is skipped and the table says ``truncated``.
In anyone else's CSV a last line without a newline is an ordinary row.

One rule for fittable points (:func:`fit_points`): status ``ok`` (every other status is counted as
left out), in point order when the file has a point index, and above the part's noise floor: the
plan's detection current for a session record, else (or when the data show a higher floor)
:func:`detection_floor`, a floor estimated from the readings themselves, so a CSV copied out of its
session fits as the session does. The VGS noise the record states through its repeated readings
(``spread_v``) travels with the points (:func:`stated_vgs_noise`).

Parsing is done on whole columns (one split of the file, numpy conversion per column), not row by row;
a file the fast path cannot take (quoted cells, ragged rows) is read with the csv module.
"""

from __future__ import annotations

import csv
import re
from itertools import islice, repeat
from dataclasses import dataclass, field
import numpy as np

from benchlab.errors import InputError
from benchlab.kinds import PointStatus
from benchlab.names import printable

SESSION_FORMAT = "benchlab-session/1"
SWEEP_FORMAT = "benchlab-sweep/1"
CSV_COLUMNS = ("point", "time_s", "vgs", "id", "v_source", "i_source", "status", "direction", "spread_v")
# the columns that make a CSV a sweep record (the recorder's own), for the cut-last-line rule
RECORD_COLUMNS = ("point", "status")

_UNIT_SUFFIX = re.compile(r"^\s*([a-z_]+?)\s*(?:[\[(]\s*([a-zµ]+)\s*[\])])?\s*$")
_SI_UNITS = {"vgs": "v", "id": "a"}


def _column_index(header: list[str], path: str) -> dict[str, int]:
    """Column positions by name: names are matched case-blind, a unit in brackets (``vgs (V)``, ``id [A]``)
    is allowed when it is the SI unit; the first column of a name wins."""
    index: dict[str, int] = {}
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


@dataclass(frozen=True, eq=False)
class SweepTable:
    """A sweep CSV read into columns (strings until asked for as numbers or words).

    Attributes
    ----------
    path : str
        The file, named in every error.
    header : tuple of str
        The header row as written.
    index : dict
        Known column name -> position (``vgs``, ``id``, ``point``, ``status``, ...).
    rows : ndarray of int
        The 1-based data row of each line in the file (blank lines are skipped but counted).
    truncated : bool
        The record's last line was cut short (no newline: the writer died mid-line) and was skipped.
    """

    path: str
    header: tuple[str, ...]
    index: dict
    rows: np.ndarray
    truncated: bool = False
    _cells: list = field(default_factory=list, repr=False)
    _cache: dict = field(default_factory=dict, repr=False)

    def __len__(self) -> int:
        return int(self.rows.size)

    def has(self, name: str) -> bool:
        """True when the file has column ``name``."""
        return name in self.index

    @property
    def is_record(self) -> bool:
        """The file carries the recorder's columns (point index and status)."""
        return all(name in self.index for name in RECORD_COLUMNS)

    @property
    def ordered(self) -> bool:
        """The measurement order is known (a point index or the source setpoint is recorded)."""
        return "point" in self.index or "v_source" in self.index

    def _raw(self, name: str) -> list[str]:
        width = len(self.header)
        return self._cells[self.index[name]::width]

    def number(self, name: str) -> np.ndarray:
        """Column ``name`` as floats (``inf``/``nan`` as written); all NaN when the file has no such column.

        Raises
        ------
        InputError
            A cell that is not a number, naming the file, row and column.
        """
        if name in self._cache:
            return self._cache[name]
        if name not in self.index:
            values = np.full(len(self), np.nan)
        else:
            raw = self._raw(name)
            try:
                values = np.fromiter(map(float, raw), dtype=float, count=len(raw))
            except ValueError:
                values = np.empty(len(raw))
                for k, cell in enumerate(raw):
                    try:
                        values[k] = float(cell)
                    except ValueError:
                        raise InputError(f"{name} value '{printable(cell.strip(), 40)}' is not a number",
                                         path=self.path, row=int(self.rows[k])) from None
        self._cache[name] = values
        return values

    def text(self, name: str, default: str = "") -> np.ndarray:
        """Column ``name`` as lower-case words without surrounding blanks (``default`` without the column)."""
        key = "text:" + name
        if key not in self._cache:
            if name not in self.index:
                self._cache[key] = np.full(len(self), default, dtype=object)
            else:
                raw = self._raw(name)
                if not _CANONICAL_WORDS.issuperset(raw):  # written by hand: blanks or capitals
                    raw = [word.strip().lower() for word in raw]
                self._cache[key] = np.array(raw, dtype=object)
        return self._cache[key]

    @property
    def _sequential(self) -> bool:
        # the recorder's own numbering, 0, 1, 2, ... in file order (checked on the text: no conversion needed)
        key = "sequential"
        if key not in self._cache:
            raw = self._raw("point") if "point" in self.index else []
            self._cache[key] = bool(raw) and raw == list(map(str, range(len(raw))))
        return self._cache[key]

    def point_numbers(self) -> np.ndarray:
        """The point index of each row (the ``point`` column, else the row's place from 0)."""
        if "point" not in self.index or self._sequential:
            return np.arange(len(self))
        return self.number("point").astype(np.int64)

    def fit_points(self, detect_current: float | None = None) -> "FitPoints":
        """The points a fit may use (see :func:`fit_points`)."""
        status = self.text("status") if self.has("status") else None
        if status is not None and self._cache.setdefault("all_ok", set(self._raw("status")) == {"ok"}):
            status = None  # every point ok: nothing to leave out by status
        return fit_points(self.number("vgs"), self.number("id"), status=status,
                          point=self.number("point") if self.has("point") and not self._sequential else None,
                          direction=self.text("direction") if self.has("direction") else None,
                          spread_v=self.number("spread_v") if self.has("spread_v") else None,
                          rows=self.rows, detect_current=detect_current, ordered=self.ordered, source=self.path)


_INDEX_CACHE: dict = {}  # header -> column index (a folder of records shares one header)
_CANONICAL_WORDS = frozenset(str(s) for s in PointStatus) | {"up", "down"}


def _read_text(path: str) -> str:
    try:
        # read as bytes and decoded in one go (about twice as fast as a text-mode file); newlines as a
        # text-mode file gives them: \r\n and a lone \r read as \n
        with open(path, "rb") as handle:
            text = handle.read().decode("utf-8-sig")
        return text.replace("\r\n", "\n").replace("\r", "\n") if "\r" in text else text
    except FileNotFoundError:
        raise InputError("no such file", path=path) from None
    except IsADirectoryError:
        raise InputError("is a folder, not a CSV file", path=path) from None
    except UnicodeDecodeError:
        raise InputError("not a UTF-8 text file (a sweep CSV is UTF-8 text: binary, UTF-16 or Latin-1 files are "
                         "refused)", path=path) from None
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc.strerror or exc})", path=path) from None


def _split_rows(lines: list[str], path: str) -> list[list[str]]:
    # quoted cells (anyone else's CSV): the csv module, one row per line as the fast path counts them
    try:
        return [next(csv.reader([line])) if line else [] for line in lines]
    except csv.Error as exc:  # a NUL byte, a field over the csv module's limit ...
        raise InputError(f"not a readable CSV ({exc})", path=path) from None


def read_table(path) -> SweepTable:
    """Read a sweep CSV: a session record or anyone else's file with a header row naming ``vgs`` and ``id``.

    Column names are matched case-blind with an optional SI unit (``VGS (V)``, ``id [A]``); other units
    are refused, unknown columns ignored. Blank lines are skipped (and counted in row numbers). A record's
    cut last line is skipped (``truncated``); any other short row is an error naming it.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    SweepTable

    Raises
    ------
    InputError
        Missing or unreadable file, no header, missing columns, a short row. (A header with no rows is an
        empty table: a sweep stopped before its first point.)
    """
    name = str(path)
    text = _read_text(name)
    if "\x00" in text:
        raise InputError("not a readable CSV (it holds a NUL byte: a binary file?)", path=name)
    lines = text.split("\n")
    cut = lines[-1] != ""  # no newline after the last line
    if not cut:
        lines.pop()
    head_at = next((k for k, line in enumerate(lines) if line.strip()), None)
    if head_at is None:
        raise InputError("the file is empty (expected a header row with 'vgs' and 'id')", path=name)
    quoted = '"' in text
    header = (_split_rows([lines[head_at]], name)[0] if quoted else lines[head_at].split(","))
    header = [h.strip() for h in header]
    index = _INDEX_CACHE.get(tuple(header)) or _column_index(header, name)
    if len(_INDEX_CACHE) < 64:
        _INDEX_CACHE[tuple(header)] = index
    body = lines[head_at + 1:]
    width = len(header)
    # every line with the header's width (the usual file): no line is blank, rows are numbered by place
    whole = not quoted and width > 1 and set(map(str.count, body, repeat(","))) == {width - 1}
    if whole:
        rows = range(1, len(body) + 1)
    else:
        rows = [k + 1 for k, line in enumerate(body) if line.strip()]
        if len(rows) != len(body):
            body = [body[k - 1] for k in rows]
    truncated = False
    if cut and body and all(c in index for c in RECORD_COLUMNS):
        body, rows, truncated = body[:-1], rows[:-1], True  # the point in flight when the recorder stopped
    if not body:
        cells = []  # a record stopped before its first point
    elif whole or (not quoted and set(map(str.count, body, repeat(","))) == {width - 1}):
        cells = ",".join(body).split(",")  # the whole table in one split
    else:
        split = _split_rows(body, name) if quoted else [line.split(",") for line in body]
        need = max(index.values()) + 1
        for row, cellrow in zip(rows, split):
            if len(cellrow) < need:
                raise InputError(f"expected {width} fields, found {len(cellrow)}", path=name, row=row)
        cells = [c for cellrow in split for c in (cellrow + [""] * width)[:width]]
    numbers = np.arange(1, len(rows) + 1) if isinstance(rows, range) else np.asarray(rows, dtype=np.int64)
    table = SweepTable(path=name, header=tuple(header), index=index, rows=numbers, truncated=truncated, _cells=cells)
    _check_ok_points(table)  # every number the fit needs is checked as the file is read
    if table.has("point") and not table._sequential:
        _check_point_numbers(table)
    return table


# columns that need the record rules of :meth:`SweepTable.fit_points` (status, order, directions, stated noise)
_RECORD_ONLY = ("point", "status", "direction", "spread_v")


_PLAIN_HEADERS: dict = {}  # header line -> (header, column index) of a plain file's header, None for any other


def _plain_header(line: str, name: str):
    if line in _PLAIN_HEADERS:
        return _PLAIN_HEADERS[line]
    found = None
    header = tuple(h.strip() for h in line.split(","))
    if line.strip() and len(header) >= 2:
        try:
            index = _column_index(list(header), name)
        except InputError:
            index = None
        if index is not None and not any(c in index for c in _RECORD_ONLY):
            found = header, index
    if len(_PLAIN_HEADERS) < 64:
        _PLAIN_HEADERS[line] = found
    return found


def _plain_body(name: str):
    # the header, column index, data text and row count of a plain numeric CSV that read_table reads the simple
    # way (no quotes, every line with the header's width, a newline after the last line, no record columns);
    # None for anything else (read_table then reads it, and names whatever is wrong)
    try:
        text = _read_text(name)
    except InputError:
        return None
    if "\x00" in text or '"' in text or not text.endswith("\n"):
        return None
    lines = text.split("\n")
    lines.pop()
    plain = _plain_header(lines[0], name) if len(lines) >= 2 else None
    if plain is None or set(map(str.count, islice(lines, 1, None), repeat(","))) != {len(plain[0]) - 1}:
        return None
    return plain[0], plain[1], text[len(lines[0]) + 1:], len(lines) - 1


def read_plain_many(paths) -> list:
    """Read many plain CSVs at once: the fittable points of each, as ``read_table(path).fit_points()`` gives them.

    The batched path of the one reader, for files read the simple way (no quotes, every row full, a
    newline after the last row, no record columns, every reading a finite number, every current
    above 0, so no point is left out): their columns are converted together, one conversion per
    column for all files with the same header. Any other file (a session record, anyone's CSV
    with quotes, blank or short lines, a noise floor, a bad cell) is ``None``: read it with
    :func:`read_table`, which applies every rule and names what is wrong.

    Parameters
    ----------
    paths : sequence of str, Path or None
        The files (None: left out, its entry is None).

    Returns
    -------
    list of FitPoints or None
        In the order of ``paths``.
    """
    found: list = [None] * len(paths)
    groups: dict = {}
    for k, path in enumerate(paths):
        plain = None if path is None else _plain_body(str(path))
        if plain is not None:
            groups.setdefault(plain[0], []).append((k, plain[1], plain[2], plain[3]))
    for header, members in groups.items():
        width, index = len(header), members[0][1]
        # every file's data lines end with a newline: one text, one split into cells (the last one empty)
        cells = "".join([text for _, _, text, _ in members]).replace("\n", ",").split(",")
        cells.pop()
        try:
            vgs, i_d = (np.fromiter(map(float, cells[index[c]::width]), dtype=float, count=len(cells) // width)
                        for c in ("vgs", "id"))
        except ValueError:
            continue  # a cell that is not a number: read_table names it
        sizes = np.array([rows for _, _, _, rows in members])
        ends = np.cumsum(sizes)
        # a file with a reading that is not finite or a current at or below 0 takes read_table's rules
        bad = np.concatenate(([0], np.cumsum(~(np.isfinite(vgs) & np.isfinite(i_d) & (i_d > 0)))))
        clean = (bad[ends] - bad[ends - sizes]) == 0
        ordered = "v_source" in index
        for (k, _, _, _), start, end, ok in zip(members, (ends - sizes).tolist(), ends.tolist(), clean.tolist()):
            if ok:
                found[k] = FitPoints(vgs=vgs[start:end], id=i_d[start:end], direction=None,
                                     rows=np.arange(1, end - start + 1), skipped={}, ordered=ordered,
                                     source=str(paths[k]))
    return found


def _check_ok_points(table: SweepTable) -> None:
    # a point with status ok is two finite numbers (over-range readings carry their own status)
    vgs, i_d = table.number("vgs"), table.number("id")
    bad = ~(np.isfinite(vgs) & np.isfinite(i_d))
    if bad.any() and table.has("status"):
        bad &= table.text("status") == PointStatus.OK
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        name = "vgs" if not np.isfinite(vgs[k]) else "id"
        cell = table._raw(name)[k].strip()
        raise InputError(f"{name} value '{printable(cell, 40)}' is not a finite number in a point with status ok "
                         "(a reading the meter could not give is recorded as over_range)", path=table.path,
                         row=int(table.rows[k]))


def _check_point_numbers(table: SweepTable) -> None:
    point = table.number("point")
    whole = np.isfinite(point) & (point == np.round(point)) & (point >= 0)
    if not whole.all():
        k = int(np.flatnonzero(~whole)[0])
        raise InputError(f"point number {point[k]:g} is not a whole number of 0 or more", path=table.path,
                         row=int(table.rows[k]))
    order = np.argsort(point, kind="stable")
    same = np.flatnonzero(np.diff(point[order]) == 0)
    if same.size:
        k = int(max(order[same[0]], order[same[0] + 1]))
        raise InputError(f"point number {int(point[k])} appears twice", path=table.path, row=int(table.rows[k]))


@dataclass(frozen=True, eq=False)
class FitPoints:
    """The points of one sweep a fit may use, in measurement order, with what was left out and why.

    Attributes
    ----------
    vgs, id : ndarray
        VGS (V) and ID (A) of each point (not yet validated: see ``benchlab.extract.validate_points``).
    direction : ndarray of str or None
        ``up``/``down`` per point as recorded; None when the file has no direction column.
    rows : ndarray of int
        1-based data row of each point in its file (for errors).
    skipped : dict
        Points left out, counted by reason (a status, ``not_conducting`` or ``noise_floor``).
    sigma_v : float or None
        The VGS noise (V) the record states through its repeated readings (None when it states none).
    ordered : bool
        The measurement order is known (see :attr:`SweepTable.ordered`).
    source : str or None
        The file, named in errors.
    """

    vgs: np.ndarray
    id: np.ndarray
    direction: np.ndarray | None
    rows: np.ndarray
    skipped: dict
    sigma_v: float | None = None
    ordered: bool = False
    source: str | None = None

    def __len__(self) -> int:
        return int(self.vgs.size)


def fit_points(vgs, i_d, *, status=None, point=None, direction=None, spread_v=None, rows=None,
               detect_current: float | None = None, ordered: bool = False, source: str | None = None) -> FitPoints:
    """Choose the points of a sweep a fit may use: the one rule every reader applies.

    Parameters
    ----------
    vgs, i_d : array_like
        VGS (V) and ID (A) of every recorded point.
    status : array_like of str, optional
        Each point's status; only ``ok`` points are fitted (default: all ``ok``).
    point : array_like, optional
        The point index: points are taken in its order (stable), else in the given order.
    direction : array_like of str, optional
        ``up``/``down`` per point.
    spread_v : array_like, optional
        Difference of the last two VGS readings at each point (V), for :func:`stated_vgs_noise`.
    rows : array_like of int, optional
        Row numbers to name in errors (default: 1-based position).
    detect_current : float, optional
        The plan's detection current (A) of a session record: ``ok`` points below it were the search
        before the part conducted (``not_conducting``). Without it, or when the data show a higher floor,
        readings below :func:`detection_floor` are left out (``noise_floor``).
    ordered : bool
        The order is the measurement order (a point index or source setpoint was recorded).
    source : str, optional
        The file, named in errors.

    Returns
    -------
    FitPoints

    Raises
    ------
    InputError
        No point left to fit.
    """
    vgs = np.asarray(vgs, dtype=float)
    i_d = np.asarray(i_d, dtype=float)
    count = vgs.size
    rows = np.arange(1, count + 1) if rows is None else np.asarray(rows, dtype=np.int64)
    order = np.argsort(np.asarray(point, dtype=float), kind="stable") if point is not None else np.arange(count)
    skipped: dict[str, int] = {}
    if status is not None:
        status = np.asarray(status, dtype=object)[order]
        ok = status == PointStatus.OK
        if not ok.all():
            words, counts = np.unique(status[~ok].astype(str), return_counts=True)
            skipped.update((str(w), int(c)) for w, c in zip(words, counts))
        order = order[ok]
    currents = i_d[order]
    floor = detection_floor(currents)
    why = "noise_floor"
    if detect_current is not None and detect_current >= floor:
        floor, why = float(detect_current), "not_conducting"
    if floor > 0:
        low = np.isfinite(currents) & (currents < floor)
        if low.any():
            skipped[why] = skipped.get(why, 0) + int(low.sum())
            order = order[~low]
    if not order.size:
        raise InputError(f"no fittable points (rows left out: {describe_skipped(skipped)})", path=source)
    sigma_v = stated_vgs_noise(np.asarray(spread_v, dtype=float)[order]) if spread_v is not None else None
    return FitPoints(vgs=vgs[order], id=i_d[order],
                     direction=None if direction is None else np.asarray(direction, dtype=object)[order].astype(str),
                     rows=rows[order], skipped=skipped, sigma_v=sigma_v, ordered=ordered, source=source)


def describe_skipped(skipped: dict) -> str:
    """``'3 noise_floor, 1 over_range'``: the left-out counts in words (``none`` when empty)."""
    return ", ".join(f"{count} {reason}" for reason, count in sorted(skipped.items())) or "none"


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
    reading is an error in the data, left for the fitter's checks to report), or when a
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

