"""Read session records (docs/session-format.md) into plain data for the library import.

Tolerates what a crash leaves behind: a truncated last CSV line is dropped, a sweep whose sidecar is
missing is read as incomplete with no classification. Anything else malformed is an ``InputError`` that
names the file and row.
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from benchlab.errors import InputError
from benchlab.kinds import PointStatus
from benchlab.names import check_name, check_session_names

REQUIRED_COLUMNS = ("vgs", "id")


@dataclass(frozen=True)
class SessionSweep:
    """One part's sweep as recorded: raw points, sidecar data and the files it came from."""

    label: str
    lot: str | None
    csv_path: Path
    json_path: Path | None
    sidecar: dict = field(default_factory=dict)
    point: tuple[int, ...] = ()
    vgs: tuple[float, ...] = ()
    id: tuple[float, ...] = ()
    status: tuple[str, ...] = ()
    direction: tuple[str, ...] = ()

    @property
    def complete(self) -> bool:
        return bool(self.sidecar.get("complete", False))

    @property
    def interrupted(self) -> bool:
        """The sweep did not finish (stopped, killed, or cut short): the part was not judged."""
        return not self.complete or self.sidecar.get("classification") == "interrupted"

    @property
    def classification(self) -> str | None:
        """The sweep's verdict; ``interrupted`` for any sweep that did not finish, whatever an older benchlab
        wrote (it judged interrupted parts, and a good part became 'open' for good)."""
        return "interrupted" if self.interrupted else self.sidecar.get("classification")

    @property
    def reason(self) -> str:
        return str(self.sidecar.get("reason") or "")

    @property
    def detect_current(self) -> float | None:
        """The plan's detection current (A): below it the part was not conducting yet."""
        value = (self.sidecar.get("plan") or {}).get("detect_current_a")
        return float(value) if isinstance(value, (int, float)) and value > 0 else None

    def fit_points(self) -> tuple[list[float], list[float], list[str] | None]:
        """VGS, ID and direction of the points a fit may use (the same rules as ``benchlab fit``).

        Status ``ok`` and finite only; points below the plan's detection current (or, without a plan,
        at zero or negative current) are the search before the part conducted, not data. The direction
        is None when the CSV has no direction column (the fitter then infers it).
        """
        floor = self.detect_current
        vgs, ids, dirs = [], [], []
        directions = self.direction or ("",) * len(self.vgs)
        for v, i, s, d in zip(self.vgs, self.id, self.status, directions):
            if s != PointStatus.OK or v is None or i is None or not (math.isfinite(v) and math.isfinite(i)):
                continue
            if (floor is not None and i < floor) or i <= 0:
                continue
            vgs.append(v)
            ids.append(i)
            dirs.append(d)
        return vgs, ids, (dirs if any(dirs) else None)


@dataclass(frozen=True)
class Session:
    """A session folder: its metadata and its sweeps in the order the session lists them."""

    path: Path
    meta: dict
    sweeps: tuple[SessionSweep, ...]

    @property
    def id(self) -> str:
        return str(self.meta.get("id") or self.path.name)

    @property
    def lot(self) -> str | None:
        return self.meta.get("lot")

    @property
    def temperature_k(self) -> float | None:
        """The recorded ambient temperature (K), the parts' temperature during the sweeps; None if unknown."""
        value = self.meta.get("ambient_c")
        if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
            return float(value) + 273.15
        return None


def _read_json(path: Path) -> dict[str, Any]:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror or exc}", path=str(path)) from exc
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid JSON: {exc}", path=str(path)) from exc
    if not isinstance(data, dict):
        raise InputError("expected a JSON object", path=str(path))
    return data


def _number(text: str) -> float:
    # over-range readings are recorded as inf/nan; float() parses both spellings
    return float(text) if text.strip() else math.nan


def read_points(csv_path: Path) -> tuple[tuple[int, ...], tuple[float, ...], tuple[float, ...], tuple[str, ...],
                                         tuple[str, ...]]:
    """The ``point, vgs, id, status, direction`` columns of a sweep CSV (other columns ignored).

    A last line cut short by a crash is dropped; any other bad row raises ``InputError`` naming the row.
    """
    try:
        with csv_path.open(newline="", encoding="utf-8") as handle:
            rows = list(csv.reader(handle))
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror or exc}", path=str(csv_path)) from exc
    except UnicodeDecodeError:
        raise InputError("not a UTF-8 text file (a sweep CSV is UTF-8 text: binary, UTF-16 or Latin-1 files are "
                         "refused)", path=str(csv_path)) from None
    except csv.Error as exc:  # a field over the csv module's limit (131072 bytes), a NUL byte, ...
        raise InputError(f"not a readable CSV ({exc})", path=str(csv_path)) from None
    if not rows:
        raise InputError("empty file (no header row)", path=str(csv_path))
    header = [h.strip() for h in rows[0]]
    missing = [c for c in REQUIRED_COLUMNS if c not in header]
    if missing:
        raise InputError(f"missing column(s) {', '.join(missing)} in the header", path=str(csv_path))
    col = {name: header.index(name) for name in header}
    points, vgs, ids, status, direction = [], [], [], [], []
    seen: set[int] = set()
    body = rows[1:]
    for n, row in enumerate(body, start=1):
        if not row:
            continue
        try:
            if len(row) < len(header):
                raise ValueError("too few fields")
            v = _number(row[col["vgs"]])
            i = _number(row[col["id"]])
            p = int(row[col["point"]]) if "point" in col else n - 1
        except ValueError as exc:
            if n == len(body):  # the point in flight when the recorder stopped
                break
            raise InputError(f"unreadable row ({exc})", path=str(csv_path), row=n) from exc
        row_status = row[col["status"]].strip() if "status" in col else "ok"
        if row_status == "ok":  # the rule `benchlab fit` applies: an ok point is two finite numbers
            for name, value in (("vgs", v), ("id", i)):
                if not math.isfinite(value):
                    cell = row[col[name]].strip()
                    raise InputError(f"{name} value '{cell}' is not a finite number in a point with status ok "
                                     "(benchlab fit refuses it too)", path=str(csv_path), row=n)
        if p in seen:
            raise InputError(f"point number {p} appears twice", path=str(csv_path), row=n)
        seen.add(p)
        points.append(p)
        vgs.append(v)
        ids.append(i)
        status.append(row_status)
        direction.append(row[col["direction"]].strip().lower() if "direction" in col else "")
    return tuple(points), tuple(vgs), tuple(ids), tuple(status), tuple(direction)


def read_session(path: str | Path) -> Session:
    """Read a session folder (``session.json`` plus ``<label>.csv`` / ``<label>.json`` per part).

    Raises
    ------
    InputError
        When the folder or its ``session.json`` is missing or unreadable, or a sweep file is malformed.
    """
    folder = Path(path)
    if not folder.is_dir():
        raise InputError("not a session folder", path=str(folder))
    meta_path = folder / "session.json"
    if not meta_path.exists():
        raise InputError("no session.json here: not a session folder", path=str(folder))
    meta = _read_json(meta_path)
    check_session_names(meta, str(meta_path))
    sidecars: dict[str, tuple[Path, dict]] = {}
    for json_path in sorted(folder.glob("*.json")):
        if json_path.name == "session.json":
            continue
        data = _read_json(json_path)
        if not str(data.get("format", "")).startswith("benchlab-sweep/"):
            continue
        sidecars[json_path.stem] = (json_path, data)
    # '<label>.interrupted-N.*' are records a resumed session set aside; the sweep that replaced them counts
    stems = {s for s in set(sidecars) | {p.stem for p in folder.glob("*.csv")} if ".interrupted-" not in s}
    listed = [str(p) for p in meta.get("parts") or []]

    def order(stem: str) -> tuple:
        label = sidecars[stem][1].get("label", stem) if stem in sidecars else stem
        return (listed.index(label) if label in listed else len(listed), stem)

    sweeps = []
    for stem in sorted(stems, key=order):
        csv_path = folder / f"{stem}.csv"
        json_path, sidecar = sidecars.get(stem, (None, {}))
        if not csv_path.exists():
            raise InputError(f"sweep '{stem}' has a sidecar but no CSV", path=str(json_path))
        point, vgs, ids, status, direction = read_points(csv_path)
        where = str(json_path or csv_path)
        # labels and lots read from files obey the command line's rule (they become names in the library,
        # SPICE, CSV and HTML); a crafted one is refused and nothing is imported
        label = check_name("part label", sidecar.get("label") or stem, path=where)
        lot = sidecar.get("lot") or meta.get("lot")
        if lot is not None:
            check_name("lot name", lot, path=where)
        sweeps.append(SessionSweep(label=label, lot=lot, csv_path=csv_path,
                                   json_path=json_path, sidecar=sidecar, point=point, vgs=vgs, id=ids,
                                   status=status, direction=direction))
    return Session(path=folder, meta=meta, sweeps=tuple(sweeps))


def find_sessions(paths) -> list[Path]:
    """Session folders named by ``paths``: each is a session folder, or a folder of session folders.

    Raises
    ------
    InputError
        For a path that is neither (nothing is imported then).
    """
    found: list[Path] = []
    for raw in paths:
        folder = Path(raw)
        if not folder.exists():
            raise InputError("no such folder", path=str(folder))
        if (folder / "session.json").is_file():
            found.append(folder)
            continue
        inner = sorted(p for p in folder.iterdir() if (p / "session.json").is_file()) if folder.is_dir() else []
        if not inner:
            raise InputError("not a session folder (no session.json here or in its subfolders)", path=str(folder))
        found += inner
    for folder in found:  # an unreadable session.json, or a bad name in it, is refused before any library is
        meta_path = folder / "session.json"  # opened or created
        check_session_names(_read_json(meta_path), str(meta_path))
    return found
