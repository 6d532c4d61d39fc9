"""Read session records (docs/session-format.md) into plain data for the library import.

The points go through the one sweep reader, :mod:`benchlab.sweepfile` (shared with ``benchlab fit`` and the
session writer's own reader), so a record imports exactly as it fits. Tolerates what a crash leaves behind: a cut
last CSV line is skipped, a sweep whose sidecar is missing is read as incomplete with no classification.
Anything else malformed is an ``InputError`` that names the file and row.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from benchlab.errors import InputError
from benchlab.names import check_name, check_session_names
from benchlab.sweepfile import FitPoints, SweepTable, read_table


@dataclass(frozen=True)
class SessionSweep:
    """One part's sweep as recorded: the points (read by :func:`benchlab.sweepfile.read_table`), sidecar data and
    the files it came from."""

    label: str
    lot: str | None
    csv_path: Path
    json_path: Path | None
    table: SweepTable
    sidecar: dict = field(default_factory=dict)

    @property
    def point(self) -> list[int]:
        """Each recorded point's index (as written; the row's place when the file has no index)."""
        return self.table.point_numbers().tolist()

    @property
    def vgs(self) -> list[float]:
        return self.table.number("vgs").tolist()

    @property
    def id(self) -> list[float]:  # noqa: A003 (trade name)
        return self.table.number("id").tolist()

    @property
    def status(self) -> list[str]:
        return self.table.text("status", "ok").tolist()

    @property
    def direction(self) -> list[str]:
        return self.table.text("direction").tolist()

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

    def fit_points(self) -> FitPoints:
        """The points a fit may use: the one rule of :func:`benchlab.sweepfile.fit_points`, as ``benchlab fit``
        applies it (status ``ok``, in point order, at or above the plan's detection current or the noise floor
        the data show; the stated VGS noise carried along)."""
        return self.table.fit_points(self.detect_current)


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
        table = read_table(csv_path)
        where = str(json_path or csv_path)
        # labels and lots read from files obey the command line's rule (they become names in the library,
        # SPICE, CSV and HTML); a crafted one is refused and nothing is imported
        label = check_name("part label", sidecar.get("label") or stem, path=where)
        lot = sidecar.get("lot") or meta.get("lot")
        if lot is not None:
            check_name("lot name", lot, path=where)
        sweeps.append(SessionSweep(label=label, lot=lot, csv_path=csv_path, json_path=json_path, table=table,
                                   sidecar=sidecar))
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
