"""Fitting service: find sweeps on disk, fit them in one batch, print or store the results.

Inputs are plain CSV files (header row with ``vgs`` and ``id``) or session records
(docs/session-format.md): a session folder, a part's ``.json`` sidecar or its ``.csv``.
Every input is read and checked before anything is fitted or written, so bad input
gets one clear error and leaves every file untouched.
"""

from __future__ import annotations

import errno
import json
import math
import os
import stat
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from benchlab.bounds import check_operating_current
from benchlab.errors import BenchlabError, FitError, InputError
from benchlab.extract import FitResult, Sweep, fit_batch, load_sweep_csv, operating_curve
from benchlab.extract.sweepdata import load_sweeps_csv
from benchlab.extract.fit import DEFAULT_CC_CURRENT
from benchlab.models import T_NOMINAL_K
from benchlab.kinds import PartClass, PointStatus
from benchlab.names import check_name, check_session_names, inside
from benchlab.sweepfile import SESSION_FORMAT, SWEEP_FORMAT

# the temperatures fit_batch accepts (150-600 K), in degC
T_MIN_C, T_MAX_C = 150.0 - 273.15, 600.0 - 273.15
# the running fit's points: above the sweep's default detection current (SweepPlan.detect_current_a)
DETECT_FLOOR_A = 2e-6
# the JSON Lines keys every output line carries first (the full result follows)
SUMMARY_KEYS = ("file", "label", "model", "vth", "kp", "theta", "vth_cc", "gm", "rms_residual", "stderr", "flags")


@dataclass(frozen=True)
class SweepSource:
    """One sweep on disk: its CSV and, for session records, its JSON sidecar."""

    csv_path: Path
    sidecar_path: Path | None
    label: str
    classification: str | None = None  # the sweep engine's verdict (good, open, shorted, leaky, unstable)
    ambient_c: float | None = None  # the session's recorded ambient temperature


@dataclass(frozen=True)
class FitRecord:
    """A fitted sweep and where it came from."""

    source: SweepSource
    result: FitResult

    def to_dict(self) -> dict[str, Any]:
        """The JSON Lines object: summary keys first (``theta`` 0 when none), then the full result."""
        full = self.result.to_dict()
        data = {"file": str(self.source.csv_path), "label": self.source.label,
                "classification": self.source.classification}
        for key in SUMMARY_KEYS[2:]:
            data[key] = full.pop(key)
        data["theta"] = data["theta"] or 0.0
        data.update(full)  # the rest of the result, in its order
        return data


def _read_json(path: Path) -> dict[str, Any]:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("no such file", path=str(path)) from None
    except (OSError, ValueError) as exc:
        raise InputError(f"not readable JSON ({exc})", path=str(path)) from None
    if not isinstance(data, dict):
        raise InputError("expected a JSON object", path=str(path))
    return data


def _session_sources(folder: Path, allow_empty: bool = False) -> list[SweepSource]:
    meta = _read_json(folder / "session.json")
    if meta.get("format") != SESSION_FORMAT:
        raise InputError(f"not a benchlab session (format {meta.get('format')!r})", path=str(folder / "session.json"))
    check_session_names(meta, str(folder / "session.json"))
    sources = []
    ambient = _ambient(meta)
    for label in meta.get("parts", []):
        csv_path = inside(folder, label, ".csv")  # a crafted '../x' entry is refused, never followed
        if csv_path.exists():
            sidecar = inside(folder, label, ".json")
            verdict = sweep_verdict(_read_json(sidecar)) if sidecar.exists() else None
            sources.append(SweepSource(csv_path, sidecar if sidecar.exists() else None, str(label), verdict,
                                       ambient))
    if not sources and not allow_empty:
        raise InputError("the session holds no part sweeps yet", path=str(folder))
    return sources


def sweep_verdict(sidecar: dict[str, Any]) -> str | None:
    """A sweep record's classification; a sweep that did not finish (``complete`` false: stopped, killed, or
    written by an older benchlab that judged interrupted parts) is ``interrupted`` whatever it says."""
    if sidecar.get("complete") is False or sidecar.get("classification") == PartClass.INTERRUPTED:
        return str(PartClass.INTERRUPTED)
    value = sidecar.get("classification")
    return None if value is None else str(value)


def _ambient(meta: dict[str, Any]) -> float | None:
    value = meta.get("ambient_c")
    return float(value) if isinstance(value, (int, float)) and math.isfinite(value) else None


def _folder_ambient(folder: Path) -> float | None:
    # a part's record inside a session folder takes the session's ambient temperature
    meta_path = folder / "session.json"
    if not meta_path.exists():
        return None
    meta = _read_json(meta_path)
    return _ambient(meta) if meta.get("format") == SESSION_FORMAT else None


def _mode(path: Path) -> int | None:
    # the file's mode, None where Path.exists() says False (one stat where is_dir() and exists() took two)
    try:
        return os.stat(path).st_mode
    except OSError as exc:
        if exc.errno in (errno.ENOENT, errno.ENOTDIR, errno.EBADF, errno.ELOOP):
            return None
        raise
    except ValueError:  # a path the system cannot hold (a NUL byte)
        return None


def resolve_inputs(paths) -> list[SweepSource]:
    """Turn command-line paths into sweep sources (a session folder gives all its parts, a folder
    of sessions all of theirs).

    Raises
    ------
    InputError
        A path that does not exist or is neither a CSV, a part sidecar nor a session.
    """
    sources: list[SweepSource] = []
    for raw in paths:
        path = Path(raw)
        mode = _mode(path)
        if mode is not None and stat.S_ISDIR(mode):
            if (path / "session.json").exists():
                sources += _session_sources(path)
                continue
            # a folder of sessions (e.g. ./sessions)
            inner = sorted(p for p in path.iterdir() if (p / "session.json").exists())
            if not inner:
                raise InputError("not a benchlab session nor a folder of sessions (no session.json found)",
                                 path=str(path))
            for folder in inner:
                sources += _session_sources(folder, allow_empty=True)
        elif mode is None:
            raise InputError("no such file", path=str(path))
        elif path.suffix.lower() == ".json":
            data = _read_json(path)
            if data.get("format") == SESSION_FORMAT:
                sources += _session_sources(path.parent)
            elif data.get("format") == SWEEP_FORMAT:
                csv_path = path.with_suffix(".csv")
                if not csv_path.exists():
                    raise InputError(f"the sidecar's raw points {csv_path.name} are missing", path=str(path))
                label = check_name("part label", data.get("label") or path.stem, path=str(path))
                sources.append(SweepSource(csv_path, path, label,
                                           sweep_verdict(data), _folder_ambient(path.parent)))
            else:
                raise InputError("not a benchlab sweep sidecar or session file", path=str(path))
        else:
            sidecar = path.with_suffix(".json")
            data = _read_json(sidecar) if _mode(sidecar) is not None else {}
            is_record = data.get("format") == SWEEP_FORMAT
            sources.append(SweepSource(path, sidecar if is_record else None, path.stem,
                                       sweep_verdict(data) if is_record else None,
                                       _folder_ambient(path.parent) if is_record else None))
    if not sources:
        raise InputError("no input files given")
    return sources


def _detect_current(source: SweepSource) -> float | None:
    # the sweep engine records its search steps too; below its plan's detection current they are not data
    if source.sidecar_path is None:
        return None
    plan = _read_json(source.sidecar_path).get("plan")
    value = plan.get("detect_current_a") if isinstance(plan, dict) else None
    return float(value) if isinstance(value, (int, float)) and value > 0 else None


def load_source(source: SweepSource) -> Sweep:
    """Read and check one sweep; a session record leaves out the points taken before the part conducted."""
    return load_sweep_csv(source.csv_path, detect_current=_detect_current(source))


def load_sources(sources: list[SweepSource]) -> list:
    """:func:`load_source` of many sweeps at once (plain CSVs are read together): per source its
    :class:`Sweep`, or the :class:`InputError` that refused it."""
    detects: list = []
    for source in sources:
        try:
            detects.append(_detect_current(source))
        except InputError as exc:
            detects.append(exc)
    wanted = [k for k, d in enumerate(detects) if not isinstance(d, InputError)]
    found = load_sweeps_csv([sources[k].csv_path for k in wanted], [detects[k] for k in wanted])
    for k, sweep in zip(wanted, found):
        detects[k] = sweep
    return detects


@dataclass(frozen=True)
class FitRun:
    """The outcome of :func:`fit_files`: the fits, the dud parts that could not be fitted, and the
    sweeps refused for bad data (``failed``: the run fitted the others; the command exits non-zero)."""

    records: list[FitRecord]
    skipped: list[tuple[SweepSource, str]]
    failed: list[tuple[SweepSource, BenchlabError]] = field(default_factory=list)


def _is_dud(source: SweepSource) -> bool:
    return source.classification not in (None, PartClass.GOOD)


def fit_files(paths, *, model: str = "auto", at_current: float | None = None,
              cc_current: float = DEFAULT_CC_CURRENT, window=None, bootstrap: int = 0,
              save: bool = False, temperature_c: float | None = None) -> FitRun:
    """Fit every sweep found in ``paths`` (one batch) and optionally store the fits in the sidecars.

    A part the sweep classified as a dud (open, shorted, leaky, unstable) or whose sweep was
    interrupted is skipped with the reason, never fitted, and stops nothing. A sweep
    whose data are refused (bad rows, too few points for the model) is listed in ``failed``
    and the others are still fitted; with ``save`` nothing is written then. Bad paths or
    options are an error before anything is read.

    Parameters
    ----------
    paths : sequence of str or Path
        CSV files, part sidecars, session files, session folders or folders of sessions.
    model, at_current, cc_current, window, bootstrap
        See :func:`benchlab.extract.fit_batch`.
    save : bool
        Append each fit (with the options that produced it) to ``fits`` in its sidecar.
    temperature_c : float, optional
        The parts' temperature during the sweeps (degC). Default: the session's recorded
        ambient temperature, else 27 degC (SPICE's nominal temperature).

    Returns
    -------
    FitRun

    Raises
    ------
    InputError
        Bad paths, or ``save`` with a plain CSV (no sidecar); raised before anything
        is written.
    """
    if temperature_c is not None and not (math.isfinite(temperature_c)
                                          and T_MIN_C <= temperature_c <= T_MAX_C):
        raise InputError(f"ambient temperature {temperature_c:g} degC is not a bench temperature "
                         f"({T_MIN_C:g} to {T_MAX_C:g} degC)")
    if at_current is not None:
        check_operating_current(at_current, "--at-current (the current for gm and VGS)")
    check_operating_current(cc_current, "--cc-current (the constant-current threshold's current)")
    sources = resolve_inputs(paths)
    if save:
        plain = [s for s in sources if s.sidecar_path is None]
        if plain:
            raise InputError("--save stores fits in a session record's sidecar; this CSV has none "
                             "(fit it without --save, or fit the session)", path=str(plain[0].csv_path))
    loaded, skipped, failed, wanted = [], [], [], []
    for source in sources:
        if source.classification == PartClass.INTERRUPTED:
            skipped.append((source, "the sweep did not finish, so the part was not judged nor fitted; sweep it "
                                    f"again (benchlab bag --resume {source.csv_path.parent})"))
        elif _is_dud(source):
            skipped.append((source, "a dud is not fitted: its curve does not describe a working transistor"))
        else:
            wanted.append(source)
    for source, sweep in zip(wanted, load_sources(wanted)):
        if isinstance(sweep, InputError):
            failed.append((source, sweep))
        else:
            loaded.append((source, sweep))
    options = dict(at_current=at_current, cc_current=cc_current, window=window, bootstrap=bootstrap)

    def kelvin(source: SweepSource) -> float:
        celsius = temperature_c if temperature_c is not None else source.ambient_c
        return T_NOMINAL_K if celsius is None else celsius + 273.15

    fitted = {}
    for temperature in sorted({kelvin(s) for s, _ in loaded}):  # one batch per temperature
        group = [(s, w) for s, w in loaded if kelvin(s) == temperature]
        try:
            results = fit_batch([w for _, w in group], model, temperature_k=temperature, **options)
        except (FitError, InputError):
            # one sweep the model cannot fit stops a batch: fit one by one to name it and keep the rest
            results = []
            for source, sweep in group:
                try:
                    results.append(fit_batch([sweep], model, temperature_k=temperature, **options)[0])
                except (FitError, InputError) as exc:
                    failed.append((source, exc))
                    results.append(None)
        fitted.update((id(s), r) for (s, _), r in zip(group, results) if r is not None)
    records = [FitRecord(s, fitted[id(s)]) for s in sources if id(s) in fitted]
    if failed and not records and not skipped:
        raise failed[0][1]  # nothing else to show: the one clear error
    if save and not failed:  # a refused sweep anywhere: nothing is written
        stored = {"model": model, "at_current": at_current, "cc_current": cc_current,
                  "window": list(window) if window else None, "bootstrap": int(bootstrap),
                  "temperature_c": temperature_c}
        for record in records:
            store_fit(record, stored)
    return FitRun(records, skipped, failed)


def store_fit(record: FitRecord, options: dict[str, Any]) -> None:
    """Append ``record``'s result to its sidecar's ``fits`` (atomic replace of the sidecar)."""
    from benchlab.sweep.session import write_json_atomic

    path = record.source.sidecar_path
    data = _read_json(path)
    entry = record.result.to_dict()
    entry["fitted_at"] = datetime.now(timezone.utc).isoformat(timespec="seconds")
    entry["options"] = options
    data.setdefault("fits", []).append(entry)
    write_json_atomic(path, data)


def curve_of(record: FitRecord, count: int) -> dict[str, list[float]]:
    """The fitted part's VGS, gm and gm/ID at ``count`` currents across its fitted window."""
    window = record.result.window
    return operating_curve(record.result.params, window["i_min"], window["i_max"], count)


def json_lines(records: list[FitRecord], curve_points: int = 0) -> str:
    """One JSON object per sweep, one per line (no NaN: undefined numbers are null); with
    ``curve_points`` each carries ``curve`` (see :func:`curve_of`)."""
    lines = []
    # json.dumps(data, allow_nan=False), one encoder for all; plain data holds no cycles to look for
    encode = json.JSONEncoder(allow_nan=False, check_circular=False).encode
    for record in records:
        data = record.to_dict()
        if curve_points:
            data["curve"] = curve_of(record, curve_points)
        lines.append(encode(data))
    return "\n".join(lines)


def format_curve(record: FitRecord, count: int) -> str:
    """The operating-point table of one fit (ID, VGS, gm, gm/ID), for humans."""
    curve = curve_of(record, count)
    lines = [f"{record.source.label} ({record.result.model} fit)", "  ID A        VGS V     gm A/V      gm/ID 1/V"]
    for i, v, g, e in zip(curve["id"], curve["vgs"], curve["gm"], curve["gm_over_id"]):
        lines.append(f"  {i:<11.4g} {v:<9.4f} {g:<11.4g} {e:.3f}")
    return "\n".join(lines)


def _num(value, fmt: str, scale: float = 1.0) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    return format(value * scale, fmt)


THRESHOLD_LABELS = (("model", "fitted model"), ("constant_current", "constant current"),
                    ("extrapolation_sqrt_max_slope", "sqrt(ID) max-slope extrapolation"),
                    ("second_derivative_sqrt", "second derivative of sqrt(ID)"))

# why a data-based threshold can be missing (see benchlab.extract.thresholds)
WHY_NO_THRESHOLD = {
    "constant_current": "outside the measured currents; never extrapolated",
    "second_derivative_sqrt": "no kink above the noise inside the data: the sweep starts at or above threshold, "
                              "or is too noisy",
    "extrapolation_sqrt_max_slope": "too few points for a tangent",
}


def _thresholds_line(result: FitResult) -> str:
    # every threshold definition of the result ('-' where the data hold none), in volts
    parts = []
    for key, label in THRESHOLD_LABELS:
        value = result.thresholds.get(key)
        why = ""
        if value is None and key in WHY_NO_THRESHOLD:
            why = f" ({WHY_NO_THRESHOLD[key]})"
        parts.append(f"{label} {_num(value, '.4f')}" + (" V" if value is not None else why))
    return "; ".join(parts)


def format_table(records: list[FitRecord]) -> str:
    """A readable table of the fits, then the reason and any warnings of each sweep."""
    head = ("sweep", "model", "Vth V", "+-mV", "KP A/V2", "THETA", "n", "VGS@Icc V", "gm A/V", "rms %", "flags")
    rows = []
    for rec in records:
        r = rec.result
        kp = r.params.gm if r.model == "linear" else r.kp
        rows.append((rec.source.label, r.model, _num(r.vth, ".4f"), _num(r.stderr.get("vth"), ".2f", 1e3),
                     _num(kp, ".4g") + (" gm" if r.model == "linear" else ""), _num(r.theta, ".3g"),
                     _num(r.n if r.model == "ekv" else None, ".3f"), _num(r.vth_cc, ".4f"), _num(r.gm, ".4g"),
                     _num(r.rms_relative, ".2f", 100.0), ",".join(r.flags)))
    widths = [max(len(str(x)) for x in col) for col in zip(head, *rows)]
    lines = ["  ".join(str(x).ljust(w) for x, w in zip(row, widths)).rstrip() for row in (head, *rows)]
    first = records[0].result if records else None
    if first is not None:
        lines.append(f"(Icc = {first.cc_current * 1e6:g} uA" +
                     (f"; gm at {first.at_current:g} A)" if first.at_current is not None else ")"))
    for rec in records:
        r = rec.result
        lines.append(f"{rec.source.label}: {r.reason}; {r.window['points']} points "
                     f"{r.window['i_min']:.3g}..{r.window['i_max']:.3g} A")
        lines.append("  thresholds: " + _thresholds_line(r))
        if r.at_current is not None:
            lines.append(f"  at {r.at_current:g} A: VGS {_num(r.vgs_at_current, '.4f')} V, "
                         f"gm {_num(r.gm, '.4g')} A/V (from the {r.model} fit)")
        if rec.source.classification not in (None, PartClass.GOOD):
            lines.append(f"  note: the sweep classified this part '{rec.source.classification}'; its fit "
                         "does not describe a working transistor")
        lines += [f"  warning: {note}" for note in r.notes]
    return "\n".join(lines)


def running_vth_stderr(points, temperature_k: float = T_NOMINAL_K) -> float:
    """The Vth standard error (V) of a sweep's points so far, as ``benchlab fit`` would report it (model auto).

    The sweep engine's stop rule for ``vth_stderr_v`` (docs/sweeps.md); only ``ok`` points above the detection
    floor are fitted, as everywhere. ``inf`` when the points are too few or the fit fails.

    Parameters
    ----------
    points : sequence of SweepPoint
        The sweep's points (any order).
    temperature_k : float
        Temperature of the part (sets UT in the ekv model).
    """
    import numpy as np

    from benchlab.extract.fit import fit_sweep

    ok = sorted((p.vgs, p.id) for p in points if p.status == PointStatus.OK and p.id > DETECT_FLOOR_A)
    if len(ok) < 4:
        return math.inf
    vgs, i_d = (np.array(column) for column in zip(*ok))
    try:
        result = fit_sweep(vgs, i_d, temperature_k=temperature_k)
    except BenchlabError:
        return math.inf
    err = result.stderr.get("vth")
    return float(err) if err is not None and math.isfinite(err) else math.inf

