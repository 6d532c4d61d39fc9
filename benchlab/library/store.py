"""The device library: a SQLite file (WAL mode, foreign keys on) or a PostgreSQL database, every write in one
transaction (see :mod:`benchlab.library.backend`).

All SQL is parameterized; labels, lots, notes and reasons never become part of a statement's text.
"""

from __future__ import annotations

import getpass
import json
import math
import os
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterable, Iterator, Mapping, Sequence

from benchlab.errors import LibraryError
from benchlab.library import operating, schema
from benchlab.library.backend import Database, is_url, open_database
from benchlab.library.designs import DesignStore
from benchlab.library.records import PART_STATES, POLARITIES, PartRecord, natural_key, to_json, utc_now
from benchlab.models import DeviceParams
from benchlab.names import check_name

LIBRARY_ENV = "BENCHLAB_LIBRARY"

_PART_SELECT = """
SELECT p.id, l.name, p.label, p.polarity, p.state, p.reason, p.package, p.notes, p.classification,
       f.id, f.params_json, f.stderr_json, f.flags_json, p.operating_current, f.vgs_ref, f.gm_op, f.gm_current
FROM parts p
JOIN lots l ON l.id = p.lot_id
LEFT JOIN fits f ON f.id = (SELECT max(id) FROM fits WHERE part_id = p.id)
"""


def default_library_path() -> Path | str:
    """Where the library lives unless ``--library`` says otherwise.

    ``$BENCHLAB_LIBRARY`` when set (a file path or a ``postgresql://`` URL, returned as text), else
    ``user_data_dir("benchlab")/library.db`` (platformdirs).
    """
    env = os.environ.get(LIBRARY_ENV)
    if env:
        return env.strip() if is_url(env.strip()) else Path(env).expanduser()
    from platformdirs import user_data_dir

    return Path(user_data_dir("benchlab")) / "library.db"


def default_operator() -> str:
    """The login name of whoever runs benchlab (``getpass.getuser``), or ``unknown`` when it has none."""
    try:
        return getpass.getuser() or "unknown"
    except (OSError, KeyError, ImportError):  # no LOGNAME/USER and no password-file entry
        return "unknown"


def _row_to_part(row: Sequence[Any]) -> PartRecord:
    (pid, lot, label, polarity, state, reason, package, notes, classification,
     fit_id, params_json, stderr_json, flags_json, operating_current, vgs_ref, gm_op, gm_current) = row
    try:
        params = DeviceParams.from_dict(json.loads(params_json)) if params_json else None
    except (TypeError, ValueError) as exc:
        # written by an older version that let a NaN through (stored as null): say which part, no traceback
        raise LibraryError(f"part {lot}/{label}: its stored curve is unreadable ({exc}); "
                           "re-enter or re-import that part into a new library") from exc
    stderr = {k: v for k, v in (json.loads(stderr_json) if stderr_json else {}).items() if v is not None}
    return PartRecord(
        id=pid, lot=lot, label=label, polarity=polarity, state=state, reason=reason, package=package,
        notes=notes, params=params, stderr=stderr,
        flags=tuple(json.loads(flags_json)) if flags_json else (), fit_id=fit_id,
        classification=classification, operating_current=operating_current, vgs_ref=vgs_ref, gm_op=gm_op,
        gm_current=gm_current,
    )


class Library:
    """An open device library. Use :meth:`open`; it is a context manager that closes the connection.

    Parameters
    ----------
    db : Database
        An open backend (:func:`benchlab.library.backend.open_database`); transactions are explicit.
    path : str
        The file path or the URL without its password (for messages).
    operator : str, optional
        Who is working: kept with every state change (default :func:`default_operator`).
    """

    def __init__(self, db: Database, path: str = "", operator: str | None = None):
        self._db = db
        self.path = path
        self.operator = _clean_name(operator, "operator name") if operator else default_operator()
        self._in_write = False
        self.design_store = DesignStore(self)

    # -- opening ---------------------------------------------------------------------------------
    @classmethod
    def open(cls, path: str | os.PathLike | None = None, *, timeout_s: float = 30.0,
             create: bool = True, operator: str | None = None) -> "Library":
        """Open (creating and migrating as needed) the library at ``path`` (default :func:`default_library_path`).

        Parameters
        ----------
        path : path-like or str, optional
            The database file (its folder is created when missing), or a ``postgresql://`` URL of an
            existing database (its tables are created on first use).
        timeout_s : float
            How long a write waits for another writer before giving up.
        create : bool
            Create the file when it does not exist (else a ``LibraryError`` names the missing file).
        operator : str, optional
            Who is working (kept with each state change); default :func:`default_operator`.

        Returns
        -------
        Library
        """
        operator = _clean_name(operator, "operator name") if operator else None  # checked before connecting
        target = path if path is not None else default_library_path()
        target = str(target).strip() if is_url(str(target).strip()) else Path(target)
        db = open_database(target, timeout_s=timeout_s, create=create)
        try:
            before = db.schema_version()
            schema.migrate(db, path=db.target)
        except db.errors as exc:
            db.close()
            if db.kind == "sqlite":
                raise LibraryError(f"{db.target}: not a usable library file: {exc}") from exc
            raise LibraryError(f"{db.target}: not a usable library database: {exc}") from exc
        except BaseException:
            db.close()
            raise
        lib = cls(db, db.target, operator)
        if 0 < before < operating.SCHEMA_VERSION:  # fits stored before the operating figures existed: fill them
            with lib.write():
                operating.refresh(lib)
        return lib

    def close(self) -> None:
        """Close the connection."""
        self._db.close()

    def __enter__(self) -> "Library":
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    @property
    def connection(self) -> Database:
        """The underlying backend (for the library's own modules and tests)."""
        return self._db

    @property
    def backend(self) -> str:
        """``sqlite`` or ``postgresql``."""
        return self._db.kind

    # -- transactions ----------------------------------------------------------------------------
    @contextmanager
    def write(self) -> Iterator[Database]:
        """One write transaction: everything inside commits together or not at all.

        Writers take turns (SQLite: ``BEGIN IMMEDIATE``; PostgreSQL: an advisory lock held to the commit).
        A lost connection is one ``LibraryError`` saying nothing of the change was kept.
        """
        if self._in_write:
            yield self._db
            return
        try:
            self._db.begin_write()
        except self._db.errors as exc:
            raise self._failure(exc, "could not start a change") from exc
        self._in_write = True
        try:
            yield self._db
            self._db.commit()
        except self._db.errors as exc:
            self._db.rollback()
            raise self._failure(exc, "the library refused the change") from exc
        except BaseException:
            self._db.rollback()
            raise
        finally:
            self._in_write = False

    def _failure(self, exc: BaseException, what: str) -> LibraryError:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        if self._db.is_connection_lost(exc):
            return LibraryError(f"{self.path}: lost the connection to the library ({first}); nothing of this "
                                f"change was written, the library is as it was")
        return LibraryError(f"{self.path}: {what}, nothing was written: {first}")

    @contextmanager
    def snapshot(self) -> Iterator[Database]:
        """A read transaction: several queries see one consistent state of the library."""
        if self._in_write or self._db.in_transaction:
            yield self._db
            return
        try:
            self._db.begin_read()
        except self._db.errors as exc:
            raise self._failure(exc, "could not read") from exc
        try:
            yield self._db
        finally:
            if self._db.in_transaction:
                self._db.commit()

    # -- lots ------------------------------------------------------------------------------------
    def lot_id(self, name: str, *, create: bool = False, description: str = "") -> int:
        """Database id of lot ``name``; created when ``create`` (inside the caller's transaction)."""
        name = check_name("lot name", name, error=LibraryError) if create else _clean_name(name, "lot")
        row = self._db.execute("SELECT id FROM lots WHERE name = ?", (name,)).fetchone()
        if row:
            return int(row[0])
        if not create:
            raise LibraryError(f"no lot named '{name}' in the library")
        new_id = self._db.insert("INSERT INTO lots (name, description, created) VALUES (?, ?, ?)",
                                 (name, description, utc_now()))
        return new_id

    def lots(self) -> list[dict[str, Any]]:
        """Every lot with its part counts per state."""
        with self.snapshot() as conn:
            rows = conn.execute(
                "SELECT l.name, l.description, l.created, p.state, count(p.id) FROM lots l "
                "LEFT JOIN parts p ON p.lot_id = l.id GROUP BY l.id, p.state ORDER BY l.name").fetchall()
        lots: dict[str, dict[str, Any]] = {}
        for name, description, created, state, count in rows:
            entry = lots.setdefault(name, {"name": name, "description": description, "created": created,
                                           "parts": 0, **{s: 0 for s in PART_STATES}})
            if state is not None:
                entry[state] = count
                entry["parts"] += count
        return list(lots.values())

    # -- parts -----------------------------------------------------------------------------------
    def add_part(self, label: str, lot: str = "default", polarity: str = "N",
                 params: DeviceParams | None = None, stderr: dict | None = None,
                 package: str = "", notes: str = "") -> PartRecord:
        """Add a part (optionally with a hand-entered curve) and return it.

        Raises
        ------
        LibraryError
            When the label is empty, the polarity unknown, or the lot already holds that label.
        """
        label = check_name("part label", label, error=LibraryError)
        polarity = _check_polarity(polarity)
        if params is not None and not isinstance(params, DeviceParams):
            raise LibraryError("params must be a DeviceParams")
        if params is not None:
            # a NaN or infinity would be stored as null and make the part unreadable for every later command
            bad = [k for k, v in params.to_dict().items()
                   if isinstance(v, float) and not math.isfinite(v)]
            if bad:
                raise LibraryError(f"part {label}: not a finite number: {', '.join(bad)}")
        with self.write() as conn:
            lot_id = self.lot_id(lot, create=True)
            part_id = self._insert_part(lot_id, label, polarity, package, notes)
            if params is not None:
                self.insert_fit(part_id, source="hand", params=params, stderr=stderr or {})
        return self.get_part(part_id)

    def _insert_part(self, lot_id: int, label: str, polarity: str, package: str = "", notes: str = "",
                     state: str = "in_stock", reason: str | None = None,
                     classification: str | None = None, created: str | None = None) -> int:
        check_name("part label", label, error=LibraryError)  # every way in: hand entry, session and JSON import
        # checked before the insert (inside the caller's write transaction, so no other writer can slip in):
        # on PostgreSQL a failed statement would spoil the whole transaction
        if self._db.execute("SELECT 1 FROM parts WHERE lot_id = ? AND label = ?", (lot_id, label)).fetchone():
            lot = self._db.execute("SELECT name FROM lots WHERE id = ?", (lot_id,)).fetchone()[0]
            raise LibraryError(f"part '{lot}/{label}' already exists in the library")
        for what, text in (("package", package), ("notes", notes), ("reason", reason)):
            if text and "\x00" in text:
                raise LibraryError(f"part {label}: the {what} holds a NUL character")
        return self._db.insert(
            "INSERT INTO parts (lot_id, label, polarity, package, notes, state, reason, classification, "
            "created) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (lot_id, label, polarity, package or "", notes or "", state, reason, classification,
             created or utc_now()))

    def insert_fit(self, part_id: int, *, source: str, params: DeviceParams, stderr: Mapping | None = None,
                   flags: Iterable[str] = (), result: Mapping | None = None, sweep_id: int | None = None,
                   fitted_at: str | None = None, fitter_version: str | None = None) -> int:
        """Store a fit of a part (call inside :meth:`write`); it becomes the part's current curve, stored with its
        VGS at 250 uA and its gm at the part's operating current (:mod:`benchlab.library.operating`)."""
        result_data = json.loads(to_json(dict(result or {})))
        vgs_ref, gm_op, gm_current = operating.figures(params, operating.current_of(self, part_id))
        new_id = self._db.insert(
            "INSERT INTO fits (part_id, sweep_id, source, model, params_json, stderr_json, flags_json, "
            "result_json, fitted_at, fitter_version, vgs_ref, gm_op, gm_current) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (part_id, sweep_id, source, params.model, to_json(params.to_dict()), to_json(dict(stderr or {})),
             to_json(list(flags)), to_json(result_data), fitted_at or utc_now(), fitter_version, vgs_ref, gm_op,
             gm_current))
        return new_id

    def get_part(self, part: str | int | PartRecord) -> PartRecord:
        """A part by ``LABEL`` (when unique), ``LOT/LABEL``, database id or a record.

        Raises
        ------
        LibraryError
            When no part matches, or a bare label names parts in several lots (the message lists them).
        """
        if isinstance(part, PartRecord):
            part = part.id
        if isinstance(part, int):
            row = self._db.execute(_PART_SELECT + "WHERE p.id = ?", (part,)).fetchone()
            if row is None:
                raise LibraryError(f"no part with id {part} in the library")
            return _row_to_part(row)
        spec = str(part).strip()
        if not spec:
            raise LibraryError("empty part name")
        with self.snapshot() as conn:
            rows = conn.execute(_PART_SELECT + "WHERE p.label = ?", (spec,)).fetchall()
            if len(rows) > 1:
                lots = ", ".join(f"{r[1]}/{r[2]}" for r in sorted(rows, key=lambda r: r[1]))
                raise LibraryError(f"part label '{spec}' is ambiguous: it is in several lots ({lots}); "
                                   f"name it as LOT/LABEL")
            if rows:
                return _row_to_part(rows[0])
            # LOT/LABEL: try every '/' as the separator, since lots and labels may contain '/' themselves
            matches = []
            for i, char in enumerate(spec):
                if char == "/":
                    matches += conn.execute(_PART_SELECT + "WHERE l.name = ? AND p.label = ?",
                                            (spec[:i], spec[i + 1:])).fetchall()
        if len(matches) == 1:
            return _row_to_part(matches[0])
        if len(matches) > 1:
            raise LibraryError(f"part '{spec}' is ambiguous: " + ", ".join(f"lot '{r[1]}' label '{r[2]}'"
                                                                             for r in matches))
        raise LibraryError(f"no part '{spec}' in the library (name it as LABEL or LOT/LABEL)")

    def parts(self, lot: str | None = None, state: str | None = "in_stock") -> list[PartRecord]:
        """Parts, optionally of one lot and/or one state (``state=None`` for every state), in label order."""
        where, args = [], []
        if lot is not None:
            where.append("l.name = ?")
            args.append(lot)
        if state is not None:
            where.append("p.state = ?")
            args.append(_check_state(state))
        sql = _PART_SELECT + (("WHERE " + " AND ".join(where)) if where else "")
        rows = self._db.execute(sql, args).fetchall()
        return sorted((_row_to_part(r) for r in rows), key=lambda p: (natural_key(p.lot), natural_key(p.label)))

    def set_state(self, part: str | int | PartRecord, state: str, reason: str | None = None) -> PartRecord:
        """Move a part to ``state`` (a reason is required for ``rejected``); the change is kept in its history."""
        state = _check_state(state)
        reason = reason.strip() if isinstance(reason, str) else reason
        if state == "rejected" and not reason:
            raise LibraryError("rejecting a part needs a reason")
        with self.write():
            record = self.get_part(part)
            self._change_state(record.id, record.state, state, reason)
        return self.get_part(record.id)

    def _change_state(self, part_id: int, old: str | None, new: str, reason: str | None) -> None:
        self._db.execute("UPDATE parts SET state = ?, reason = ? WHERE id = ?", (new, reason, part_id))
        self._db.execute("INSERT INTO state_changes (part_id, changed_at, old_state, new_state, reason, operator) "
                         "VALUES (?, ?, ?, ?, ?, ?)", (part_id, utc_now(), old, new, reason, self.operator))

    def history(self, part: str | int | PartRecord) -> list[dict[str, Any]]:
        """The part's state changes, oldest first."""
        record = self.get_part(part)
        rows = self._db.execute("SELECT changed_at, old_state, new_state, reason, operator FROM state_changes "
                                "WHERE part_id = ? ORDER BY id", (record.id,)).fetchall()
        return [{"changed_at": r[0], "old_state": r[1], "new_state": r[2], "reason": r[3], "operator": r[4]}
                for r in rows]

    def fits(self, part: str | int | PartRecord) -> list[dict[str, Any]]:
        """Every fit of a part, oldest first, as plain data."""
        record = self.get_part(part)
        rows = self._db.execute(
            "SELECT id, sweep_id, source, model, params_json, stderr_json, flags_json, fitted_at, fitter_version "
            "FROM fits WHERE part_id = ? ORDER BY id", (record.id,)).fetchall()
        return [{"id": r[0], "sweep_id": r[1], "source": r[2], "model": r[3], "params": json.loads(r[4]),
                 "stderr": json.loads(r[5]), "flags": json.loads(r[6]), "fitted_at": r[7],
                 "fitter_version": r[8]} for r in rows]

    def sweeps(self, part: str | int | PartRecord, *, with_points: bool = True) -> list[dict[str, Any]]:
        """Every sweep of a part, oldest first: metadata (with the plan's detection current, or None) and,
        optionally, its points as lists."""
        record = self.get_part(part)
        with self.snapshot() as conn:
            rows = conn.execute(
                "SELECT id, session_path, csv_path, session_id, started, complete, classification, reason, "
                "sidecar_json FROM sweeps WHERE part_id = ? ORDER BY id", (record.id,)).fetchall()
            result = []
            for r in rows:
                plan = json.loads(r[8] or "{}").get("plan")
                detect = plan.get("detect_current_a") if isinstance(plan, dict) else None
                detect = float(detect) if isinstance(detect, (int, float)) and detect > 0 else None
                sweep = {"id": r[0], "session_path": r[1], "csv_path": r[2], "session_id": r[3], "started": r[4],
                         "complete": bool(r[5]), "classification": r[6], "reason": r[7], "detect_current_a": detect}
                if with_points:
                    pts = conn.execute("SELECT point, vgs, id, status, direction, spread_v FROM sweep_points "
                                       "WHERE sweep_id = ? ORDER BY point", (r[0],)).fetchall()
                    sweep.update(point=[p[0] for p in pts], vgs=[p[1] for p in pts], id=[p[2] for p in pts],
                                 status=[p[3] for p in pts], direction=[p[4] for p in pts],
                                 spread_v=[p[5] for p in pts])
                result.append(sweep)
        return result

    def fit_window(self, fit_id: int) -> tuple[float, float] | None:
        """The current range ``(i_min, i_max)`` (A) a fit was made on, or None when it has none
        (hand-entered curves, imports without a fit window)."""
        row = self._db.execute("SELECT result_json FROM fits WHERE id = ?", (int(fit_id),)).fetchone()
        try:
            window = (json.loads(row[0]).get("window") or {}) if row and row[0] else {}
            return float(window["i_min"]), float(window["i_max"])
        except (KeyError, TypeError, ValueError, AttributeError):
            return None

    # -- designs and binnings (kept in ``self.design_store``; these are its public face) ------------
    def record_design(self, design: Mapping[str, Any], parts: Sequence[PartRecord | str | int],
                      state: str = "reserved") -> int:
        """Store a design and reserve (or use) its parts: see :meth:`DesignStore.record`."""
        return self.design_store.record(design, parts, state)

    def design(self, design_id: int) -> dict[str, Any]:
        """A recorded design: see :meth:`DesignStore.get`."""
        return self.design_store.get(design_id)

    def designs(self) -> list[dict[str, Any]]:
        """Summary of every design: see :meth:`DesignStore.summaries`."""
        return self.design_store.summaries()

    def record_binning(self, scheme: Mapping[str, Any], members: Mapping[str, Sequence[PartRecord | str]]) -> int:
        """Store a binning: see :meth:`DesignStore.record_binning`."""
        return self.design_store.record_binning(scheme, members)

    def binning(self, binning_id: int) -> dict[str, Any]:
        """A stored binning: see :meth:`DesignStore.binning`."""
        return self.design_store.binning(binning_id)

    def info(self) -> dict[str, Any]:
        """Backend, where it is, schema version, row counts and backend facts (journal mode, server version)."""
        with self.snapshot() as conn:
            counts = {table: conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0]  # fixed names, not input
                      for table in ("lots", "parts", "sweeps", "fits", "designs", "binnings")}
            version = schema.schema_version(conn)
        return {"backend": self.backend, "path": self.path, "schema_version": version,
                "schema_latest": schema.latest_version(), **self._db.facts(), **counts}


def _clean_name(value: Any, what: str) -> str:
    text = str(value).strip() if value is not None else ""
    if not text:
        raise LibraryError(f"empty {what}")
    if any(ord(c) < 32 for c in text):
        raise LibraryError(f"{what} '{text!r}' holds control characters")
    return text


def _check_polarity(polarity: str) -> str:
    value = str(polarity).strip().upper()
    if value not in POLARITIES:
        raise LibraryError(f"polarity must be N or P, not '{polarity}'")
    return value


def _check_state(state: str) -> str:
    if state not in PART_STATES:
        raise LibraryError(f"unknown part state '{state}' (expected one of {', '.join(PART_STATES)})")
    return state
