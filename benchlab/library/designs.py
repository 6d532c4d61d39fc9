"""Designs (with the parts they consume) and binnings: the part of a :class:`Library` that stores design work.

A :class:`DesignStore` is a member of the library (``lib.design_store``); it uses the library's transactions.
"""

from __future__ import annotations

import json
from typing import TYPE_CHECKING, Any, Mapping, Sequence

from benchlab.errors import LibraryError, PartUnavailableError
from benchlab.library.records import PartRecord, to_json, utc_now

if TYPE_CHECKING:
    from benchlab.library.store import Library


class DesignStore:
    """Records and reads designs and binnings of one open :class:`benchlab.library.Library`."""

    def __init__(self, lib: "Library"):
        self._lib = lib

    def record(self, design: Mapping[str, Any], parts: Sequence[PartRecord | str | int],
                      state: str = "reserved") -> int:
        """Store a design (plain JSON data) and move its parts from in_stock to ``reserved`` or ``used``.

        The parts are kept in the given order (by convention the reference part first). Nothing is written
        when any part is not in stock.

        Returns
        -------
        int
            The design's id.
        """
        if state not in ("reserved", "used"):
            raise LibraryError(f"a design can reserve or use its parts, not set them to '{state}'")
        text = to_json(dict(design))
        with self._lib.write() as conn:
            records = [self._lib.get_part(p) for p in parts]
            if len({r.id for r in records}) != len(records):
                raise LibraryError("a design lists the same part twice")
            for r in records:
                if r.state != "in_stock":
                    raise self.unavailable(r)
            new_id = conn.insert("INSERT INTO designs (created, kind, design_json) VALUES (?, ?, ?)",
                               (utc_now(), str(design.get("kind") or design.get("mode") or ""), text))
            design_id = new_id
            for position, r in enumerate(records):
                conn.execute("INSERT INTO design_parts (design_id, part_id, position) VALUES (?, ?, ?)",
                             (design_id, r.id, position))
                self._lib._change_state(r.id, r.state, state, f"design {design_id}")
        return design_id

    def unavailable(self, record: PartRecord) -> PartUnavailableError:
        """The error that says why ``record`` is not in stock: which design took it, when, and who."""
        # who took it: the latest design holding the part, and the operator of its latest state change
        conn = self._lib.connection
        row = conn.execute("SELECT d.id, d.created FROM design_parts dp JOIN designs d ON d.id = dp.design_id "
                           "WHERE dp.part_id = ? ORDER BY d.id DESC LIMIT 1", (record.id,)).fetchone()
        change = conn.execute("SELECT operator FROM state_changes WHERE part_id = ? ORDER BY id DESC LIMIT 1",
                              (record.id,)).fetchone()
        operator = change[0] if change else None
        if row is None or record.state not in ("reserved", "used"):
            return PartUnavailableError(f"part {record.label} (lot {record.lot}) is {record.state}, not in stock; "
                                        f"the design was not saved", label=record.label, lot=record.lot,
                                        state=record.state, operator=operator)
        design_id, created = int(row[0]), str(row[1])
        # ISO-8601 UTC 'YYYY-MM-DDTHH:MM:SS+00:00': the clock time is characters 11-16
        return PartUnavailableError(
            f"part {record.label} was {record.state} by design {design_id} at {created[11:16]} UTC"
            + (f" ({operator}, lot {record.lot})" if operator else f" (lot {record.lot})")
            + "; the design was not saved",
            label=record.label, lot=record.lot, state=record.state, design_id=design_id, at=created, operator=operator)

    def get(self, design_id: int) -> dict[str, Any]:
        """A recorded design: its stored data plus ``design_id``, ``recorded_at`` and ``recorded_parts``.

        ``recorded_parts`` lists ``{"lot", "label", "state", "position"}`` in the order given when recorded.
        """
        with self._lib.snapshot() as conn:
            row = conn.execute("SELECT created, design_json FROM designs WHERE id = ?", (int(design_id),)).fetchone()
            if row is None:
                raise LibraryError(f"no design {design_id} in the library")
            members = conn.execute(
                "SELECT l.name, p.label, p.state, d.position FROM design_parts d JOIN parts p ON p.id = d.part_id "
                "JOIN lots l ON l.id = p.lot_id WHERE d.design_id = ? ORDER BY d.position", (int(design_id),)
            ).fetchall()
        data = json.loads(row[1])
        data.update(design_id=int(design_id), recorded_at=row[0],
                    recorded_parts=[{"lot": m[0], "label": m[1], "state": m[2], "position": m[3]} for m in members])
        return data

    def summaries(self) -> list[dict[str, Any]]:
        """Summary of every design: id, when, kind and how many parts it holds."""
        rows = self._lib.connection.execute(
            "SELECT d.id, d.created, d.kind, count(dp.part_id) FROM designs d "
            "LEFT JOIN design_parts dp ON dp.design_id = d.id GROUP BY d.id ORDER BY d.id").fetchall()
        return [{"id": r[0], "created": r[1], "kind": r[2], "parts": r[3]} for r in rows]

    def record_binning(self, scheme: Mapping[str, Any], members: Mapping[str, Sequence[PartRecord | str]]) -> int:
        """Store a binning: the scheme (plain JSON, e.g. current and window width) and the parts of each bin."""
        with self._lib.write() as conn:
            new_id = conn.insert("INSERT INTO binnings (created, scheme_json) VALUES (?, ?)",
                               (utc_now(), to_json(dict(scheme))))
            binning_id = new_id
            for bin_name, parts in members.items():
                for part in parts:
                    record = self._lib.get_part(part)
                    conn.execute("INSERT INTO bin_members (binning_id, part_id, bin) VALUES (?, ?, ?)",
                                 (binning_id, record.id, str(bin_name)))
        return binning_id

    def binning(self, binning_id: int) -> dict[str, Any]:
        """A stored binning: ``{"id", "created", "scheme", "bins": {bin: ["LOT/LABEL", ...]}}``."""
        with self._lib.snapshot() as conn:
            row = conn.execute("SELECT created, scheme_json FROM binnings WHERE id = ?", (int(binning_id),)).fetchone()
            if row is None:
                raise LibraryError(f"no binning {binning_id} in the library")
            members = conn.execute(
                "SELECT b.bin, l.name, p.label FROM bin_members b JOIN parts p ON p.id = b.part_id "
                "JOIN lots l ON l.id = p.lot_id WHERE b.binning_id = ? ORDER BY b.bin", (int(binning_id),)).fetchall()
        bins: dict[str, list[str]] = {}
        for bin_name, lot, label in members:
            bins.setdefault(bin_name, []).append(f"{lot}/{label}")
        return {"id": int(binning_id), "created": row[0], "scheme": json.loads(row[1]), "bins": bins}

