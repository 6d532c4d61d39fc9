"""Whole-library exchange: export to plain JSON (and CSV rows), import that JSON back (one transaction)."""

from __future__ import annotations

import json
import math
from typing import TYPE_CHECKING, Any, Mapping

from benchlab.errors import LibraryError
from benchlab.names import check_name
from benchlab.library.records import PART_STATES, finite_or_none, natural_key, to_json, utc_now
from benchlab.library.operating import SETTING_OPERATING_CURRENT
from benchlab.library.thermal import CSV_THERMAL_COLUMNS, csv_thermal_cells, import_thermal, thermal_history
from benchlab.models import DeviceParams

if TYPE_CHECKING:
    from benchlab.library.store import Library

EXPORT_FORMAT = "benchlab-library/1"
PARAM_FIELDS = ("vth", "kp", "theta", "n", "gm", "temperature_k")
_MODEL_FIELDS = {"linear": ("vth", "gm", "temperature_k"), "square": ("vth", "kp", "temperature_k"),
                 "theta": ("vth", "kp", "theta", "temperature_k"), "ekv": ("vth", "kp", "theta", "n", "temperature_k")}
CSV_COLUMNS = (("lot", "label", "polarity", "state", "reason", "package", "notes", "classification", "model")
               + PARAM_FIELDS + tuple(f"stderr_{f}" for f in PARAM_FIELDS[:5])
               + ("vgs_ref", "gm_op", "gm_current", "operating_current")
               + ("flags", "fit_source", "fitted_at", "fitter_version") + CSV_THERMAL_COLUMNS)


def _selected_parts(lib: "Library", lot: str | None, state: str | None) -> list[tuple]:
    where, args = [], []
    if lot is not None:
        where.append("l.name = ?")
        args.append(lot)
    if state is not None:
        if state not in PART_STATES:
            raise LibraryError(f"unknown part state '{state}' (expected one of {', '.join(PART_STATES)})")
        where.append("p.state = ?")
        args.append(state)
    sql = ("SELECT p.id, l.name, p.label, p.polarity, p.package, p.notes, p.state, p.reason, p.classification, "
           "p.created FROM parts p JOIN lots l ON l.id = p.lot_id" + (" WHERE " + " AND ".join(where) if where else ""))
    rows = lib.connection.execute(sql, args).fetchall()
    return sorted(rows, key=lambda r: (natural_key(r[1]), natural_key(r[2])))


def export_library(lib: "Library", lot: str | None = None, state: str | None = None) -> dict[str, Any]:
    """Plain JSON data of the selected parts with their sweeps (and points), fits, history, plus the lots,
    designs and binnings that involve them. Non-finite readings become ``null`` (their status says why)."""
    conn = lib.connection
    with lib.snapshot():
        if lot is not None and conn.execute("SELECT 1 FROM lots WHERE name = ?", (lot,)).fetchone() is None:
            raise LibraryError(f"no lot named '{lot}' in the library")
        rows = _selected_parts(lib, lot, state)
        ids = {r[0]: (r[1], r[2]) for r in rows}
        parts = []
        for pid, lot_name, label, polarity, package, notes, pstate, reason, classification, created in rows:
            sweeps = []
            for s in conn.execute("SELECT id, session_path, csv_path, session_id, started, complete, classification, "
                                  "reason, sidecar_json, imported FROM sweeps WHERE part_id = ? ORDER BY id", (pid,)):
                pts = conn.execute("SELECT point, vgs, id, status, direction, spread_v FROM sweep_points "
                                   "WHERE sweep_id = ? ORDER BY point", (s[0],)).fetchall()
                sweeps.append({"key": s[0], "session_path": s[1], "csv_path": s[2], "session_id": s[3],
                               "started": s[4], "complete": bool(s[5]), "classification": s[6], "reason": s[7],
                               "sidecar": json.loads(s[8]), "imported": s[9],
                               "points": {"point": [p[0] for p in pts], "vgs": [p[1] for p in pts],
                                          "id": [p[2] for p in pts], "status": [p[3] for p in pts],
                                          "direction": [p[4] for p in pts], "spread_v": [p[5] for p in pts]}})
            fits = [{"sweep": f[0], "source": f[1], "model": f[2], "params": json.loads(f[3]),
                     "stderr": json.loads(f[4]), "flags": json.loads(f[5]), "result": json.loads(f[6]),
                     "fitted_at": f[7], "fitter_version": f[8], "vgs_ref": f[9], "gm_op": f[10], "gm_current": f[11]}
                    for f in conn.execute("SELECT sweep_id, source, model, params_json, stderr_json, flags_json, "
                                          "result_json, fitted_at, fitter_version, vgs_ref, gm_op, gm_current "
                                          "FROM fits WHERE part_id = ? ORDER BY id", (pid,))]
            history = [{"changed_at": h[0], "old_state": h[1], "new_state": h[2], "reason": h[3], "operator": h[4]}
                       for h in conn.execute("SELECT changed_at, old_state, new_state, reason, operator FROM state_changes "
                                             "WHERE part_id = ? ORDER BY id", (pid,))]
            current = lib.get_part(pid)
            parts.append({"lot": lot_name, "label": label, "polarity": polarity, "package": package, "notes": notes,
                          "state": pstate, "reason": reason, "classification": classification, "created": created,
                          "operating_current": current.operating_current, "vgs_ref": current.vgs_ref,
                          "gm_op": current.gm_op, "gm_current": current.gm_current,
                          "sweeps": sweeps, "fits": fits, "history": history,
                          "thermal": thermal_history(lib, pid)})
        lot_names = sorted({p["lot"] for p in parts} | ({lot} if lot else set()), key=natural_key)
        lots = [{"name": r[0], "description": r[1], "created": r[2]} for name in lot_names
                for r in conn.execute("SELECT name, description, created FROM lots WHERE name = ?", (name,))]
        designs = _linked(conn, "SELECT design_id, part_id, position FROM design_parts ORDER BY design_id, position",
                          "SELECT created, kind, design_json FROM designs WHERE id = ?", ids)
        binnings = _linked(conn, "SELECT binning_id, part_id, bin FROM bin_members ORDER BY binning_id, bin, part_id",
                           "SELECT created, scheme_json FROM binnings WHERE id = ?", ids)
        settings = {name: value for name, value in conn.execute("SELECT name, value FROM settings ORDER BY name")}
    return {"format": EXPORT_FORMAT, "exported": utc_now(), "filter": {"lot": lot, "state": state},
            "settings": settings, "lots": lots, "parts": parts,
            "designs": [{"created": d[0], "kind": d[1], "design": json.loads(d[2]), "parts": m} for d, m in designs],
            "binnings": [{"created": b[0], "scheme": json.loads(b[1]), "members": m} for b, m in binnings]}


def finite_or_none_safe(value: Any) -> float | None:
    """A finite number from an export field, None for anything else (a missing or malformed entry)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return finite_or_none(value)


def _linked(conn, members_sql: str, row_sql: str, ids: Mapping[int, tuple[str, str]]) -> list[tuple]:
    # designs / binnings whose parts are all in the export (a partial one would not import cleanly)
    groups: dict[int, list] = {}
    for owner, part_id, extra in conn.execute(members_sql):
        groups.setdefault(owner, []).append((part_id, extra))
    result = []
    for owner, members in groups.items():
        if all(pid in ids for pid, _ in members):
            row = conn.execute(row_sql, (owner,)).fetchone()
            result.append((row, [{"lot": ids[pid][0], "label": ids[pid][1], "at": extra} for pid, extra in members]))
    return result


def import_library(lib: "Library", data: Mapping[str, Any]) -> dict[str, int]:
    """Add everything in an export to the library, in one transaction.

    Raises
    ------
    LibraryError
        When the data is not a library export, or a part it holds already exists (nothing is written then).
    """
    if not isinstance(data, Mapping) or data.get("format") != EXPORT_FORMAT:
        raise LibraryError(f"not a benchlab library export (expected format '{EXPORT_FORMAT}')")
    conn = lib.connection
    counts = {"lots": 0, "parts": 0, "sweeps": 0, "fits": 0, "designs": 0, "binnings": 0, "thermal": 0}
    try:
        with lib.write():
            # the exporting library's default operating current, unless this library has its own
            default = finite_or_none_safe((data.get("settings") or {}).get(SETTING_OPERATING_CURRENT))
            if default is not None and default > 0 and conn.execute(
                    "SELECT 1 FROM settings WHERE name = ?", (SETTING_OPERATING_CURRENT,)).fetchone() is None:
                conn.execute("INSERT INTO settings (name, value) VALUES (?, ?)", (SETTING_OPERATING_CURRENT, default))
            for lot in data.get("lots", []):
                check_name("lot name", lot["name"], error=LibraryError)
                if conn.execute("SELECT 1 FROM lots WHERE name = ?", (lot["name"],)).fetchone() is None:
                    conn.execute("INSERT INTO lots (name, description, created) VALUES (?, ?, ?)",
                                 (lot["name"], lot.get("description", ""), lot.get("created") or utc_now()))
                    counts["lots"] += 1
            part_ids: dict[tuple[str, str], int] = {}
            for part in data.get("parts", []):
                lot_id = lib.lot_id(part["lot"], create=True)
                pid = lib._insert_part(lot_id, part["label"], part.get("polarity", "N"), part.get("package", ""),
                                       part.get("notes", ""), part.get("state", "in_stock"), part.get("reason"),
                                       part.get("classification"), part.get("created"))
                part_ids[(part["lot"], part["label"])] = pid
                own = finite_or_none_safe(part.get("operating_current"))
                if own is not None and own > 0:  # before its fits: their gm is stored at it
                    conn.execute("UPDATE parts SET operating_current = ? WHERE id = ?", (own, pid))
                counts["parts"] += 1
                sweep_ids = {}
                for s in part.get("sweeps", []):
                    new_id = conn.insert(
                        "INSERT INTO sweeps (part_id, session_path, csv_path, session_id, started, complete, "
                        "classification, reason, sidecar_json, imported) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                        (pid, s.get("session_path"), s.get("csv_path"), s.get("session_id"), s.get("started"),
                         int(bool(s.get("complete", True))), s.get("classification"), s.get("reason"),
                         to_json(s.get("sidecar", {})), s.get("imported") or utc_now()))
                    sweep_ids[s.get("key")] = new_id
                    pts = s.get("points", {})
                    count = len(pts.get("point", []))
                    # direction and spread_v: absent from exports written before version 6 of the schema
                    directions = pts.get("direction") or [None] * count
                    spreads = pts.get("spread_v") or [None] * count
                    conn.executemany(
                        "INSERT INTO sweep_points (sweep_id, point, vgs, id, status, direction, spread_v) "
                        "VALUES (?, ?, ?, ?, ?, ?, ?)",
                        [(new_id, int(p), finite_or_none(v), finite_or_none(i), str(st),
                          None if d is None else str(d), finite_or_none(sv)) for p, v, i, st, d, sv in
                         zip(pts.get("point", []), pts.get("vgs", []), pts.get("id", []), pts.get("status", []),
                             directions, spreads)])
                    counts["sweeps"] += 1
                for f in part.get("fits", []):
                    lib.insert_fit(pid, source=f.get("source", "imported"),
                                   params=_fit_params(f["params"]), stderr=f.get("stderr", {}),
                                   flags=f.get("flags", []), result=f.get("result", {}),
                                   sweep_id=sweep_ids.get(f.get("sweep")), fitted_at=f.get("fitted_at"),
                                   fitter_version=f.get("fitter_version"))
                    counts["fits"] += 1
                counts["thermal"] += import_thermal(lib, pid, part.get("thermal"))
                for h in part.get("history", []):
                    conn.execute("INSERT INTO state_changes (part_id, changed_at, old_state, new_state, reason, "
                                 "operator) VALUES (?, ?, ?, ?, ?, ?)",
                                 (pid, h.get("changed_at") or utc_now(), h.get("old_state"), h["new_state"],
                                  h.get("reason"), h.get("operator")))
            for d in data.get("designs", []):
                new_id = conn.insert("INSERT INTO designs (created, kind, design_json) VALUES (?, ?, ?)",
                                   (d.get("created") or utc_now(), d.get("kind", ""), to_json(d["design"])))
                for m in d.get("parts", []):
                    conn.execute("INSERT INTO design_parts (design_id, part_id, position) VALUES (?, ?, ?)",
                                 (new_id, _member(lib, part_ids, m), int(m.get("at", 0))))
                counts["designs"] += 1
            for b in data.get("binnings", []):
                new_id = conn.insert("INSERT INTO binnings (created, scheme_json) VALUES (?, ?)",
                                   (b.get("created") or utc_now(), to_json(b["scheme"])))
                for m in b.get("members", []):
                    conn.execute("INSERT INTO bin_members (binning_id, part_id, bin) VALUES (?, ?, ?)",
                                 (new_id, _member(lib, part_ids, m), str(m.get("at", ""))))
                counts["binnings"] += 1
    except (KeyError, TypeError, ValueError) as exc:
        raise LibraryError(f"malformed library export ({type(exc).__name__}: {exc}); nothing was imported") from exc
    lib.connection.refresh_statistics()
    return counts


def _fit_params(data: Mapping[str, Any]) -> DeviceParams:
    # a missing or non-finite number would be stored as null and break every later read of the part
    params = DeviceParams.from_dict(data)
    for name, value in params.to_dict().items():
        if name != "model" and not (isinstance(value, (int, float)) and not isinstance(value, bool)
                                    and math.isfinite(value)):
            raise ValueError(f"fit parameter {name} is {value!r}, not a finite number")
    return params


def _member(lib: "Library", part_ids: Mapping[tuple[str, str], int], member: Mapping[str, Any]) -> int:
    key = (member["lot"], member["label"])
    if key in part_ids:
        return part_ids[key]
    return lib.get_part(f"{key[0]}/{key[1]}").id


def csv_rows(lib: "Library", lot: str | None = None, state: str | None = None) -> list[dict[str, Any]]:
    """One row per part (columns :data:`CSV_COLUMNS`): its identity, state and latest curve with stderrs."""
    rows = []
    with lib.snapshot():
        if lot is not None and lib.connection.execute("SELECT 1 FROM lots WHERE name = ?", (lot,)).fetchone() is None:
            raise LibraryError(f"no lot named '{lot}' in the library")
        for part in lib.parts(lot=lot, state=state):
            row = {"lot": part.lot, "label": part.label, "polarity": part.polarity, "state": part.state,
                   "reason": part.reason or "", "package": part.package, "notes": part.notes,
                   "classification": part.classification or "", "model": part.params.model if part.params else "",
                   "flags": ";".join(part.flags), "fit_source": "", "fitted_at": "", "fitter_version": ""}
            for name in PARAM_FIELDS:
                # a parameter the model does not have is an empty cell, never a placeholder 0
                meaningful = part.params is not None and name in _MODEL_FIELDS.get(part.params.model, PARAM_FIELDS)
                row[name] = repr(float(getattr(part.params, name))) if meaningful else ""
            for name in PARAM_FIELDS[:5]:
                value = part.stderr.get(name)
                row[f"stderr_{name}"] = "" if value is None else repr(float(value))
            # the stored operating figures (VGS at 250 uA, gm at the operating current and that current; the
            # part's own operating current): empty when not computed, never a placeholder 0
            for name in ("vgs_ref", "gm_op", "gm_current", "operating_current"):
                value = getattr(part, name)
                row[name] = "" if value is None else repr(float(value))
            if part.fit_id is not None:
                source, fitted_at, version = lib.connection.execute(
                    "SELECT source, fitted_at, fitter_version FROM fits WHERE id = ?", (part.fit_id,)).fetchone()
                row.update(fit_source=source, fitted_at=fitted_at, fitter_version=version or "")
            row.update(csv_thermal_cells(lib, part.id))
            rows.append(row)
    return rows
