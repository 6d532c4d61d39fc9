"""``benchlab thermal tempco`` and ``benchlab thermal rth``: thermal characterization of one part."""

from __future__ import annotations

import argparse
import sys

from benchlab.choices import DEFAULT_SESSIONS_DIR
from benchlab.commands._args import (add_sim_options, json_option, library_option, quantity, quantity_list,
                                     refuse_given, sim_settings, whole_number)

_SIM_NAMES = ("seed", "time_scale", "log")


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--part", required=True, metavar="LABEL", help="label of the part in the fixture, e.g. Q07")
    p.add_argument("--lot", help="the part's lot in the library, when its label is in several lots (the results "
                                 "are stored on LOT/LABEL)")
    where = p.add_mutually_exclusive_group()
    where.add_argument("--bench", metavar="CONFIG", help="bench file with a [thermal] table (docs/bench-config.md)")
    where.add_argument("--sim", action="store_true", help="the built-in simulated bench (SMU fixture, heated block)")
    p.add_argument("--sessions", metavar="DIR", default=DEFAULT_SESSIONS_DIR,
                   help=f"where the readings go (default ./{DEFAULT_SESSIONS_DIR})")
    json_option(p, "the result (vth_tempco, kp_exponent, ztc_vgs, ztc_id, rth, null where not measured, and stderr "
                   "with the same keys)")
    add_sim_options(p, *_SIM_NAMES, title="simulated bench (with --sim; its SMU fixture with a heated block)")


def _sim_options(args):
    if not args.sim:
        refuse_given(args, ["--sim-seed", "--sim-time-scale", "--sim-log"],
                     "sets up the simulated bench: it goes with --sim, not with --bench")
        return None
    from benchlab.services.characterize import SimOptions

    sim = sim_settings(args, _SIM_NAMES)
    return SimOptions(fixture="smu", seed=sim["seed"], time_scale=sim["time_scale"], log_path=sim["log"])


def _print(outcome, as_json: bool) -> int:
    from benchlab.services import thermal as svc

    if as_json:
        print(svc.dumps(outcome))
    else:
        print("\n".join(svc.format_outcome(outcome)))
    return 0


def _say(args):
    # messages go to stderr so that --json keeps stdout to the one object
    return lambda text: print(text, file=sys.stderr, flush=True)


def run_tempco(args: argparse.Namespace) -> int:
    from benchlab.commands.sweep import ProgressBar
    from benchlab.services import thermal as svc

    outcome = svc.measure_tempco(args.part, args.temps, bench_path=args.bench, sim=_sim_options(args),
                                 sessions_root=args.sessions, library=args.library, lot=args.lot, model=args.model,
                                 bootstrap=args.bootstrap, on_event=None if args.json else ProgressBar(out=sys.stderr),
                                 say=_say(args))
    return _print(outcome, args.json)


def run_rth(args: argparse.Namespace) -> int:
    from benchlab.services import thermal as svc
    from benchlab.sweep.thermal_plan import RthPlan

    plan = RthPlan(sense_current_a=args.sense_current, heating_power_w=args.power, heatsink_k_per_w=args.heatsink,
                   calibration_rise_k=args.calibration_rise)
    outcome = svc.measure_rth(args.part, bench_path=args.bench, sim=_sim_options(args), sessions_root=args.sessions,
                              library=args.library, lot=args.lot, plan=plan, say=_say(args))
    return _print(outcome, args.json)


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser("thermal", help="thermal characterization of a part: tempco, ZTC point, Rth",
                              description="Measure a part's threshold temperature coefficient, mobility exponent "
                                          "and zero-temperature-coefficient point (tempco), or its thermal "
                                          "resistance by the electrical method (rth); results go to the library "
                                          "when the part is there.")
    sub = p.add_subparsers(dest="thermal_command", metavar="MEASUREMENT")
    t = sub.add_parser("tempco", parents=[library_option()],
                       help="sweep the part at two or more fixture temperatures: dVth/dT, KP ~ T^-m, ZTC point")
    _common(t)
    t.add_argument("--temps", type=quantity_list("degC", "any", min_count=2), required=True, metavar="C1,C2,...",
                   help="fixture temperatures in degC, e.g. 25,60")
    t.add_argument("--model", choices=("auto", "square", "theta", "ekv"), default="auto",
                   help="drain-current model of the fits (default auto, chosen on the coldest sweep)")
    t.add_argument("--bootstrap", type=whole_number, default=100, metavar="N",
                   help="resamples for the standard errors (default 100)")
    t.set_defaults(func=run_tempco)
    r = sub.add_parser("rth", parents=[library_option()],
                       help="thermal resistance in the fixture by the electrical method (K-factor, heat, sense)")
    _common(r)
    r.add_argument("--heatsink", type=quantity("K/W", "nonnegative"), default=0.0, metavar="K/W",
                   help="heat sink between the part and the fixture's sensed point during the measurement "
                        "(subtracted, so the stored Rth is the part's own; default 0)")
    r.add_argument("--power", type=quantity("W"), metavar="W",
                   help="heating power (default: the bench file's thermal.max_heating_w)")
    r.add_argument("--sense-current", type=quantity("A"), default=1e-3, metavar="A",
                   help="sense current of the K-factor and the cooling readings (default 1 mA)")
    r.add_argument("--calibration-rise", type=quantity("K"), default=40.0, metavar="K",
                   help="second K-factor temperature, this many kelvin above the first (default 40)")
    r.set_defaults(func=run_rth)
