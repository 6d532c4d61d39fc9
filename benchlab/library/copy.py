"""Copy a whole library to another one (SQLite <-> PostgreSQL, or file to file), ids kept, then verify.

Every table is copied row by row in key order inside ONE write transaction on the destination; before it
commits, the destination's rows are read back and their count and SHA-256 checksum compared with the
source's. A mismatch rolls everything back, so the destination is either a verified copy or untouched.
"""

from __future__ import annotations

import hashlib
import struct
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Iterable

from benchlab.errors import LibraryError

if TYPE_CHECKING:
    from benchlab.library.store import Library

# (table, its columns, SELECT in key order, INSERT) -- parents before children, for the foreign keys
TABLES: tuple[tuple[str, tuple[str, ...], str, str], ...] = (
    ("lots", ("id", "name", "description", "created"),
     "SELECT id, name, description, created FROM lots ORDER BY id",
     "INSERT INTO lots (id, name, description, created) VALUES (?, ?, ?, ?)"),
    ("parts", ("id", "lot_id", "label", "polarity", "package", "notes", "state", "reason", "classification",
               "created", "operating_current"),
     "SELECT id, lot_id, label, polarity, package, notes, state, reason, classification, created, operating_current "
     "FROM parts ORDER BY id",
     "INSERT INTO parts (id, lot_id, label, polarity, package, notes, state, reason, classification, created, "
     "operating_current) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"),
    ("sweeps", ("id", "part_id", "session_path", "csv_path", "session_id", "started", "complete", "classification",
                "reason", "sidecar_json", "imported"),
     "SELECT id, part_id, session_path, csv_path, session_id, started, complete, classification, reason, "
     "sidecar_json, imported FROM sweeps ORDER BY id",
     "INSERT INTO sweeps (id, part_id, session_path, csv_path, session_id, started, complete, classification, "
     "reason, sidecar_json, imported) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"),
    ("sweep_points", ("sweep_id", "point", "vgs", "id", "status", "direction", "spread_v"),
     "SELECT sweep_id, point, vgs, id, status, direction, spread_v FROM sweep_points ORDER BY sweep_id, point",
     "INSERT INTO sweep_points (sweep_id, point, vgs, id, status, direction, spread_v) VALUES (?, ?, ?, ?, ?, ?, ?)"),
    ("fits", ("id", "part_id", "sweep_id", "source", "model", "params_json", "stderr_json", "flags_json",
              "result_json", "fitted_at", "fitter_version", "vgs_ref", "gm_op", "gm_current"),
     "SELECT id, part_id, sweep_id, source, model, params_json, stderr_json, flags_json, result_json, fitted_at, "
     "fitter_version, vgs_ref, gm_op, gm_current FROM fits ORDER BY id",
     "INSERT INTO fits (id, part_id, sweep_id, source, model, params_json, stderr_json, flags_json, result_json, "
     "fitted_at, fitter_version, vgs_ref, gm_op, gm_current) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"),
    ("settings", ("name", "value"),
     "SELECT name, value FROM settings ORDER BY name",
     "INSERT INTO settings (name, value) VALUES (?, ?)"),
    ("designs", ("id", "created", "kind", "design_json"),
     "SELECT id, created, kind, design_json FROM designs ORDER BY id",
     "INSERT INTO designs (id, created, kind, design_json) VALUES (?, ?, ?, ?)"),
    ("design_parts", ("design_id", "part_id", "position"),
     "SELECT design_id, part_id, position FROM design_parts ORDER BY design_id, part_id",
     "INSERT INTO design_parts (design_id, part_id, position) VALUES (?, ?, ?)"),
    ("binnings", ("id", "created", "scheme_json"),
     "SELECT id, created, scheme_json FROM binnings ORDER BY id",
     "INSERT INTO binnings (id, created, scheme_json) VALUES (?, ?, ?)"),
    ("bin_members", ("binning_id", "part_id", "bin"),
     "SELECT binning_id, part_id, bin FROM bin_members ORDER BY binning_id, part_id",
     "INSERT INTO bin_members (binning_id, part_id, bin) VALUES (?, ?, ?)"),
    ("state_changes", ("id", "part_id", "changed_at", "old_state", "new_state", "reason", "operator"),
     "SELECT id, part_id, changed_at, old_state, new_state, reason, operator FROM state_changes ORDER BY id",
     "INSERT INTO state_changes (id, part_id, changed_at, old_state, new_state, reason, operator) "
     "VALUES (?, ?, ?, ?, ?, ?, ?)"),
    ("part_thermal", ("id", "part_id", "measurement", "vth_tempco", "vth_tempco_stderr", "kp_exponent",
                      "kp_exponent_stderr", "ztc_vgs", "ztc_vgs_stderr", "ztc_id", "ztc_id_stderr", "rth", "rth_stderr",
                      "session_path", "details_json", "measured_at"),
     "SELECT id, part_id, measurement, vth_tempco, vth_tempco_stderr, kp_exponent, kp_exponent_stderr, ztc_vgs, "
     "ztc_vgs_stderr, ztc_id, ztc_id_stderr, rth, rth_stderr, session_path, details_json, measured_at "
     "FROM part_thermal ORDER BY id",
     "INSERT INTO part_thermal (id, part_id, measurement, vth_tempco, vth_tempco_stderr, kp_exponent, "
     "kp_exponent_stderr, ztc_vgs, ztc_vgs_stderr, ztc_id, ztc_id_stderr, rth, rth_stderr, session_path, "
     "details_json, measured_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"),
)
BATCH_ROWS = 5000


@dataclass(frozen=True)
class TableCopy:
    """One table of a copy: rows and checksum, as read from the source and read back from the destination."""

    table: str
    rows: int
    checksum: str
    copied_rows: int
    copied_checksum: str

    @property
    def verified(self) -> bool:
        return self.rows == self.copied_rows and self.checksum == self.copied_checksum

    def to_dict(self) -> dict[str, Any]:
        return {"table": self.table, "rows": self.rows, "checksum": self.checksum, "copied_rows": self.copied_rows,
                "copied_checksum": self.copied_checksum, "verified": self.verified}


@dataclass(frozen=True)
class CopyReport:
    """What :func:`copy_library` did: source, destination and each table's verification."""

    source: str
    destination: str
    tables: tuple[TableCopy, ...]

    def to_dict(self) -> dict[str, Any]:
        return {"source": self.source, "destination": self.destination, "tables": [t.to_dict() for t in self.tables]}


def _value_bytes(value: Any) -> bytes:
    # one spelling per value on both backends: exact float bits, integers, text; None distinct from ''
    if value is None:
        return b"N"
    if isinstance(value, bool):
        value = int(value)
    if isinstance(value, int):
        return b"i" + str(value).encode()
    if isinstance(value, float):
        return b"f" + struct.pack("<d", value)
    text = str(value).encode("utf-8")
    return b"s" + str(len(text)).encode() + b":" + text


class _Digest:
    def __init__(self):
        self.hash = hashlib.sha256()
        self.rows = 0

    def add(self, rows: Iterable[tuple]) -> None:
        for row in rows:
            self.hash.update(b"|".join(_value_bytes(v) for v in row) + b"\n")
            self.rows += 1


def copy_library(src: "Library", dst: "Library", *, batch_rows: int = BATCH_ROWS) -> CopyReport:
    """Copy every row of ``src`` into the empty library ``dst`` (ids kept) and verify counts and checksums.

    Raises
    ------
    LibraryError
        When ``dst`` already holds data, the schema versions differ, a row is refused, or the read-back
        does not match (nothing is left in ``dst`` then).
    """
    from benchlab.library import schema

    if src.path == dst.path:
        raise LibraryError(f"{src.path}: source and destination are the same library")
    with src.snapshot() as source:
        src_version = schema.schema_version(source)
    if src_version != schema.schema_version(dst.connection):
        raise LibraryError(f"schema versions differ ({src_version} and {schema.schema_version(dst.connection)})")
    results = []
    with src.snapshot() as source, dst.write() as target:
        held = [t for t, *_ in TABLES if target.execute(_count_sql(t)).fetchone()[0]]
        if held:
            raise LibraryError(f"{dst.path}: the destination already holds data ({', '.join(held)}); "
                               "copy into an empty library")
        for table, _columns, select, insert in TABLES:
            read = _Digest()
            for rows in source.batches(select, batch_rows):
                read.add(rows)
                target.executemany(insert, rows)
            back = _Digest()
            for rows in target.batches(select, batch_rows):
                back.add(rows)
            results.append(TableCopy(table, read.rows, read.hash.hexdigest(), back.rows, back.hash.hexdigest()))
            if not results[-1].verified:
                raise LibraryError(f"{dst.path}: the copy of table {table} does not match the source "
                                   f"({read.rows} rows read, {back.rows} read back, checksums differ); "
                                   "nothing was written")
        target.after_copy([t for t, columns, *_ in TABLES if columns[0] == "id"])
    dst.connection.refresh_statistics()
    return CopyReport(src.path, dst.path, tuple(results))


def _count_sql(table: str) -> str:
    # the table names are the constants above, never input
    return {t: f"SELECT count(*) FROM {t}" for t, *_ in TABLES}[table]
