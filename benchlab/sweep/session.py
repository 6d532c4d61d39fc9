"""Session records on disk (see docs/session-format.md): writers that never lose a measured point, and readers.

The CSV format and its one reader live in :mod:`benchlab.sweepfile` (below ``sweep/``, ``extract/`` and
``library/``, which all read records); this module writes the format with that module's columns.

Each point is appended to the part's CSV, flushed and fsync'd before the engine takes the next one,
so a crash, ``kill -9`` or a pulled cable loses at most the point in flight. JSON files are replaced
atomically (write a temporary file, fsync, rename), so they are always whole. A sweep's sidecar is
written with ``complete: false`` when the sweep starts and only marked complete at its end.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from benchlab import names
from benchlab.errors import InputError
from benchlab.sweep.records import STATUSES, SweepOutcome, SweepPoint
from benchlab.sweepfile import CSV_COLUMNS, SESSION_FORMAT, SWEEP_FORMAT, FitPoints, SweepTable, read_table


def now_iso() -> str:
    """The current UTC time, ISO-8601 with seconds."""
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def check_name(kind: str, name: str) -> str:
    """Refuse a lot name or part label that cannot be a file name on every system (see ``benchlab.names``)."""
    return names.check_name(kind, name)


def write_json_atomic(path: Path, data: dict[str, Any]) -> None:
    """Replace ``path`` with ``data`` as JSON so a reader never sees half a file."""
    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "w", encoding="utf-8") as fh:
        json.dump(data, fh, indent=1, allow_nan=False, default=_json_default)
        fh.write("\n")
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)
    _fsync_dir(path.parent)


def _json_default(value):
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if hasattr(value, "to_dict"):
        return value.to_dict()
    raise TypeError(f"cannot store {type(value).__name__} in JSON")


def _fsync_dir(directory: Path) -> None:
    # make a new or renamed file's directory entry durable too (POSIX); harmless elsewhere
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _finite_or_none(value: float | None):
    return None if value is None or not math.isfinite(value) else value


class SweepRecorder:
    """Writes one part's ``<label>.csv`` point by point and its ``<label>.json`` sidecar.

    Parameters
    ----------
    directory : Path
        The session folder.
    label, lot : str
        Part label and lot name.
    plan : dict
        The sweep plan as plain data (stored in the sidecar).
    """

    def __init__(self, directory: Path, label: str, lot: str, plan: dict[str, Any]):
        self.label = check_name("part label", label)
        self.csv_path = Path(directory) / f"{label}.csv"
        self.json_path = Path(directory) / f"{label}.json"
        self.meta: dict[str, Any] = {"format": SWEEP_FORMAT, "label": label, "lot": lot, "started": now_iso(),
                                     "ended": None, "complete": False, "classification": None,
                                     "reason": "sweep in progress or interrupted", "powered_s": 0.0,
                                     "points": 0, "plan": plan, "fits": []}
        self._fh = open(self.csv_path, "w", encoding="utf-8", newline="")
        self._fh.write(",".join(CSV_COLUMNS) + "\n")
        self._sync()
        write_json_atomic(self.json_path, self.meta)
        self.count = 0

    def _sync(self) -> None:
        self._fh.flush()
        os.fsync(self._fh.fileno())

    def append(self, point: SweepPoint) -> None:
        """Append one point and make it durable (flush + fsync) before returning."""
        if point.status not in STATUSES or point.direction not in ("up", "down"):
            raise ValueError(f"point status {point.status!r} / direction {point.direction!r} is not in the format")
        row = [point.point, f"{point.time_s:.6f}", repr(float(point.vgs)), repr(float(point.id)),
               repr(float(point.v_source)), repr(float(point.i_source)), point.status, point.direction,
               repr(float(point.spread_v))]
        self._fh.write(",".join(str(v) for v in row) + "\n")
        self._sync()
        self.count += 1

    def finish(self, outcome: SweepOutcome) -> None:
        """Close the CSV and write the final sidecar (``complete`` as the outcome says)."""
        try:
            self._sync()
        finally:
            self._fh.close()
        # count what is on disk: an interrupt can land between writing a point and counting it
        with open(self.csv_path, encoding="utf-8") as fh:
            on_disk = max(fh.read().count("\n") - 1, 0)
        self.meta.update({"ended": now_iso(), "complete": bool(outcome.complete),
                          "classification": outcome.classification, "reason": outcome.reason,
                          "stop_reason": outcome.stop_reason, "powered_s": round(outcome.powered_s, 6),
                          "points": on_disk, "vgs_at_ref": _finite_or_none(outcome.vgs_at_ref),
                          "reference_current_a": outcome.reference_current_a, "error": outcome.error,
                          "shutdown_problems": list(outcome.shutdown_problems)})
        write_json_atomic(self.json_path, self.meta)


class SessionWriter:
    """One sitting at the bench: creates the folder and ``session.json``, hands out part recorders."""

    def __init__(self, directory: Path, meta: dict[str, Any]):
        self.path = Path(directory)
        self.meta = meta

    @classmethod
    def create(cls, root: str | os.PathLike, lot: str, *, operator: str = "", ambient_c: float | None = None,
               bench: dict[str, Any] | None = None, instruments: dict[str, str] | None = None,
               planned_count: int | None = None, started: datetime | None = None) -> "SessionWriter":
        """Create ``<root>/<YYYYmmdd-HHMMSS>-<lot>/`` with its ``session.json``."""
        check_name("lot name", lot)
        started = started or datetime.now(timezone.utc)
        root_path = Path(root)
        root_path.mkdir(parents=True, exist_ok=True)
        stamp = started.strftime("%Y%m%d-%H%M%S")
        directory = root_path / f"{stamp}-{lot}"
        suffix = 1
        while directory.exists():  # two sessions in the same second: keep both
            suffix += 1
            directory = root_path / f"{stamp}-{lot}-{suffix}"
        directory.mkdir()
        meta = {"format": SESSION_FORMAT, "id": directory.name, "operator": operator,
                "started": started.isoformat(timespec="seconds"), "ended": None, "lot": lot,
                "ambient_c": ambient_c, "bench": bench or {}, "instruments": instruments or {},
                "planned_count": planned_count, "parts": []}
        writer = cls(directory, meta)
        writer.save()
        return writer

    @classmethod
    def reopen(cls, directory: str | os.PathLike) -> "SessionWriter":
        """Open an existing session to resume it (``ended`` is cleared until it finishes again)."""
        meta = _load_json(Path(directory) / "session.json")
        if meta.get("format") != SESSION_FORMAT:
            raise InputError(f"not a benchlab session (format {meta.get('format')!r})",
                             path=str(Path(directory) / "session.json"))
        where = str(Path(directory) / "session.json")
        count = meta.get("planned_count")
        if count is not None and (isinstance(count, bool) or not isinstance(count, int) or count < 1):
            raise InputError(f"planned_count must be a whole number of parts (1 or more) or null, got {count!r}",
                             path=where)
        names.check_session_names(meta, where)
        names.check_name("lot name", meta.get("lot"), path=where)  # a resumed session needs its lot
        meta["ended"] = None
        writer = cls(Path(directory), meta)
        writer.save()
        return writer

    def save(self) -> None:
        write_json_atomic(self.path / "session.json", self.meta)

    def completed_labels(self) -> set[str]:
        """Labels whose sweep finished (``complete: true``)."""
        done = set()
        for label in self.meta.get("parts", []):
            try:
                path = names.inside(self.path, label, ".json")
                if json.loads(path.read_text(encoding="utf-8")).get("complete"):
                    done.add(label)
            except (OSError, ValueError):
                continue
        return done

    def start_part(self, label: str, plan: dict[str, Any]) -> SweepRecorder:
        """Begin a part's record; an earlier interrupted record of the same label is kept aside."""
        check_name("part label", label)
        if label in self.meta["parts"]:
            if label in self.completed_labels():
                raise InputError(f"part '{label}' is already measured in this session", path=str(self.path))
            n = 1
            while (self.path / f"{label}.interrupted-{n}.csv").exists():
                n += 1
            # the sidecar first, then the CSV (whose name picks n): a process killed between the two leaves the
            # CSV in place, and the next start moves it beside its sidecar under the same n
            for ext in ("json", "csv"):
                old = self.path / f"{label}.{ext}"
                if old.exists():
                    os.replace(old, self.path / f"{label}.interrupted-{n}.{ext}")
        else:
            self.meta["parts"].append(label)
        recorder = SweepRecorder(self.path, label, self.meta["lot"], plan)
        self.save()
        return recorder

    def finish(self) -> None:
        self.meta["ended"] = now_iso()
        self.save()


# ----------------------------------------------------------------------------------------------- readers

@dataclass(frozen=True)
class SweepData:
    """One sweep read back: columns as numpy arrays plus the sidecar (empty dict when missing)."""

    label: str
    point: np.ndarray
    time_s: np.ndarray
    vgs: np.ndarray
    id: np.ndarray
    v_source: np.ndarray
    i_source: np.ndarray
    status: tuple[str, ...]
    direction: tuple[str, ...]
    spread_v: np.ndarray | None = None
    meta: dict[str, Any] = field(default_factory=dict)
    truncated: bool = False  # the CSV's last line was cut short (crash mid-write) and was skipped
    table: SweepTable | None = field(default=None, repr=False, compare=False)

    @property
    def complete(self) -> bool:
        return bool(self.meta.get("complete", False))

    @property
    def detect_current(self) -> float | None:
        """The plan's detection current (A): below it the part was not conducting yet (None without a plan)."""
        value = (self.meta.get("plan") or {}).get("detect_current_a")
        return float(value) if isinstance(value, (int, float)) and value > 0 else None

    def fit_points(self) -> FitPoints:
        """The points a fit may use: the one rule of :func:`benchlab.sweepfile.fit_points` (status ok, in point
        order, at or above the plan's detection current or the noise floor the data show)."""
        return self.table.fit_points(self.detect_current)

    def to_dict(self) -> dict[str, Any]:
        return {"label": self.label, "point": self.point.tolist(), "time_s": self.time_s.tolist(),
                "vgs": self.vgs.tolist(), "id": self.id.tolist(), "v_source": self.v_source.tolist(),
                "i_source": self.i_source.tolist(), "status": list(self.status), "direction": list(self.direction),
                "spread_v": None if self.spread_v is None else self.spread_v.tolist(), "meta": self.meta,
                "truncated": self.truncated}


@dataclass(frozen=True)
class SessionData:
    """A session read back."""

    path: Path
    meta: dict[str, Any]
    sweeps: dict[str, SweepData]

    def to_dict(self) -> dict[str, Any]:
        return {"path": str(self.path), "meta": self.meta, "sweeps": {k: v.to_dict() for k, v in self.sweeps.items()}}


# Role keys an older benchlab wrote into sidecars (renamed on read; the file itself is left as it is).
_LEGACY_ROLE_KEYS = {"source_meter": "smu"}


def _migrated(meta: Any) -> Any:
    """A sidecar with old role keys renamed (``instruments`` and ``bench.instruments``)."""
    if not isinstance(meta, dict):
        return meta
    tables = [meta.get("instruments"), (meta.get("bench") or {}).get("instruments")
              if isinstance(meta.get("bench"), dict) else None]
    for table in tables:
        if isinstance(table, dict):
            for old, new in _LEGACY_ROLE_KEYS.items():
                if old in table and new not in table:
                    table[new] = table.pop(old)
    return meta


def _load_json(path: Path) -> dict[str, Any]:
    try:
        return _migrated(json.loads(path.read_text(encoding="utf-8")))
    except FileNotFoundError:
        raise InputError("file not found", path=str(path)) from None
    except ValueError as exc:
        raise InputError(f"not valid JSON ({exc})", path=str(path)) from None


def read_sweep(path: str | os.PathLike) -> SweepData:
    """Read one part's sweep from its ``.csv`` or ``.json`` (the other one is found beside it).

    The CSV goes through the one sweep reader (:func:`benchlab.sweepfile.read_table`): a cut last line
    (a crash mid-write) is skipped and flagged with ``truncated=True``; unknown extra columns are ignored.
    """
    path = Path(path)
    csv_path = path.with_suffix(".csv")
    json_path = path.with_suffix(".json")
    if not csv_path.exists():
        raise InputError("sweep file not found", path=str(csv_path))
    meta = _load_json(json_path) if json_path.exists() else {}
    table = read_table(csv_path)
    return SweepData(label=meta.get("label", csv_path.stem), point=table.point_numbers().astype(int),
                     time_s=table.number("time_s"), vgs=table.number("vgs"), id=table.number("id"),
                     v_source=table.number("v_source"), i_source=table.number("i_source"),
                     status=tuple(table.text("status", "ok")), direction=tuple(table.text("direction", "up")),
                     spread_v=table.number("spread_v"), meta=meta, truncated=table.truncated, table=table)


def read_session(directory: str | os.PathLike) -> SessionData:
    """Read a whole session folder: ``session.json`` and every part listed in it that has a CSV."""
    directory = Path(directory)
    meta = _load_json(directory / "session.json")
    if meta.get("format") != SESSION_FORMAT:
        raise InputError(f"not a benchlab session (format {meta.get('format')!r})", path=str(directory))
    names.check_session_names(meta, str(directory / "session.json"))
    sweeps = {}
    for label in meta.get("parts", []):
        csv_path = names.inside(directory, label, ".csv")
        if csv_path.exists():
            sweeps[label] = read_sweep(csv_path)
    return SessionData(path=directory, meta=meta, sweeps=sweeps)
