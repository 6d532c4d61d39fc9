"""Services behind the ``parts``, ``library`` and ``export`` commands: open the right library, build hand-entered
curves, re-fit on import with the fitter, format tables, write export files."""

from __future__ import annotations

import csv
import io
import json
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Sequence

from benchlab.bounds import check_typed_curve
from benchlab.errors import BenchlabError, InputError, LibraryError
from benchlab.library import (Library, PartRecord, default_library_path, export_library, import_library,
                              import_sessions as import_into)
from benchlab.library.backend import is_url
from benchlab.library.copy import CopyReport
from benchlab.library.copy import copy_library as copy_into
from benchlab.library.exchange import CSV_COLUMNS, EXPORT_FORMAT, csv_rows
from benchlab.library.records import json_default
from benchlab.models import DeviceParams
from benchlab.names import check_name, csv_cell
from benchlab.units import format_si


def library_path(path: str | os.PathLike | None = None) -> Path | str:
    """The library to use: ``--library`` when given, else ``$BENCHLAB_LIBRARY``, else the user data folder.

    A file path comes back as a ``Path``, a ``postgresql://`` URL as text.
    """
    if not path:
        return default_library_path()
    return str(path).strip() if is_url(str(path).strip()) else Path(path).expanduser()


def open_library(path: str | os.PathLike | None = None, *, create: bool = False,
                 operator: str | None = None) -> Library:
    """Open the library at :func:`library_path` ``(path)``; only commands that add data ``create`` it.
    ``operator`` (default: the login name) is kept with every state change made through it."""
    return Library.open(library_path(path), create=create, operator=operator)


def hand_params(vth: float | None, gm: float | None = None, kp: float | None = None,
                theta: float | None = None) -> DeviceParams:
    """A curve entered by hand: ``vth`` + ``gm`` (linear model) or ``vth`` + ``kp`` [+ ``theta``].

    Raises
    ------
    InputError
        When the combination is incomplete or contradictory, or a value is out of range.
    """
    if vth is None:
        raise InputError("a hand-entered part needs --vth (and --gm, or --kp)")
    if gm is None and kp is None:
        raise InputError("a hand-entered part needs --gm (linear model) or --kp (square law, optionally with "
                         "--theta) beside --vth")
    if gm is not None and kp is not None:
        raise InputError("give either --gm (linear model) or --kp (square law, optionally with --theta), not both")
    if gm is not None and theta is not None:
        raise InputError("--theta goes with --kp, not with --gm")
    for flag, value in (("--vth", vth), ("--gm", gm), ("--kp", kp), ("--theta", theta)):
        if value is not None and not math.isfinite(float(value)):
            raise InputError(f"{flag} must be a finite number, got {value}")
    try:
        if gm is not None:
            params = DeviceParams("linear", vth=float(vth), gm=float(gm))
        elif theta:
            params = DeviceParams("theta", vth=float(vth), kp=float(kp), theta=float(theta))
        else:
            params = DeviceParams("square", vth=float(vth), kp=float(kp))
    except ValueError as exc:
        raise InputError(str(exc)) from exc
    check_typed_curve(params, "the hand-entered curve")
    return params


def fit_function(model: str = "auto") -> Callable:
    """The fitter as the library's import calls it: ``f(points, temperature_k=None)``, ``points`` a record's
    :class:`benchlab.sweepfile.FitPoints`, validated and fitted exactly as ``benchlab fit`` does."""
    try:
        from benchlab.extract import fit_batch
        from benchlab.extract.sweepdata import sweep_from_points
    except ImportError as exc:
        raise LibraryError(f"the fitter is not available ({exc}); use --no-refit") from exc

    def fit(points, temperature_k: float | None = None):
        # the session's ambient temperature, as `benchlab fit` uses it; else the fitter's nominal one
        extra = {} if temperature_k is None else {"temperature_k": temperature_k}
        return fit_batch([sweep_from_points(points)], model, **extra)[0]

    return fit


def add_part(path, label: str, *, lot: str = "default", polarity: str = "N", vth: float | None = None,
             gm: float | None = None, kp: float | None = None, theta: float | None = None,
             package: str = "", notes: str = "") -> PartRecord:
    """Add a part, with a hand-entered curve when ``vth`` is given. Nothing is written on bad input."""
    check_name("part label", label)  # before the library is opened: a bad name creates no file
    check_name("lot name", lot)
    params = None
    if vth is not None or gm is not None or kp is not None or theta is not None:
        params = hand_params(vth, gm, kp, theta)
    with open_library(path, create=True) as lib:
        return lib.add_part(label, lot=lot, polarity=polarity, params=params, package=package, notes=notes)


def list_parts(path, lot: str | None = None, state: str | None = "in_stock") -> list[PartRecord]:
    """Parts of the library (``state=None`` or ``"all"`` for every state)."""
    with open_library(path) as lib:
        return lib.parts(lot=lot, state=None if state in (None, "all") else state)


def show_part(path, spec: str) -> dict[str, Any]:
    """Everything about one part: record, fits, sweeps (without points) and state history."""
    with open_library(path) as lib:
        part = lib.get_part(spec)
        return {"part": part.to_dict(), "fits": lib.fits(part), "sweeps": lib.sweeps(part, with_points=False),
                "history": lib.history(part)}


def set_operating_current(path, spec: str, current: float | None, *, operator: str | None = None) -> PartRecord:
    """Set a part's operating current (A; None: the library's default) and store its gm there."""
    from benchlab.library import operating

    with open_library(path, operator=operator) as lib:
        operating.set_part_current(lib, spec, current)
        return lib.get_part(spec)


def set_default_current(path, current: float, *, operator: str | None = None) -> int:
    """Set the library-wide operating current (A); returns how many parts' stored gm moved to it."""
    from benchlab.library import operating

    with open_library(path, create=True, operator=operator) as lib:
        return operating.set_default_current(lib, current)


def set_state(path, spec: str, state: str, reason: str | None = None, *, operator: str | None = None) -> PartRecord:
    """Move a part to another state (``rejected`` needs a reason), recorded as done by ``operator``."""
    with open_library(path, operator=operator) as lib:
        return lib.set_state(spec, state, reason)


def import_sessions(path, session_dirs: Sequence[str], *, lot: str | None = None, refit: bool = True,
                    model: str = "auto", operator: str | None = None):
    """Import session folders, or folders of them (re-fitting each good sweep unless ``refit`` is False)."""
    from benchlab.library.sessions import find_sessions

    folders = find_sessions(session_dirs)  # checked before the library file is opened or created
    fit = fit_function(model) if refit else None
    with open_library(path, create=True, operator=operator) as lib:
        return import_into(lib, folders, refit=refit, lot=lot, fit_function=fit)


def import_json_file(path, json_file: str) -> dict[str, int]:
    """Import a library export file (``benchlab export json``)."""
    try:
        data = json.loads(Path(json_file).read_text(encoding="utf-8"))
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror or exc}", path=json_file) from exc
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid JSON: {exc}", path=json_file) from exc
    except RecursionError:
        raise InputError("not a library export: nested too deeply", path=json_file) from None
    if not isinstance(data, dict) or data.get("format") != EXPORT_FORMAT:  # refused before a library is created
        raise InputError(f"not a benchlab library export (expected format '{EXPORT_FORMAT}')", path=json_file)
    for key, kind, field in (("lots", "lot name", "name"), ("parts", "part label", "label"), ("parts", "lot name", "lot")):
        entries = data.get(key, [])
        if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
            raise InputError(f"'{key}' must be a list of objects", path=json_file)
        for entry in entries:
            check_name(kind, entry.get(field), path=json_file)
    with open_library(path, create=True) as lib:
        return import_library(lib, data)


def lots(path) -> list[dict[str, Any]]:
    """Lots with part counts per state."""
    with open_library(path) as lib:
        return lib.lots()


def info(path) -> dict[str, Any]:
    """Library facts: backend, path or URL (no password), schema version, row counts, backend facts."""
    with open_library(path) as lib:
        return lib.info()


def copy_library(source, destination) -> CopyReport:
    """Copy the library at ``source`` into the empty (or new) library at ``destination``, verified.

    Either may be a file or a ``postgresql://`` URL; see :func:`benchlab.library.copy.copy_library`.
    """
    if not source or not destination:
        raise InputError("name both libraries: benchlab library copy SOURCE DESTINATION")
    with open_library(source) as src, open_library(destination, create=True) as dst:
        return copy_into(src, dst)


def export_json_text(path, lot: str | None = None, state: str | None = None) -> str:
    """The library (or a filtered view) as JSON text (non-finite numbers are written as null)."""
    with open_library(path) as lib:
        data = export_library(lib, lot=lot, state=None if state in (None, "all") else state)
    return json.dumps(data, indent=1, default=json_default, allow_nan=False) + "\n"


def export_csv_text(path, lot: str | None = None, state: str | None = None) -> str:
    """One CSV row per part (header row first), readable by any CSV reader."""
    with open_library(path) as lib:
        rows = csv_rows(lib, lot=lot, state=None if state in (None, "all") else state)
    buffer = io.StringIO(newline="")
    writer = csv.DictWriter(buffer, fieldnames=list(CSV_COLUMNS), lineterminator="\n")
    writer.writeheader()
    # a label or note such as '=HYPERLINK(...)' must reach a spreadsheet as text, not as a formula
    writer.writerows({key: csv_cell(value) for key, value in row.items()} for row in rows)
    return buffer.getvalue()


def export_spice_text(path, specs: Sequence[str]) -> str:
    """SPICE ``.model`` cards of the named parts (each named by its label), via ``benchlab.design.spice``."""
    if not specs:
        raise InputError("name at least one part to export")
    with open_library(path) as lib:
        parts = [lib.get_part(s) for s in specs]
    missing = [p.spec for p in parts if p.params is None]
    if missing:
        raise LibraryError(f"no fitted or hand-entered curve for {', '.join(missing)}: nothing to export")
    try:
        from benchlab.design.spice import model_card, unique_model_names
    except ImportError as exc:
        raise LibraryError(f"SPICE export is not available ({exc})") from exc
    names = unique_model_names([p.label for p in parts])
    cards = [model_card(p.label, p.params, name=name, polarity=p.polarity, lot=p.lot)
             for p, name in zip(parts, names)]
    return "\n".join(["* benchlab SPICE models (instances use W=1 L=1)", *[c.text for c in cards], ""])


def write_output(text: str, out: str | None) -> str | None:
    """Write ``text`` to ``out`` atomically (temp file + rename), or return it for stdout when ``out`` is None."""
    if not out:
        return text
    target = Path(out)
    if target.is_dir():
        raise InputError("is a folder; give a file name", path=str(target))
    tmp = target.with_name(target.name + ".tmp")
    try:
        tmp.write_text(text, encoding="utf-8", newline="")
        os.replace(tmp, target)
    except OSError as exc:
        raise InputError(f"cannot write: {exc.strerror or exc}", path=str(target)) from exc
    return None




def format_parts_table(parts: Sequence[PartRecord]) -> str:
    """A readable fixed-width table of parts (label, lot, state, model, Vth, KP, THETA, the stored VGS at 250 uA and
    gm at the part's operating current with that current, flags)."""
    header = (f"{'PART':<22} {'STATE':<9} {'MODEL':<7} {'VTH/V':>8} {'KP/(A/V2)':>10} {'THETA':>7} "
              f"{'VGS@250uA':>9} {'GM/(A/V)':>9} {'GM AT':>8}  NOTE")
    lines = [header]
    for p in parts:
        prm = p.params
        vth = f"{prm.vth:8.4f}" if prm else f"{'-':>8}"
        kp = f"{prm.kp:10.4g}" if prm and prm.model != "linear" else f"{'-':>10}"
        theta = f"{prm.theta:7.3g}" if prm and prm.theta else f"{'-':>7}"
        # the values stored with the part's current fit (benchlab.library.operating): VGS at 250 uA, gm at the
        # part's operating current (or the library's default) and that current; '-' where not computed
        vgs = f"{p.vgs_ref:9.4f}" if p.vgs_ref is not None else f"{'-':>9}"
        gm = f"{p.gm_op:9.4g}" if p.gm_op is not None else f"{'-':>9}"
        at = f"{format_si(p.gm_current, 'A'):>8}" if p.gm_op is not None and p.gm_current is not None else f"{'-':>8}"
        note = p.reason if p.state == "rejected" else ", ".join(p.flags)
        lines.append(f"{p.spec:<22} {p.state:<9} {(prm.model if prm else '-'):<7} {vth} {kp} {theta} {vgs} {gm} {at}  "
                     f"{note or ''}")
    lines.append(f"{len(parts)} part(s)")
    return "\n".join(lines)


def format_part_details(details: dict[str, Any]) -> str:
    """Readable text of :func:`show_part`'s result: identity, curve, fits, sweeps and history."""
    part = details["part"]
    lines = [f"{part['lot']}/{part['label']}  ({part['polarity']}-channel)  state: {part['state']}"
             + (f"  reason: {part['reason']}" if part.get("reason") else "")]
    for key in ("package", "notes", "classification"):
        if part.get(key):
            lines.append(f"  {key}: {part[key]}")
    params = part.get("params")
    if params:
        stderr = part.get("stderr") or {}
        shown = ["vth", "gm"] if params["model"] == "linear" else ["vth", "kp", "theta", "n"]
        units = {"vth": "V", "gm": "A/V", "kp": "A/V^2", "theta": "1/V", "n": ""}
        values = [f"{k}={params[k]:.6g} {units[k]}".rstrip() + (f" (+/- {stderr[k]:.2g})" if stderr.get(k) else "")
                  for k in shown if params.get(k) or k == "vth"]
        lines.append(f"  curve ({params['model']}): " + ", ".join(values))
        vgs_ref, gm_op = part.get("vgs_ref"), part.get("gm_op")
        lines.append(f"  VGS at 250 uA: {'-' if vgs_ref is None else f'{vgs_ref:.4f} V'}; gm: "
                     + ("not computed" if gm_op is None else f"{gm_op:.4g} A/V at {format_si(part['gm_current'], 'A')}")
                     + (" (its own operating current)" if part.get("operating_current") is not None else ""))
    if part.get("flags"):
        lines.append("  flags: " + ", ".join(part["flags"]))
    lines.append(f"  fits: {len(details['fits'])}")
    for fit in details["fits"]:
        lines.append(f"    {fit['fitted_at']}  {fit['source']:<8} {fit['model']:<7} vth={fit['params']['vth']:.6g} V"
                     + (f"  fitter {fit['fitter_version']}" if fit.get("fitter_version") else ""))
    lines.append(f"  sweeps: {len(details['sweeps'])}")
    for sweep in details["sweeps"]:
        lines.append(f"    {sweep['session_id']}  {sweep['classification'] or '-'}"
                     f"{'' if sweep['complete'] else ' (incomplete)'}  {sweep['csv_path']}")
    for change in details["history"]:
        lines.append(f"  {change['changed_at']}: {change['old_state']} -> {change['new_state']}"
                     + (f" ({change['reason']})" if change.get("reason") else "")
                     + (f" by {change['operator']}" if change.get("operator") else ""))
    return "\n".join(lines)


# ------------------------------------------------------------------------------------------- refit

REFIT_BATCH = 1024  # sweeps fitted together (one vectorised solve per model and batch)


@dataclass(frozen=True)
class RefitSummary:
    """What :func:`refit` did: parts re-fitted, and the parts left as they were with the reason."""

    refitted: list[tuple[str, str]]  # (LOT/LABEL, one-line summary of the new fit)
    unchanged: list[tuple[str, str]]  # (LOT/LABEL, why no new fit)
    model: str
    fitter_version: str

    def to_dict(self) -> dict[str, Any]:
        return {"model": self.model, "fitter_version": self.fitter_version,
                "refitted": [{"part": p, "fit": s} for p, s in self.refitted],
                "unchanged": [{"part": p, "reason": r} for p, r in self.unchanged]}


def _fittable_sweep(part: PartRecord, sweeps: list[dict[str, Any]], sweep_ids: list[int]):
    # the part's newest good sweep with points the fitter may use, chosen by the one rule every reader applies
    # (benchlab.sweepfile.fit_points: status ok, in point order, at or above the plan's detection current or the
    # noise floor the data show)
    import numpy as np

    from benchlab.extract.sweepdata import sweep_from_points
    from benchlab.sweepfile import fit_points

    # (a sweep read with its points carries the currents under "id": the ids come from a listing without)
    for sweep, sweep_id in reversed(list(zip(sweeps, sweep_ids))):
        if sweep.get("classification") not in (None, "good"):
            continue
        vgs = np.array([math.nan if v is None else v for v in sweep["vgs"]], dtype=float)
        ids = np.array([math.nan if i is None else i for i in sweep["id"]], dtype=float)
        # direction and spread_v as recorded (NULL in libraries imported before schema version 6: the
        # direction is then inferred, and the VGS noise estimated from the residuals)
        directions = sweep.get("direction") or []
        direction = directions if directions and all(d in ("up", "down") for d in directions) else None
        spread = np.array([math.nan if s is None else s for s in sweep.get("spread_v") or []], dtype=float)
        try:
            points = fit_points(vgs, ids, status=sweep["status"], point=sweep["point"], rows=sweep["point"],
                                direction=direction, spread_v=spread if spread.size == vgs.size else None,
                                detect_current=sweep.get("detect_current_a"), ordered=True,
                                source=f"{part.lot}/{part.label}")
            if len(points) >= 5:
                return sweep_id, sweep_from_points(points)
        except InputError:
            continue  # nothing this fitter may use in this sweep (as `benchlab fit` would refuse it)
    return None, None


def refit(path, *, lot: str | None = None, model: str = "auto", operator: str | None = None) -> RefitSummary:
    """Re-fit every stored sweep of the library (or of one lot) with the current fitter, in one transaction.

    Each part's newest good sweep is fitted again (in batches: one vectorised solve per model), at the
    temperature of the part's current fit, and the new fit is stored as the part's current curve; the
    older fits stay in its history. Parts with no fittable sweep (hand entries, imports without points,
    duds) are left as they are and listed with the reason. Nothing is written if anything fails.

    Parameters
    ----------
    path : str or Path
        The library (file or URL).
    lot : str, optional
        Only this lot's parts.
    model : str
        ``auto`` or a model name, as ``benchlab fit --model``.
    operator : str, optional
        Who made the change.
    """
    from benchlab.extract import FITTER_VERSION, fit_batch
    from benchlab.library.importer import fit_outcome
    from benchlab.models import T_NOMINAL_K

    refitted, unchanged = [], []
    with open_library(path, operator=operator) as lib:
        if lot is not None:
            lib.lot_id(lot)  # an unknown lot is one clear error
        todo = []
        with lib.snapshot():
            for part in lib.parts(lot=lot, state=None):
                ids = [s["id"] for s in lib.sweeps(part, with_points=False)]
                sweep_id, sweep = _fittable_sweep(part, lib.sweeps(part), ids)
                if sweep is None:
                    unchanged.append((f"{part.lot}/{part.label}", "no stored sweep with fittable points"))
                    continue
                kelvin = part.params.temperature_k if part.params is not None else T_NOMINAL_K
                todo.append((part, sweep_id, sweep, float(kelvin)))
        results = {}
        for kelvin in sorted({t for *_, t in todo}):
            group = [item for item in todo if item[3] == kelvin]
            for first in range(0, len(group), REFIT_BATCH):
                chunk = group[first:first + REFIT_BATCH]
                try:
                    fits = fit_batch([s for _, _, s, _ in chunk], model, temperature_k=kelvin)
                except BenchlabError:
                    # one sweep the model cannot fit: one by one, so it is named and the rest go on
                    fits = []
                    for part, _, sweep, _ in chunk:
                        try:
                            fits.append(fit_batch([sweep], model, temperature_k=kelvin)[0])
                        except BenchlabError as exc:
                            unchanged.append((f"{part.lot}/{part.label}", f"fit failed: {exc}"))
                            fits.append(None)
                results.update((part.id, (sweep_id, fit)) for (part, sweep_id, _, _), fit in zip(chunk, fits)
                               if fit is not None)
        with lib.write():
            for part, *_ in todo:
                if part.id not in results:
                    continue
                sweep_id, fit = results[part.id]
                outcome = fit_outcome(fit)
                lib.insert_fit(part.id, source="fit", params=outcome.params, stderr=outcome.stderr,
                               flags=outcome.flags, result=outcome.result, sweep_id=sweep_id,
                               fitter_version=outcome.fitter_version)
                refitted.append((f"{part.lot}/{part.label}", fit.summary()))
    return RefitSummary(refitted, unchanged, model, FITTER_VERSION)
