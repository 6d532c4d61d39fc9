"""``benchlab sweep`` (one part) and ``benchlab bag`` (a whole bag into one session)."""

from __future__ import annotations

import argparse
import sys
from typing import Any, TextIO

from benchlab.choices import CURRENT_FROM, DEFAULT_SESSIONS_DIR
from benchlab.commands._args import (add_sim_options, counting_number, json_option, name_options, operator_name,
                                     print_json, quantity, quantity_list, refuse_given, sim_settings)
from benchlab.errors import BenchlabError, InputError
from benchlab.kinds import SweepMode


class ProgressBar:
    """Turns sweep events into a one-line progress bar (point count, elapsed time) and summary lines."""

    def __init__(self, stream: TextIO | None = None, out: TextIO | None = None, width: int = 24):
        self.stream = stream or sys.stderr
        self.out = out or sys.stdout
        self.width = width
        self._drawn = False
        # redraw in place only on a terminal; a log file gets just the summary lines
        self.live = bool(getattr(self.stream, "isatty", lambda: False)())
        self.stopped_label: str | None = None  # the part whose sweep stopped on an error or interrupt

    def __call__(self, event: Any) -> None:
        from benchlab.sweep.records import PointMeasured, SweepDone, SweepFault

        if isinstance(event, SweepFault):
            self.stopped_label = event.label
        if isinstance(event, PointMeasured):
            if not self.live:
                return
            filled = int(round(self.width * max(0.0, min(1.0, event.progress))))
            bar = "#" * filled + "-" * (self.width - filled)
            self.stream.write(f"\r  {event.label:<8} [{bar}] {event.count:>3} points  {event.elapsed_s:6.1f} s ")
            self.stream.flush()
            self._drawn = True
        elif isinstance(event, (SweepDone, SweepFault)):
            if self._drawn:
                self.stream.write("\n")
                self.stream.flush()
                self._drawn = False
            if isinstance(event, SweepDone):
                print(event.summary, file=self.out, flush=True)
            elif event.shutdown_problems:
                print(f"{event.label}: stopped ({event.kind}) after {event.elapsed_s:.1f} s - WARNING: could not "
                      f"confirm the output is off ({'; '.join(event.shutdown_problems)}); check the instrument "
                      f"before touching the fixture", file=self.out, flush=True)
            else:
                print(f"{event.label}: stopped ({event.kind}) after {event.elapsed_s:.1f} s - output switched off",
                      file=self.out, flush=True)


# internal field (or phrase) of a plan error -> the option a user typed
_PLAN_OPTIONS = {"points must": "--points must", "max_current_a": "--max-current", "min_current_a": "--min-current",
                 "start_v": "--start-v", "use_list": "--list", "pulsed duty cycle": "--pulsed duty cycle",
                 "current_from": "--current-from", "settle_s": "--settle", "nplc": "--nplc",
                 "vth_stderr_v": "--vth-stderr"}
_SIM_NAMES = ("fixture", "seed", "time_scale", "fault", "log")


def _add_bench_options(p: argparse.ArgumentParser) -> None:
    where = p.add_mutually_exclusive_group()
    where.add_argument("--bench", metavar="CONFIG", help="bench file (TOML, see docs/bench-config.md)")
    where.add_argument("--sim", action="store_true", help="use the built-in simulated bench (started in process)")
    p.add_argument("--sessions", metavar="DIR", help=f"where sessions go (default ./{DEFAULT_SESSIONS_DIR})")
    p.add_argument("--operator", help="who is at the bench, stored in the session and shown in reports "
                                      "(default: the login name)")
    p.add_argument("--ambient", type=quantity("degC", "any"), metavar="C",
                   help="ambient temperature in degC (stored in the session)")
    p.add_argument("--points", type=counting_number, metavar="N", help="target points of the sweep (default 24)")
    p.add_argument("--max-current", type=quantity("A", why="targets are spread in log(current)"), metavar="A",
                   help="top target current (default 100m)")
    p.add_argument("--min-current", type=quantity("A", why="targets are spread in log(current)"), metavar="A",
                   help="first target current (default 10u)")
    p.add_argument("--start-v", type=quantity("V", "nonnegative"), metavar="V",
                   help="first source voltage of an adaptive sweep")
    p.add_argument("--mode", choices=tuple(SweepMode),
                   help="targets: log-spaced currents, adaptive (default); voltages: --voltages list; "
                        "currents: SMU forcing log-spaced currents")
    p.add_argument("--voltages", type=quantity_list("V"), metavar="V1,V2,...", help="explicit source voltages")
    p.add_argument("--list", action="store_true", default=None,
                   help="SMU: upload --voltages as lists (fewer round trips)")
    p.add_argument("--pulsed", type=quantity("%"), metavar="DUTY",
                   help="pulsed sweep: output on only to measure, duty 0-1 (or 0-100 %%)")
    p.add_argument("--down-sweep", action="store_true", default=None, help="sweep back down after the up-sweep")
    p.add_argument("--current-from", choices=CURRENT_FROM,
                   help="resistor fixture: drain current read by the meter (default) or from the resistor drop")
    p.add_argument("--settle", type=quantity("s", "nonnegative"), metavar="S",
                   help="wait after each setpoint (e.g. 50ms)")
    p.add_argument("--nplc", type=quantity(""), metavar="N", help="integration time in power-line cycles")
    p.add_argument("--vth-stderr", type=quantity("V"), metavar="V",
                   help="adaptive sweep aimed at the fit: points where they inform Vth and KP, stopping once the "
                        "running fit's Vth standard error is this small (e.g. 2mV) or --points conducting points "
                        "are taken (docs/sweeps.md)")
    add_sim_options(p, *_SIM_NAMES, title="simulated bench (with --sim)")
    json_option(p, "each swept part")


def _plan_options(args: argparse.Namespace) -> dict[str, Any]:
    return {"points": args.points, "max_current_a": args.max_current, "min_current_a": args.min_current,
            "start_v": args.start_v, "mode": args.mode, "voltages": args.voltages, "use_list": args.list,
            "pulsed_duty": args.pulsed, "down_sweep": args.down_sweep, "current_from": args.current_from,
            "settle_s": args.settle, "nplc": args.nplc, "vth_stderr_v": args.vth_stderr}


def _outcome_json(outcome: Any, session_path: Any) -> dict[str, Any]:
    return {"part": outcome.label, "session": str(session_path), "complete": outcome.complete,
            "classification": outcome.classification, "reason": outcome.reason,
            "stop_reason": outcome.stop_reason, "points": len(outcome.points), "vgs_at_ref": outcome.vgs_at_ref,
            "reference_current": outcome.reference_current_a, "error": outcome.error}


def _prepare(args: argparse.Namespace):
    """The bench and plan the options name (bad input stops before anything is connected)."""
    from benchlab.services import characterize as svc

    sim = None
    if args.sim:
        s = sim_settings(args, _SIM_NAMES)
        sim = svc.SimOptions(fixture=s["fixture"], seed=s["seed"], time_scale=s["time_scale"],
                             faults=tuple(s["fault"]), log_path=s["log"])
    elif args.bench:
        refuse_given(args, ["--sim-" + n.replace("_", "-") for n in _SIM_NAMES],
                     "sets up the simulated bench: it goes with --sim, not with --bench")
    try:
        handle, plan = svc.prepare(args.bench, sim, _plan_options(args),
                                   say=lambda text: print(text, file=sys.stderr))
    except BenchlabError as exc:
        raise name_options(exc, _PLAN_OPTIONS) from None
    return svc, handle, plan


def _check_ambient(args: argparse.Namespace) -> None:
    # before anything is connected: the ambient is written into the session and every later fit of it uses it
    if args.ambient is not None:
        from benchlab.bounds import check_ambient_c

        check_ambient_c(args.ambient)


def run_sweep(args: argparse.Namespace) -> int:
    from benchlab.sweep.session import check_name

    check_name("part label", args.part)
    check_name("lot name", args.lot)
    _check_ambient(args)
    svc, handle, plan = _prepare(args)
    try:
        outcome, csv_path = svc.sweep_one(handle, plan, args.part, lot=args.lot,
                                          sessions_root=args.sessions or DEFAULT_SESSIONS_DIR,
                                          operator=operator_name(args), ambient_c=args.ambient,
                                          on_event=ProgressBar(out=sys.stderr if args.json else None),
                                          on_session=lambda p: print(f"session: {p}", file=sys.stderr))
    finally:
        handle.close()
    if args.json:
        print_json(_outcome_json(outcome, csv_path.parent))
    else:
        print(f"wrote {csv_path}")
    return 0 if outcome.complete else 1


def run_bag(args: argparse.Namespace) -> int:
    if args.resume is None and args.count is None:
        raise InputError("say how many parts: --count N (or --resume DIR to finish an earlier session)")
    if args.resume is not None:
        from pathlib import Path

        refuse_given(args, ("--lot", "--sessions", "--operator", "--ambient"),
                     "is kept from the session being resumed: leave it out with --resume")
        if not (Path(args.resume) / "session.json").is_file():
            raise InputError("not a session folder (no session.json)", path=args.resume)
    else:
        from benchlab.sweep.session import check_name

        check_name("lot name", args.lot or "bag")
        _check_ambient(args)
    svc, handle, plan = _prepare(args)
    progress = ProgressBar(out=sys.stderr if args.json else None)
    where: list = []

    def on_session(path) -> None:
        where.append(path)
        print(f"session: {path}", file=sys.stderr)

    try:
        with svc.sigterm_as_exception():
            result = svc.sweep_bag(handle, plan, sessions_root=args.sessions or DEFAULT_SESSIONS_DIR,
                                   lot=args.lot or "bag", count=args.count, operator=operator_name(args),
                                   ambient_c=args.ambient, resume=args.resume, on_event=progress,
                                   on_session=on_session)
    except BaseException:
        if where:  # Ctrl-C, SIGTERM, a lost instrument: say which part and how to go on
            print(_resume_hint(args, where[0], progress.stopped_label), file=sys.stderr, flush=True)
        raise
    finally:
        handle.close()
    if args.json:
        print_json(*(_outcome_json(o, result.session_path) for o in result.outcomes))
    if result.skipped:
        print(f"skipped (already measured): {', '.join(result.skipped)}", file=sys.stderr if args.json else None)
    if result.stopped_early:
        print(f"stopped: {result.stopped_early}", file=sys.stderr if args.json else None)
    if not result.outcomes:
        if args.resume is not None and result.stopped_early is None:
            print(f"session already complete: every planned part of {result.session_path} is measured",
                  file=sys.stderr if args.json else None)
        else:
            print(f"no part was swept; session in {result.session_path}", file=sys.stderr if args.json else None)
        return 0
    kinds: dict[str, int] = {}
    for outcome in result.outcomes:
        kinds[outcome.classification] = kinds.get(outcome.classification, 0) + 1
    print(f"{len(result.outcomes)} parts swept ({', '.join(f'{n} {k}' for k, n in sorted(kinds.items()))}); "
          f"session in {result.session_path}", file=sys.stderr if args.json else None)
    if not all(o.complete for o in result.outcomes):
        print(_resume_hint(args, result.session_path, result.outcomes[-1].label), file=sys.stderr)
        return 1
    return 0


def _resume_hint(args: argparse.Namespace, session_path, label: str | None) -> str:
    """Which part was interrupted and the exact command that finishes the bag."""
    import shlex

    command = ["benchlab", "bag", "--resume", str(session_path)]
    if args.sim:
        command.append("--sim")
        for name in ("fixture", "seed", "bag_size", "resistor"):  # what decides which parts the bag holds
            value = getattr(args, "sim_" + name, None)
            if value is not None:
                command += ["--sim-" + name.replace("_", "-"), str(value)]
    elif args.bench:
        command += ["--bench", args.bench]
    what = (f"the sweep of {label} was interrupted: its record is kept as 'interrupted' (not a dud; it is "
            f"swept again on resume)" if label else "the bag was interrupted between parts")
    return f"{what}; to finish the bag run: {shlex.join(command)}"


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser("sweep", help="sweep the part in the fixture (diode-connected) into a session",
                              description="Sweep one diode-connected part and record every point in a session.")
    p.add_argument("--part", required=True, metavar="LABEL", help="label of the part in the fixture, e.g. Q07")
    p.add_argument("--lot", default="single", help="lot name (session folder suffix; default single)")
    _add_bench_options(p)
    p.set_defaults(func=run_sweep)

    b = subparsers.add_parser("bag", help="sweep a whole bag of parts into one session",
                              description="Sweep parts one after another: on the simulator the next part of its "
                                          "bag is loaded automatically; on a real bench you are asked for each "
                                          "part (label, Enter to measure, q to stop).")
    b.add_argument("--lot", help="lot name (session folder suffix; default bag)")
    b.add_argument("--count", type=counting_number, metavar="N", help="number of parts to sweep")
    b.add_argument("--resume", metavar="DIR", help="continue an interrupted session: sweep the parts not yet done")
    _add_bench_options(b)
    b.set_defaults(func=run_bag)
