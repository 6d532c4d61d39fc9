"""The operating figures the library stores with each fit: VGS at the 250 uA reference current and gm at the part's
operating current (or the library's default current).

They are computed once, when a fit is stored or an operating current changes, and kept in the ``fits`` row
(``vgs_ref``, ``gm_op``, ``gm_current``), so ``parts list``, the exports, the Python API and the report all show the
same stored numbers. A figure that cannot be computed is NULL, never a placeholder 0.
"""

from __future__ import annotations

import json
import math
from typing import TYPE_CHECKING, Any, Sequence

from benchlab.bounds import MAX_OPERATING_CURRENT_A
from benchlab.errors import LibraryError
from benchlab.models import DeviceParams

if TYPE_CHECKING:
    from benchlab.library.store import Library

REFERENCE_CURRENT_A = 250e-6  # VGS(th) of power-MOSFET datasheets at VDS = VGS (common practice, no standard text)
# the library-wide operating current when the library sets none: the reference current itself
BUILTIN_OPERATING_CURRENT_A = REFERENCE_CURRENT_A
SETTING_OPERATING_CURRENT = "operating_current_a"
SCHEMA_VERSION = 7  # the library schema version that added the stored figures (migrations/0007_operating_figures.sql)


def _finite(value: Any) -> float | None:
    if value is None or isinstance(value, bool):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def vgs_at_reference(params: DeviceParams) -> float | None:
    """VGS (V) of the part's curve at 250 uA (for every model; the measured, model-free value of a fit stays in
    its result as ``vth_cc``)."""
    return _finite(params.vgs_at(REFERENCE_CURRENT_A))


def gm_at_current(params: DeviceParams, current: float) -> float | None:
    """gm (A/V) of the curve at ``current`` (A): dID/dVGS of the stored model there (``DeviceParams.gm_at``)."""
    if not (current and current > 0):
        return None
    return _finite(params.gm_at(current))


def default_current(lib: "Library") -> float:
    """The library-wide operating current (A): the stored setting, else :data:`BUILTIN_OPERATING_CURRENT_A`."""
    row = lib.connection.execute("SELECT value FROM settings WHERE name = ?", (SETTING_OPERATING_CURRENT,)).fetchone()
    return float(row[0]) if row is not None else BUILTIN_OPERATING_CURRENT_A


def current_of(lib: "Library", part_id: int) -> float:
    """The current (A) a part's gm is stored at: its own operating current, else the library's default."""
    row = lib.connection.execute("SELECT operating_current FROM parts WHERE id = ?", (int(part_id),)).fetchone()
    own = _finite(row[0]) if row is not None else None
    return own if own is not None else default_current(lib)


def figures(params: DeviceParams, current: float) -> tuple:
    """``(vgs_ref, gm_op, gm_current)`` to store with a fit (see :func:`vgs_at_reference`, :func:`gm_at_current`)."""
    gm = gm_at_current(params, current)
    return vgs_at_reference(params), gm, (float(current) if gm is not None else None)


def _check_current(current: float, what: str) -> float:
    value = _finite(current)
    if value is None or not 0 < value <= MAX_OPERATING_CURRENT_A:
        raise LibraryError(f"{what} must be a positive current in A, at most {MAX_OPERATING_CURRENT_A:g} A "
                           f"(got {current!r})")
    return value


def refresh(lib: "Library", part_ids: Sequence[int] | None = None) -> int:
    """Compute the stored figures of each part's current fit again (call inside ``lib.write()``); every part when
    ``part_ids`` is None. Returns the number of fits updated."""
    sql = ("SELECT f.id, f.part_id, f.params_json FROM fits f "
           "WHERE f.id = (SELECT max(id) FROM fits WHERE part_id = f.part_id)")
    rows = lib.connection.execute(sql).fetchall()
    wanted = None if part_ids is None else {int(p) for p in part_ids}
    default = default_current(lib)
    own = {int(r[0]): _finite(r[1]) for r in lib.connection.execute("SELECT id, operating_current FROM parts")}
    updates = []
    for fit_id, part_id, params_json in rows:
        if wanted is not None and int(part_id) not in wanted:
            continue
        params = DeviceParams.from_dict(json.loads(params_json))
        current = own.get(int(part_id)) or default
        updates.append((*figures(params, current), fit_id))
    lib.connection.executemany("UPDATE fits SET vgs_ref = ?, gm_op = ?, gm_current = ? WHERE id = ?", updates)
    return len(updates)


def set_part_current(lib: "Library", part, current: float | None) -> None:
    """Set a part's own operating current (A; None: use the library's default) and store its gm there."""
    with lib.write():
        record = lib.get_part(part)
        value = None if current is None else _check_current(current, "the operating current")
        lib.connection.execute("UPDATE parts SET operating_current = ? WHERE id = ?", (value, record.id))
        refresh(lib, [record.id])


def set_default_current(lib: "Library", current: float) -> int:
    """Set the library-wide operating current (A) and store gm there for every part without its own current.
    Returns the number of fits updated."""
    value = _check_current(current, "the library's operating current")
    with lib.write():
        conn = lib.connection
        if conn.execute("SELECT 1 FROM settings WHERE name = ?", (SETTING_OPERATING_CURRENT,)).fetchone():
            conn.execute("UPDATE settings SET value = ? WHERE name = ?", (value, SETTING_OPERATING_CURRENT))
        else:
            conn.execute("INSERT INTO settings (name, value) VALUES (?, ?)", (SETTING_OPERATING_CURRENT, value))
        ids = [int(r[0]) for r in conn.execute("SELECT id FROM parts WHERE operating_current IS NULL")]
        return refresh(lib, ids)
