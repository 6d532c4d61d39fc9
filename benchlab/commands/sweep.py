"""``benchlab sweep`` (one part) and ``benchlab bag`` (a whole bag into one session)."""

from __future__ import annotations

import argparse
import sys
from typing import Any, TextIO

from benchlab.errors import InputError
from benchlab.sweep.records import PointMeasured, SweepDone, SweepFault
from benchlab.kinds import Fixture, SweepMode


class ProgressBar:
    """Turns sweep events into a one-line progress bar (point count, elapsed time) and summary lines."""

    def __init__(self, stream: TextIO | None = None, out: TextIO | None = None, width: int = 24):
        self.stream = stream or sys.stderr
        self.out = out or sys.stdout
        self.width = width
        self._drawn = False
        # redraw in place only on a terminal; a log file gets just the summary lines
        self.live = bool(getattr(self.stream, "isatty", lambda: False)())

    def __call__(self, event: Any) -> None:
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


def _float_list(text: str) -> list[float]:
    try:
        return [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected comma-separated volts, got {text!r}") from None


def _operator(args, svc) -> str:
    return svc.default_operator() if args.operator is None else args.operator


def _add_bench_options(p: argparse.ArgumentParser) -> None:
    where = p.add_mutually_exclusive_group()
    where.add_argument("--bench", metavar="CONFIG", help="bench file (TOML, see docs/bench-config.md)")
    where.add_argument("--sim", action="store_true", help="use the built-in simulated bench (started in process)")
    p.add_argument("--sessions", metavar="DIR", default="sessions", help="where sessions go (default ./sessions)")
    p.add_argument("--operator", help="who is at the bench, stored in the session and shown in reports "
                                      "(default: the login name)")
    p.add_argument("--ambient", type=float, metavar="C", help="ambient temperature in degC (stored in the session)")
    p.add_argument("--points", type=int, help="target points of the sweep (default 24)")
    p.add_argument("--max-current", type=float, metavar="A", help="top target current (default 0.1 A)")
    p.add_argument("--min-current", type=float, metavar="A", help="first target current (default 10 uA)")
    p.add_argument("--start-v", type=float, metavar="V", help="first source voltage of an adaptive sweep")
    p.add_argument("--mode", choices=tuple(SweepMode),
                   help="targets: log-spaced currents, adaptive (default); voltages: --voltages list; "
                        "currents: SMU forcing log-spaced currents")
    p.add_argument("--voltages", type=_float_list, metavar="V1,V2,...", help="explicit source voltages")
    p.add_argument("--list", dest="use_list", action="store_true", default=None,
                   help="SMU: upload --voltages as lists (fewer round trips)")
    p.add_argument("--pulsed", type=float, metavar="DUTY", help="pulsed sweep: output on only to measure, duty 0-1")
    p.add_argument("--down-sweep", action="store_true", default=None, help="sweep back down after the up-sweep")
    p.add_argument("--current-from", choices=("meter", "resistor"),
                   help="resistor fixture: drain current read by the meter (default) or from the resistor drop")
    p.add_argument("--settle", type=float, metavar="S", dest="settle_s", help="wait after each setpoint (s)")
    p.add_argument("--nplc", type=float, help="integration time in power-line cycles")
    sim = p.add_argument_group("simulated bench (--sim)")
    sim.add_argument("--sim-fixture", choices=tuple(Fixture), default=Fixture.RESISTOR,
                     help="resistor: supply, series resistor and meter; smu: source-measure unit across the part "
                          "(default resistor)")
    sim.add_argument("--sim-seed", type=int, default=1,
                     help="seed of the simulated bag, resistor error and noise (default 1)")
    sim.add_argument("--sim-time-scale", type=float, default=0.0,
                     help="real seconds per instrument second (1 = real time, 0 = no waits; default 0)")
    sim.add_argument("--sim-fault", action="append", default=[], metavar="SPEC",
                     help="inject a simulator fault, e.g. mute@meter=12 (see benchlab sim --help)")
    sim.add_argument("--sim-log", metavar="FILE", help="write the simulator's log (JSON lines) to FILE")


def _plan_options(args: argparse.Namespace) -> dict[str, Any]:
    return {"points": args.points, "max_current_a": args.max_current, "min_current_a": args.min_current,
            "start_v": args.start_v, "mode": args.mode, "voltages": args.voltages, "use_list": args.use_list,
            "pulsed_duty": args.pulsed, "down_sweep": args.down_sweep, "current_from": args.current_from,
            "settle_s": args.settle_s, "nplc": args.nplc}


def _prepare(args: argparse.Namespace):
    """The bench and plan the options name (bad input stops before anything is connected)."""
    from benchlab.services import characterize as svc

    sim = None
    if args.sim:
        sim = svc.SimOptions(fixture=args.sim_fixture, seed=args.sim_seed, time_scale=args.sim_time_scale,
                             faults=tuple(args.sim_fault), log_path=args.sim_log)
    handle, plan = svc.prepare(args.bench, sim, _plan_options(args), say=lambda text: print(text, file=sys.stderr))
    return svc, handle, plan


def run_sweep(args: argparse.Namespace) -> int:
    from benchlab.sweep.session import check_name

    check_name("part label", args.part)
    check_name("lot name", args.lot)
    svc, handle, plan = _prepare(args)
    try:
        outcome, csv_path = svc.sweep_one(handle, plan, args.part, lot=args.lot, sessions_root=args.sessions,
                                          operator=_operator(args, svc), ambient_c=args.ambient, on_event=ProgressBar(),
                                          on_session=lambda p: print(f"session: {p}", file=sys.stderr))
    finally:
        handle.close()
    print(f"wrote {csv_path}")
    return 0 if outcome.complete else 1


def run_bag(args: argparse.Namespace) -> int:
    if args.resume is None and args.count is None:
        raise InputError("say how many parts: --count N (or --resume DIR to finish an earlier session)")
    if args.count is not None and args.count < 1:
        raise InputError(f"--count must be 1 or more, got {args.count}")
    if args.resume is not None:
        from pathlib import Path

        if not (Path(args.resume) / "session.json").is_file():
            raise InputError("not a session folder (no session.json)", path=args.resume)
    else:
        from benchlab.sweep.session import check_name

        check_name("lot name", args.lot)
    svc, handle, plan = _prepare(args)
    progress = ProgressBar()
    try:
        with svc.sigterm_as_exception():
            result = svc.sweep_bag(handle, plan, sessions_root=args.sessions, lot=args.lot, count=args.count,
                                   operator=_operator(args, svc), ambient_c=args.ambient, resume=args.resume,
                                   on_event=progress,
                                   on_session=lambda p: print(f"session: {p}", file=sys.stderr))
    finally:
        handle.close()
    if result.skipped:
        print(f"skipped (already measured): {', '.join(result.skipped)}")
    if result.stopped_early:
        print(f"stopped: {result.stopped_early}")
    kinds: dict[str, int] = {}
    for outcome in result.outcomes:
        kinds[outcome.classification] = kinds.get(outcome.classification, 0) + 1
    print(f"{len(result.outcomes)} parts swept ({', '.join(f'{n} {k}' for k, n in sorted(kinds.items()))}); "
          f"session in {result.session_path}")
    return 0 if all(o.complete for o in result.outcomes) else 1


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser("sweep", help="sweep the part in the fixture (diode-connected) into a session",
                              description="Sweep one diode-connected part and record every point in a session.")
    p.add_argument("--part", required=True, metavar="LABEL", help="label of the part in the fixture, e.g. Q07")
    p.add_argument("--lot", default="single", help="lot name (session folder suffix)")
    _add_bench_options(p)
    p.set_defaults(func=run_sweep)

    b = subparsers.add_parser("bag", help="sweep a whole bag of parts into one session",
                              description="Sweep parts one after another: on the simulator the next part of its "
                                          "bag is loaded automatically; on a real bench you are asked for each "
                                          "part (label, Enter to measure, q to stop).")
    b.add_argument("--lot", default="bag", help="lot name (session folder suffix)")
    b.add_argument("--count", type=int, metavar="N", help="number of parts")
    b.add_argument("--resume", metavar="DIR", help="continue an interrupted session: sweep the parts not yet done")
    _add_bench_options(b)
    b.set_defaults(func=run_bag)
