"""The engineer's Python entry point: the library, sweeps, fits and designs as pandas DataFrames.

Import it in a notebook::

    from benchlab import api
    parts = api.parts(lot="demo-led-rack")           # the default library, opened read-only
    parts.groupby("state").vth.describe()

Every function reuses the services behind the CLI (no numbers are computed twice); units are SI, named in a
column where not obvious (``time_s``; ``vth_cc`` is VGS at 250 uA, ``gm_current`` the current of ``gm``).
``library`` is a path (or ``postgresql://`` URL), None for the default (``$BENCHLAB_LIBRARY``, else the user data
folder), or a handle from :func:`library`. See docs/python-api.md.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from typing import Any, Iterator, Sequence

import pandas as pd

from benchlab.errors import LibraryError
from benchlab.services import tables

__all__ = ["library", "ReadOnlyLibrary", "parts", "sweeps", "fits", "designs", "design", "thermal"]

_READS = frozenset({"parts", "get_part", "lots", "sweeps", "fits", "history", "design", "designs", "binning",
                    "info", "snapshot", "path", "close"})


class ReadOnlyLibrary:
    """A library handle that only reads: every method that would change the library raises ``LibraryError``.

    Use it as a context manager (``with api.library() as lib: ...``) or call :meth:`close`.
    """

    def __init__(self, lib):
        self._lib = lib

    def __getattr__(self, name: str) -> Any:
        if name not in _READS:
            raise LibraryError(f"this library handle is read-only ('{name}' would change it); open it with "
                               f"benchlab.api.library(path, writable=True) to change it")
        return getattr(self._lib, name)

    def __enter__(self) -> "ReadOnlyLibrary":
        return self

    def __exit__(self, *exc_info) -> None:
        self._lib.close()


def library(path: str | os.PathLike | None = None, *, writable: bool = False):
    """Open the device library: ``path`` (a file or ``postgresql://`` URL) or the default one.

    Parameters
    ----------
    path : path-like or str, optional
        None for the default library (``$BENCHLAB_LIBRARY``, else the user data folder).
    writable : bool
        False (default): a :class:`ReadOnlyLibrary` whose methods only read. True: the full
        :class:`benchlab.library.Library`. A missing library file is never created here.

    Returns
    -------
    ReadOnlyLibrary or benchlab.library.Library
    """
    from benchlab.services.library import open_library

    lib = open_library(path, create=False)
    return lib if writable else ReadOnlyLibrary(lib)


@contextmanager
def _opened(handle) -> Iterator[Any]:
    if hasattr(handle, "parts") and hasattr(handle, "snapshot"):
        yield handle  # the caller's handle: theirs to close
        return
    lib = library(handle)
    try:
        yield lib
    finally:
        lib.close()


def parts(library=None, lot: str | None = None, state: str | None = None) -> pd.DataFrame:
    """One row per part of the library.

    Parameters
    ----------
    library : path, str, handle or None
        See the module docstring.
    lot : str, optional
        Only this lot.
    state : str, optional
        Only this state (``in_stock``, ``reserved``, ``used``, ``rejected``); None for all.

    Returns
    -------
    pandas.DataFrame
        ``lot, label, state, classification, model, vth, kp, theta, n, vth_cc, gm, gm_current,
        operating_current``, the standard errors as ``<name>_stderr``, ``flags`` (comma-separated) and ``reason``
        (why a part was rejected). ``vth_cc`` is the curve's VGS at 250 uA and ``gm`` its gm at ``gm_current``
        (the part's ``operating_current``, else the library's default: ``benchlab parts set-current`` /
        ``library set-current``), as the library stored them. Values a part's model does not have, or not
        computed, are empty (NaN), never 0.
    """
    with _opened(library) as lib:
        rows = tables.part_rows(lib, lot=lot, state=state)
    columns = ["lot", "label", "state", "classification", "model", "vth", "kp", "theta", "n", "vth_cc", "gm",
               "gm_current", "operating_current", "vth_stderr", "kp_stderr", "theta_stderr", "n_stderr", "gm_stderr", "vth_cc_stderr",
               "flags", "reason"]
    frame = pd.DataFrame(rows, columns=columns)
    numbers = [c for c in columns[5:] if c not in ("flags", "reason")]
    return frame.astype({c: float for c in numbers})


def sweeps(path_or_session: str | os.PathLike | Sequence[str | os.PathLike]) -> pd.DataFrame:
    """The points of one CSV, one session part (its ``.csv`` or ``.json``), a session folder or a folder of them.

    Returns
    -------
    pandas.DataFrame
        One row per point: ``part``, ``point``, ``vgs`` (V), ``id`` (A) and, for session records, ``time_s``,
        ``v_source`` (V), ``i_source`` (A), ``status``, ``direction``. Only ``status == "ok"`` points are
        curve (see docs/session-format.md).
    """
    paths = [path_or_session] if isinstance(path_or_session, (str, os.PathLike)) else list(path_or_session)
    return pd.DataFrame(tables.sweep_rows(paths))


def fits(paths: str | os.PathLike | Sequence[str | os.PathLike], model: str = "auto", **options: Any) -> pd.DataFrame:
    """Fit recorded sweeps: the rows ``benchlab fit --json`` prints, one per input sweep.

    Parameters
    ----------
    paths : path or sequence of paths
        CSV files, part sidecars, session folders or folders of sessions.
    model : str
        ``auto`` (default), ``linear``, ``square``, ``theta`` or ``ekv``.
    **options
        ``at_current``, ``cc_current``, ``window``, ``bootstrap``, ``temperature_c`` as for ``benchlab fit``.

    Returns
    -------
    pandas.DataFrame
        The JSON keys as columns (nested ones such as ``params`` or ``thresholds`` as dicts), plus each standard
        error as ``<name>_stderr``.
    """
    paths = [paths] if isinstance(paths, (str, os.PathLike)) else list(paths)
    return pd.DataFrame(tables.fit_rows(paths, model=model, **options))


def designs(library=None) -> pd.DataFrame:
    """The designs recorded in the library, one row each: ``id``, ``created``, ``kind``, ``parts``, and for a
    current sink ``mode, supply, i_target, r_chosen, series, resistor_tolerance, source_resistor, ref, i_ref,
    vgs, load_voltage, worst_error`` (SI units) and ``outputs`` (how many)."""
    with _opened(library) as lib:
        rows = tables.design_rows(lib)
    return pd.DataFrame(rows, columns=["id", "created", "kind", "parts", *tables.DESIGN_FIGURES, "outputs"])


def design(design_id: int, library=None) -> pd.DataFrame:
    """One recorded design's outputs, one row each (``part, i_out, error, vgs, v_compliance, in_compliance,
    p_part, p_source_resistor, di_dvsupply, drift_per_k, tc_fixed_vgs, region``); the whole record (supply,
    resistors, reference, Monte Carlo, cautions ...) is in ``.attrs["design"]``."""
    with _opened(library) as lib:
        rows, stored = tables.design_output_rows(lib, design_id)
    frame = pd.DataFrame(rows)
    frame.attrs["design"] = stored
    return frame


def thermal(library=None, lot: str | None = None, state: str | None = None) -> pd.DataFrame:
    """One row per part with its measured thermal values (``benchlab thermal tempco`` / ``rth``).

    Returns
    -------
    pandas.DataFrame
        ``lot, label`` and for each of ``vth_tempco`` (V/K), ``kp_exponent``, ``ztc_vgs`` (V), ``ztc_id`` (A),
        ``rth`` (K/W): the value, ``<name>_stderr`` and ``<name>_measured_at``; empty (NaN) where never measured.
    """
    from benchlab.library.thermal import QUANTITIES

    with _opened(library) as lib:
        rows = tables.thermal_rows(getattr(lib, "_lib", lib), lot=lot, state=state)
    columns = ["lot", "label"] + [c for q in QUANTITIES for c in (q, f"{q}_stderr", f"{q}_measured_at")]
    frame = pd.DataFrame(rows, columns=columns)
    return frame.astype({c: float for q in QUANTITIES for c in (q, f"{q}_stderr")})
