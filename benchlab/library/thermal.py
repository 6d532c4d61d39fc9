"""Measured thermal values of parts (table ``part_thermal``, schema version 5): store, read, exchange.

Each measurement is one row; a part's value of each quantity is the newest measured one. Quantities:
``vth_tempco`` (V/K), ``kp_exponent``, ``ztc_vgs`` (V), ``ztc_id`` (A), ``rth`` (K/W, junction to the part's
mounting surface), each with its standard error.
"""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Any, Mapping

from benchlab.errors import LibraryError
from benchlab.library.records import finite_or_none, to_json, utc_now

if TYPE_CHECKING:
    from benchlab.library.store import Library

QUANTITIES = ("vth_tempco", "kp_exponent", "ztc_vgs", "ztc_id", "rth")
MEASUREMENTS = ("tempco", "rth")
_COLUMNS = ", ".join(f"{q}, {q}_stderr" for q in QUANTITIES)


def record_thermal(lib: "Library", part_id: int, measurement: str, values: Mapping[str, Any],
                   stderr: Mapping[str, Any], *, session_path: str | None = None,
                   details: Mapping[str, Any] | None = None, measured_at: str | None = None) -> int:
    """Store one thermal measurement of a part (call inside :meth:`Library.write`); returns its row id."""
    if measurement not in MEASUREMENTS:
        raise LibraryError(f"unknown thermal measurement '{measurement}' (expected tempco or rth)")
    numbers = []
    for q in QUANTITIES:
        numbers += [finite_or_none(values.get(q)), finite_or_none(stderr.get(q))]
    return lib.connection.insert(
        f"INSERT INTO part_thermal (part_id, measurement, {_COLUMNS}, session_path, details_json, measured_at) "
        f"VALUES (?, ?, {', '.join('?' * 2 * len(QUANTITIES))}, ?, ?, ?)",
        (part_id, measurement, *numbers, session_path, to_json(dict(details or {})), measured_at or utc_now()))


def thermal_history(lib: "Library", part_id: int) -> list[dict[str, Any]]:
    """Every thermal measurement of a part, oldest first, as plain data."""
    rows = lib.connection.execute(
        f"SELECT measurement, {_COLUMNS}, session_path, details_json, measured_at FROM part_thermal "
        "WHERE part_id = ? ORDER BY id", (part_id,)).fetchall()
    out = []
    for row in rows:
        entry = {"measurement": row[0], "values": {}, "stderr": {}, "session_path": row[-3],
                 "details": json.loads(row[-2]), "measured_at": row[-1]}
        for k, q in enumerate(QUANTITIES):
            entry["values"][q] = row[1 + 2 * k]
            entry["stderr"][q] = row[2 + 2 * k]
        out.append(entry)
    return out


def measured_thermal(lib: "Library", part_id: int) -> dict[str, dict[str, Any]]:
    """The part's newest measured value of each quantity: ``{q: {value, stderr, measured_at, session_path}}``
    (quantities never measured are absent)."""
    found: dict[str, dict[str, Any]] = {}
    for entry in thermal_history(lib, part_id):
        for q in QUANTITIES:
            if entry["values"][q] is not None:
                found[q] = {"value": entry["values"][q], "stderr": entry["stderr"][q],
                            "measured_at": entry["measured_at"], "session_path": entry["session_path"]}
    return found


def import_thermal(lib: "Library", part_id: int, entries: Any) -> int:
    """Add the ``thermal`` entries of an exported part (inside the import's transaction); returns how many."""
    count = 0
    for entry in entries or []:
        record_thermal(lib, part_id, entry["measurement"], entry.get("values", {}), entry.get("stderr", {}),
                       session_path=entry.get("session_path"), details=entry.get("details"),
                       measured_at=entry.get("measured_at"))
        count += 1
    return count


CSV_THERMAL_COLUMNS = tuple(c for q in QUANTITIES for c in (q, f"stderr_{q}"))


def csv_thermal_cells(lib: "Library", part_id: int) -> dict[str, str]:
    """The part's measured thermal values as CSV cells (empty where never measured)."""
    measured = measured_thermal(lib, part_id)
    cells = {}
    for q in QUANTITIES:
        entry = measured.get(q)
        cells[q] = "" if entry is None else repr(float(entry["value"]))
        cells[f"stderr_{q}"] = "" if entry is None or entry["stderr"] is None else repr(float(entry["stderr"]))
    return cells
