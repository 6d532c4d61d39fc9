"""Import session records into the library: read, (re-)fit, then write everything in one transaction."""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Callable, Mapping, Sequence

from benchlab.errors import BenchlabError, LibraryError
from benchlab.library.records import ImportedSweep, ImportSummary, finite_or_none, to_json, utc_now
from benchlab.library.sessions import Session, SessionSweep, read_session
from benchlab.models import DeviceParams
from benchlab.kinds import PartClass
from benchlab.names import check_name

if TYPE_CHECKING:
    from benchlab.library.store import Library

MIN_FIT_POINTS = 4  # below this no model with a threshold and a slope is determined (common practice)


@dataclass(frozen=True)
class FitOutcome:
    """A fit reduced to what the library stores."""

    params: DeviceParams
    stderr: dict
    flags: tuple
    result: dict
    fitter_version: str | None


@dataclass(frozen=True)
class PreparedSweep:
    """A sweep ready to be written: where it goes, its verdict and its fit (or why there is none)."""

    session: Session
    sweep: SessionSweep
    lot: str
    fit: FitOutcome | None
    fit_problem: str

    @property
    def is_dud(self) -> bool:
        return self.sweep.classification not in (None, PartClass.GOOD)


def fit_outcome(result: Any) -> FitOutcome:
    """Reduce a ``FitResult`` (or its ``to_dict()`` form) to what the library stores."""
    if isinstance(result, Mapping):
        data = dict(result)
        params = data.get("params")
        params = params if isinstance(params, DeviceParams) else DeviceParams.from_dict(params or {})
        stderr, flags, version = data.get("stderr"), data.get("flags"), data.get("fitter_version")
    else:
        params, stderr, flags = result.params, getattr(result, "stderr", {}), getattr(result, "flags", ())
        version = getattr(result, "fitter_version", None)
        data = result.to_dict() if hasattr(result, "to_dict") else {}
    if not isinstance(params, DeviceParams):
        raise LibraryError("the fit function returned no DeviceParams")
    # only known, finite numbers: a missing key means "unknown" to the designer's Monte Carlo
    clean_stderr = {str(k): float(v) for k, v in (stderr or {}).items()
                    if isinstance(v, (int, float)) and not isinstance(v, bool) and finite_or_none(v) is not None}
    return FitOutcome(params=params, stderr=clean_stderr, flags=tuple(str(f) for f in flags or ()),
                      result=data, fitter_version=None if version is None else str(version))


def prepare_sweep(session: Session, sweep: SessionSweep, lot: str, refit: bool,
                  fit_function: Callable | None) -> PreparedSweep:
    """Fit one sweep (pure computation, nothing written); a dud, an interrupted or an unfittable sweep carries
    the reason."""
    if sweep.interrupted:
        return PreparedSweep(session, sweep, lot, None, "interrupted sweep")
    if sweep.classification not in (None, PartClass.GOOD):
        return PreparedSweep(session, sweep, lot, None, "")
    try:
        if refit:
            points = sweep.fit_points()
            if len(points) < MIN_FIT_POINTS:
                return PreparedSweep(session, sweep, lot, None, f"only {len(points)} usable points, no fit")
            outcome = fit_outcome(fit_function(points, temperature_k=session.temperature_k))
        else:
            stored = sweep.sidecar.get("fits") or []
            if not stored:
                return PreparedSweep(session, sweep, lot, None, "no stored fit in the sidecar")
            outcome = fit_outcome(stored[-1])
    except (BenchlabError, ValueError, ArithmeticError) as exc:
        return PreparedSweep(session, sweep, lot, None, f"fit failed: {exc}")
    return PreparedSweep(session, sweep, lot, outcome, "")


def _earlier_sweeps(lib: "Library", lot: str, label: str, session_id: str) -> list[tuple]:
    """``(started, complete)`` of the sweeps of this part already imported from this session."""
    return lib.connection.execute(
        "SELECT s.started, s.complete FROM sweeps s JOIN parts p ON p.id = s.part_id JOIN lots l ON l.id = p.lot_id "
        "WHERE l.name = ? AND p.label = ? AND s.session_id = ? ORDER BY s.id", (lot, label, session_id)).fetchall()


def _write_sweep(lib: "Library", item: PreparedSweep, points: list) -> ImportedSweep:
    conn = lib.connection
    sweep, session = item.sweep, item.session
    if sweep.interrupted:  # never a part: it was not judged; its resumed sweep is imported when it exists
        return ImportedSweep(item.lot, sweep.label, sweep.classification, "skipped",
                             f"interrupted sweep, not imported (finish it: benchlab bag --resume {session.path})")
    earlier = _earlier_sweeps(lib, item.lot, sweep.label, session.id)
    if any(started == sweep.sidecar.get("started") for started, _ in earlier):
        return ImportedSweep(item.lot, sweep.label, sweep.classification, "skipped",
                             f"already imported from session {session.id}")
    # the same session and part with another start time: the resumed sweep that replaces an interrupted one
    # (an older benchlab imported those, some as rejected duds)
    replaces = bool(earlier)
    lot_id = lib.lot_id(item.lot, create=True)
    row = conn.execute("SELECT id, state FROM parts WHERE lot_id = ? AND label = ?", (lot_id, sweep.label)).fetchone()
    if row is None:
        part_id = lib._insert_part(lot_id, sweep.label, "N", classification=sweep.classification)
        state = "in_stock"
    else:
        part_id, state = int(row[0]), row[1]
        conn.execute("UPDATE parts SET classification = ? WHERE id = ?", (sweep.classification, part_id))
    sidecar = {k: v for k, v in sweep.sidecar.items() if k != "fits"}
    new_id = conn.insert(
        "INSERT INTO sweeps (part_id, session_path, csv_path, session_id, started, complete, classification, "
        "reason, sidecar_json, imported) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (part_id, os.path.abspath(session.path), os.path.abspath(sweep.csv_path), session.id,
         sweep.sidecar.get("started"), int(sweep.complete), sweep.classification, sweep.reason or None,
         to_json(sidecar), utc_now()))
    sweep_id = new_id
    directions = sweep.direction if sweep.table.has("direction") else [None] * len(sweep.table)
    spreads = sweep.table.number("spread_v").tolist()  # NaN (stored NULL) when the record has none
    points.extend((sweep_id, p, finite_or_none(v), finite_or_none(i), s, d or None, finite_or_none(sv))
                  for p, v, i, s, d, sv in zip(sweep.point, sweep.vgs, sweep.id, sweep.status, directions, spreads))
    if item.is_dud:
        reason = f"{sweep.classification}: {sweep.reason}" if sweep.reason else str(sweep.classification)
        if state != "rejected" or replaces:
            lib._change_state(part_id, state, "rejected", reason)
        return ImportedSweep(item.lot, sweep.label, sweep.classification, "rejected", reason)
    if replaces:
        # a good sweep replaces the interrupted one: the part's curve, fit and state follow it, with a history entry
        new_state = "in_stock" if state == "rejected" else state
        lib._change_state(part_id, state, new_state,
                          f"re-swept in session {session.id} (started {sweep.sidecar.get('started')}): "
                          f"{sweep.classification}; replaces the interrupted sweep")
    if item.fit is None:
        return ImportedSweep(item.lot, sweep.label, sweep.classification, "stored", item.fit_problem)
    fit = item.fit
    lib.insert_fit(part_id, source="fit", params=fit.params, stderr=fit.stderr, flags=fit.flags,
                   result=fit.result, sweep_id=sweep_id, fitter_version=fit.fitter_version)
    detail = f"{fit.params.model}: Vth {fit.params.vth:.4g} V"
    if fit.flags:
        detail += " (" + ", ".join(fit.flags) + ")"
    return ImportedSweep(item.lot, sweep.label, sweep.classification, "fitted", detail)


def import_sessions(lib: "Library", paths: Sequence[str | os.PathLike], *, refit: bool = True,
                    lot: str | None = None, fit_function: Callable | None = None,
                    progress: Callable[[str], None] | None = None) -> ImportSummary:
    """Import session folders into ``lib``: every sweep with its raw points, re-fitted (``refit``) or with
    its stored fit.

    Fitting runs first; then everything is written in ONE transaction, so an interrupted import leaves
    either all of it or none. Duds are stored as rejected with their classification as reason. Sweeps
    already in the library (same session id and label) are skipped.

    Parameters
    ----------
    lib : Library
        The open library.
    paths : sequence of path-like
        Session folders (each with ``session.json``).
    refit : bool
        Fit the raw points again (default) rather than trusting the fits stored in the sidecar.
    lot : str, optional
        Store the parts in this lot instead of the session's own.
    fit_function : callable
        Required with ``refit``: ``f(points, temperature_k=None) -> FitResult``, ``points`` the sweep's
        :class:`benchlab.sweepfile.FitPoints` (the points ``benchlab fit`` would fit, with their directions, row
        numbers, order and stated VGS noise); ``temperature_k``: the session's ambient temperature, or None. The services pass ``benchlab.services.library.fit_function()``;
        the library itself never imports the fitter.
    progress : callable, optional
        Called with each part's label as it is written (inside the transaction).

    Returns
    -------
    ImportSummary
    """
    if not paths:
        raise LibraryError("no session folders to import")
    if refit and fit_function is None:
        raise LibraryError("re-fitting on import needs a fit function (benchlab.services.library.fit_function())")
    if lot is not None:
        check_name("lot name", lot, error=LibraryError)
    sessions = [read_session(p) for p in paths]  # every file read before anything is written
    prepared = []
    for session in sessions:
        for sweep in session.sweeps:
            target_lot = lot or sweep.lot or session.lot or "default"
            prepared.append(prepare_sweep(session, sweep, target_lot, refit, fit_function))
    results = []
    points: list[tuple] = []
    with lib.write() as conn:
        for item in prepared:
            results.append(_write_sweep(lib, item, points))
            if progress is not None:
                progress(item.sweep.label)
        # every sweep's points in one batch, same transaction (one round trip's worth on PostgreSQL, not one a part)
        conn.executemany("INSERT INTO sweep_points (sweep_id, point, vgs, id, status, direction, spread_v) "
                         "VALUES (?, ?, ?, ?, ?, ?, ?)", points)
    lib.connection.refresh_statistics()
    return ImportSummary(sessions=tuple(str(s.path) for s in sessions), sweeps=tuple(results))


def import_session(lib: "Library", path: str | os.PathLike, *, refit: bool = True, lot: str | None = None,
                   fit_function: Callable | None = None) -> ImportSummary:
    """Import one session folder (see :func:`import_sessions`)."""
    return import_sessions(lib, [path], refit=refit, lot=lot, fit_function=fit_function)
