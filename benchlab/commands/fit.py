"""``benchlab fit``: fit threshold, KP/THETA or the full curve to recorded sweeps (no instrument needed)."""

from __future__ import annotations

import argparse
import gc
import sys

from benchlab.choices import DEFAULT_CC_CURRENT, MODEL_CHOICES
from benchlab.commands._args import json_option, name_options, quantity, whole_number
from benchlab.errors import InputError


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "fit", help="fit recorded sweeps (CSV files or session records)",
        description="Fit diode-connected sweeps: threshold voltage by several published definitions, KP, THETA, "
                    "the EKV slope factor, gm at an operating current, with standard errors and warnings. Input: "
                    "CSV files with a header row holding 'vgs' (V) and 'id' (A), or session records (a session "
                    "folder, a part's .json sidecar or .csv). Points whose status is not 'ok' are never fitted. "
                    "Nothing is measured: fits can be re-run from the raw points at any time.")
    parser.add_argument("files", nargs="+", metavar="FILE",
                        help="CSV file, part sidecar (.json), session folder or folder of sessions")
    parser.add_argument("--model", choices=MODEL_CHOICES, default="auto",
                        help="model to fit; auto chooses among square, theta and ekv by AICc (default auto)")
    parser.add_argument("--at-current", type=quantity("A"), metavar="A",
                        help="operating current for gm and VGS (also centres the linear model's window)")
    parser.add_argument("--cc-current", type=quantity("A"), default=DEFAULT_CC_CURRENT, metavar="A",
                        help="constant-current threshold criterion (default 250u)")
    parser.add_argument("--window", type=quantity("A"), nargs=2, metavar=("LOW", "HIGH"),
                        help="fit only points with LOW <= ID <= HIGH (currents, e.g. 1m 50m)")
    parser.add_argument("--bootstrap", type=whole_number, default=0, metavar="N",
                        help="standard errors from N residual-bootstrap resamples (default: from the fit covariance)")
    parser.add_argument("--ambient", type=quantity("degC", "any"), metavar="C",
                        help="the parts' temperature during the sweeps in degC (default: the session's ambient, "
                             "else 27); sets UT for the ekv slope factor and is stored with the parameters")
    parser.add_argument("--curve", type=whole_number, default=0, metavar="N",
                        help="also give VGS, gm and gm/ID of the fit at N currents across the fitted window")
    json_option(parser, "each sweep's fit")
    parser.add_argument("--plot", metavar="FILE.png",
                        help="also draw each fitted sweep: its points, the fitted curve, every threshold found and "
                             "the residuals (.png, .pdf or .svg; several sweeps go to FILE-LABEL.png)")
    parser.add_argument("--save", action="store_true",
                        help="append each fit to 'fits' in its session sidecar (session records only)")
    parser.set_defaults(func=_fit)


def _fit(args) -> int:
    if args.plot:
        from benchlab.services.report import check_plot_path

        check_plot_path(args.plot)  # a bad file name is refused before anything is fitted or written

    from benchlab.services import fitting as service

    # a batch of sweeps makes many small objects and no reference cycles: the cyclic collector would only scan
    # them again and again (about 5 % of a large run); reference counting still frees everything
    collecting = gc.isenabled()
    gc.disable()
    try:
        try:
            run = service.fit_files(args.files, model=args.model, at_current=args.at_current,
                                    cc_current=args.cc_current, window=tuple(args.window) if args.window else None,
                                    bootstrap=args.bootstrap, save=args.save, temperature_c=args.ambient)
        except InputError as exc:
            raise name_options(exc, {"ambient temperature": "--ambient"}) from None
        if run.records and args.json:
            print(service.json_lines(run.records, args.curve))
        elif run.records:
            print(service.format_table(run.records))
            for record in run.records if args.curve else ():
                print(service.format_curve(record, args.curve))
    finally:
        if collecting:
            gc.enable()
    if args.plot and run.records:
        from benchlab.services.report import plot_fits

        for path in plot_fits(run.records, args.plot):
            print(f"wrote {path}", file=sys.stderr)
    for source, why in run.skipped:
        print(f"skipped {source.label} (classified {source.classification}): {why}", file=sys.stderr)
    for source, exc in run.failed:
        print(f"benchlab: error: {exc}", file=sys.stderr)
    if run.failed:
        saved = "; nothing saved" if args.save else ""
        print(f"benchlab: {len(run.failed)} of {len(run.failed) + len(run.records) + len(run.skipped)} sweep(s) "
              f"refused, the others fitted{saved}", file=sys.stderr)
        return max(exc.exit_code for _, exc in run.failed)
    if args.save:
        print(f"saved {len(run.records)} fit(s) to their session sidecars", file=sys.stderr)
    return 0 if run.records else 1  # nothing fitted: say so to scripts too
