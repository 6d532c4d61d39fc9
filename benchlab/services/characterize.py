"""Characterize parts on a bench: sweep one part or a whole bag into a session.

Used by ``benchlab sweep``, ``benchlab bag`` and ``benchlab demo`` (and later the terminal UI).
Order of work, so bad input never writes or powers anything: load the bench config, build and
validate the plan, connect (nothing is switched on), only then create the session folder and sweep.
"""

from __future__ import annotations

import contextlib
import signal
import threading
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Callable, Iterator, Protocol, runtime_checkable

from benchlab.choices import DEFAULT_SESSIONS_DIR
from benchlab.errors import InputError, SweepCancelled
from benchlab.sweep.engine import preflight, run
from benchlab.sweep.fit_targeting import leak_scale_v
from benchlab.sweep.plan import Limits, SweepPlan, validate_plan
from benchlab.sweep.records import SweepOutcome
from benchlab.sweep.session import SessionWriter, check_name
from benchlab.kinds import Fixture, PartClass, SweepMode
from benchlab.library.store import default_operator  # who is at the bench unless --operator says

CAUTION = ("Caution: a swept part and its heat sink can get hot enough to burn, and the fixture carries the supply's "
           "voltage; switch the output off before touching or changing a part. Follow local electrical codes and "
           "licensed practice for anything mains-powered.")
DEMO_STORY = ("Demo (an invented scenario): a workshop building an 8-channel constant-current LED driver for a "
              "plant-growing rack characterizes a bag of 40 N-channel power MOSFETs on the simulated bench.")


@dataclass(frozen=True)
class BagResult:
    """Where a bag's session went and how each part came out."""

    session_path: Path
    outcomes: tuple[SweepOutcome, ...]
    skipped: tuple[str, ...] = ()  # labels already complete in a resumed session
    stopped_early: str | None = None  # why the bag ended before its count, in words

    def to_dict(self) -> dict[str, Any]:
        return {"session_path": str(self.session_path), "outcomes": [o.to_dict() for o in self.outcomes],
                "skipped": list(self.skipped), "stopped_early": self.stopped_early}


@dataclass(frozen=True)
class SimOptions:
    """The in-process simulated bench (``--sim``)."""

    fixture: str = "resistor"
    seed: int = 1
    bag_size: int = 40
    time_scale: float = 0.0
    faults: tuple[str, ...] = ()
    log_path: str | None = None
    handling_s: float = 0.0  # the simulated operator's time to swap parts (0: parts change on command only)


@dataclass
class BenchHandle:
    """An open bench and, when simulated, the simulator serving it."""

    bench: Any
    config: Any
    simulator: Any = None

    def close(self) -> None:
        try:
            self.bench.safe_off()  # belt and braces: the engine already switched off
        except BaseException:  # noqa: BLE001 - closing must go on
            pass
        try:
            self.bench.close()
        finally:
            if self.simulator is not None:
                self.simulator.stop()


# --------------------------------------------------------------------------------------------- plans
def build_plan(config: Any, **options: Any) -> SweepPlan:
    """A validated plan for ``config`` (a ``BenchConfig``) with option overrides (``None`` = default).

    Raises
    ------
    InputError, SafetyError
        One clear message for the first bad value; nothing has been connected or powered.
    """
    values = {k: v for k, v in options.items() if v is not None}
    if config.fixture != "resistor" and "current_from" in values:
        raise InputError("current_from only applies to the resistor fixture (a source-measure unit measures the "
                         "current itself)")
    if "voltages" in values:
        values["voltages"] = tuple(float(v) for v in values["voltages"])
        values.setdefault("mode", "voltages")
    base = SweepPlan(fixture=config.fixture, limits=Limits.from_safety_limits(config.limits),
                     series_resistor_ohm=float(config.series_resistor_ohm) if config.fixture == Fixture.RESISTOR else 0.0,
                     series_resistor_tolerance=(float(config.series_resistor_tolerance or 0.0)
                                                if config.fixture == Fixture.RESISTOR else 0.0),
                     settle_s=float(config.settle_s), nplc=float(config.nplc))
    try:
        plan = replace(base, **values)
    except TypeError as exc:
        raise InputError(f"unknown sweep option: {exc}") from None
    _refuse_unused(plan, values)
    if "max_current_a" not in values:
        plan = replace(plan, max_current_a=min(plan.max_current_a, plan.limits.max_drain_a))
    plan = validate_plan(plan)
    if "nplc" in values:  # the bench file's own value was checked against the profile when it was read
        from benchlab.instruments.config import check_nplc
        check_nplc(config, plan.nplc)
    return plan


def _refuse_unused(plan: SweepPlan, given: dict[str, Any]) -> None:
    """An option given where the plan's mode never uses it is an error, not silence."""
    if given.get("use_list") and plan.mode != SweepMode.VOLTAGES:
        raise InputError(f"use_list uploads a voltage list: it goes with mode 'voltages', not '{plan.mode}'")
    if "vth_stderr_v" in given and plan.mode != SweepMode.TARGETS:
        raise InputError(f"vth_stderr_v aims the adaptive sweep at the fit: it goes with mode 'targets', "
                         f"not '{plan.mode}'")
    if "start_v" in given and plan.mode != SweepMode.TARGETS:
        raise InputError(f"start_v starts the adaptive search: it goes with mode 'targets', not '{plan.mode}'")


# --------------------------------------------------------------------------------------------- benches
def load_config(path: str) -> Any:
    """Read and validate a bench file (one :class:`ConfigError` on a problem)."""
    from benchlab.instruments.config import load_bench_config

    return load_bench_config(path)


def start_simulator(options: SimOptions) -> tuple[Any, Any]:
    """Start the simulated bench in this process on free loopback ports; return ``(simulator, config)``."""
    from benchlab.instruments.config import simulator_bench_config
    from benchlab.sim.bench import SimBench, SimConfig

    sim = SimBench(SimConfig(fixture=options.fixture, seed=options.seed, bag_size=options.bag_size,
                             time_scale=options.time_scale, faults=tuple(options.faults), log_path=options.log_path,
                             handling_s=options.handling_s))
    try:
        resources = sim.start(first_port=0)
        config = simulator_bench_config(resources, fixture=options.fixture,
                                        series_resistor_ohm=sim.series_resistor_actual_ohm)
    except BaseException:
        sim.stop()
        raise
    return sim, config


def connect(config: Any, simulator: Any = None, say: Callable[[str], None] | None = None) -> BenchHandle:
    """Open every instrument of ``config`` (identifies them; nothing is switched on).

    ``say`` hears "connecting to ..." at once (a host that does not answer can take seconds). An instrument on a
    loopback address that does not answer gets the hint to start the simulated bench.
    """
    from benchlab.errors import InstrumentError
    from benchlab.instruments.bench import open_bench

    resources = {role: spec.resource for role, spec in config.instruments.items()}
    if say is not None and simulator is None:
        say("connecting to " + ", ".join(f"{role} at {res}" for role, res in resources.items()) + " ...")
    try:
        bench = open_bench(config)
    except InstrumentError as exc:
        if simulator is not None:
            simulator.stop()
        loopback = [res for res in resources.values() if "::127." in res or "::localhost::" in res.lower()]
        if loopback and simulator is None:
            raise InstrumentError(f"{exc}; nothing answers on this computer at {loopback[0]}: start the simulated "
                                  "bench first (benchlab sim, in another terminal) or sweep with --sim") from None
        raise
    except BaseException:
        if simulator is not None:
            simulator.stop()
        raise
    return BenchHandle(bench=bench, config=config, simulator=simulator)


def is_simulated(handle: BenchHandle) -> bool:
    """The bench is the simulator: started here (``--sim``), or a ``benchlab sim`` a bench file points at (its
    instruments identify with the simulator's invented maker), whose bag benchlab advances itself."""
    if handle.simulator is not None:
        return True
    identities = getattr(handle.bench, "identities", {}) or {}
    return bool(identities) and all(str(idn).upper().startswith("BENCHLAB-SIM") for idn in identities.values())


def source_instrument(bench: Any) -> Any:
    """The instrument that sources the part (supply or SMU): the one simulator commands are sent to."""
    return bench.smu if bench.config.fixture == Fixture.SMU else bench.supply


def prepare(bench_path: str | None = None, sim: SimOptions | None = None, plan_options: dict[str, Any] | None = None,
            say: Callable[[str], None] | None = None) -> tuple[BenchHandle, SweepPlan]:
    """Check everything, then open the bench: config, plan, (simulator,) connection, in that order.

    Bad input stops before anything is started, connected or powered: the plan is validated against
    the bench's limits first (for the simulator, against its limits with any resistor value, since
    the simulated resistor's actual value is only known once it runs). Nothing is switched on.

    Parameters
    ----------
    bench_path : str, optional
        A bench file (TOML); exactly one of ``bench_path`` and ``sim``.
    sim : SimOptions, optional
        Start the simulated bench in this process.
    plan_options : dict, optional
        Sweep options for :func:`build_plan` (``None`` values mean the default).
    say : callable, optional
        Gets the safety caution before a real bench is connected.

    Returns
    -------
    (BenchHandle, SweepPlan)
        Close the handle on every way out (it switches every output off first).
    """
    options = dict(plan_options or {})
    if (bench_path is None) == (sim is None):
        raise InputError("say which bench: --bench CONFIG (a bench file) or --sim (the simulated bench)")
    if sim is not None:
        from benchlab.instruments.config import simulator_bench_config
        from benchlab.sim.bench import SimConfig
        from benchlab.sim.faults import coerce_faults

        coerce_faults(sim.faults)  # a bad fault spec is bad input: refuse before starting anything
        SimConfig(fixture=sim.fixture, seed=sim.seed, time_scale=sim.time_scale, handling_s=sim.handling_s)
        # the plan against the simulated bench's limits, with the nominal resistor, before anything starts
        nominal = simulator_bench_config({role: f"TCPIP0::127.0.0.1::{n}::SOCKET"
                                          for n, role in enumerate(("supply", "meter", "smu"), start=1)},
                                         fixture=sim.fixture)
        build_plan(nominal, **options)
        simulator, config = start_simulator(sim)
        try:
            plan = build_plan(config, **options)
        except BaseException:
            simulator.stop()
            raise
    else:
        config = load_config(bench_path)
        plan = build_plan(config, **options)
        simulator = None
        if say is not None:
            say(CAUTION)
    return connect(config, simulator, say), plan


def sweep_one(handle: BenchHandle, plan: SweepPlan, label: str, *, lot: str = "single",
              sessions_root: str | Path = DEFAULT_SESSIONS_DIR, operator: str = "", ambient_c: float | None = None,
              on_event: Callable[[Any], None] | None = None, cancel=None,
              on_session: Callable[[Path], None] | None = None, seat: bool = True) -> tuple[SweepOutcome, Path]:
    """Sweep the part labelled ``label`` into a new one-part session; returns ``(outcome, csv path)``.

    On the simulator (with ``seat``) the part of that label is seated first; the UI sweeps whatever
    part is in the fixture under its own label (``seat=False``). A bench that refuses its settings
    (preflight) writes no session. SIGTERM / SIGHUP stop the sweep with the output off.
    """
    check_name("part label", label)
    check_name("lot name", lot)
    with sigterm_as_exception():
        if is_simulated(handle) and seat:
            SimPartLoader(handle.bench).seek(label)
        preflight(plan, handle.bench)
        session = SessionWriter.create(sessions_root, lot, operator=operator, ambient_c=ambient_c, planned_count=1,
                                       **session_meta(handle))
        if on_session:
            on_session(session.path)
        try:
            outcome = sweep_part(handle, plan, session, label, on_event, cancel)
        finally:
            session.finish()
    return outcome, session.path / f"{label}.csv"


# --------------------------------------------------------------------------------------------- part loaders
@runtime_checkable
class PartLoader(Protocol):
    """Who puts parts in the fixture: the simulator's bag, an operator at a prompt, the terminal UI.

    ``next()`` returns the label of the part now in the fixture (the output is off while it is
    called), or ``None`` when there are no more parts; ``progress(text)`` tells whoever loads the
    parts what happened (a part skipped, a sweep done), in words.
    """

    def next(self) -> str | None: ...
    def progress(self, text: str) -> None: ...


class SimPartLoader:
    """Loads parts from the simulated bag (the output must be off); implements :class:`PartLoader`."""

    def __init__(self, bench: Any, say: Callable[[str], None] | None = None):
        from benchlab.instruments.sim_parts import SimPartHandler

        self.parts = SimPartHandler(source_instrument(bench))
        self.say = say
        self.started = False

    def label(self) -> str | None:
        """Label of the part in the fixture, or None when the bag is used up."""
        return self.parts.label()

    def next(self) -> str | None:
        """Put the next part in the fixture (the first call keeps the part already there)."""
        if self.started:
            self.parts.load_next()
        self.started = True
        return self.label()

    def progress(self, text: str) -> None:
        if self.say is not None:
            self.say(text)

    def seek(self, label: str, limit: int = 10000) -> None:
        """Advance to the part labelled ``label``; InputError when the bag has none."""
        for _ in range(limit):
            found = self.next()
            if found is None:
                break
            if found == label:
                self.started = True
                return
        raise InputError(f"no part labelled '{label}' in the simulated bag")


class PromptPartLoader:
    """Asks the operator for each part in turn: type its label, Enter to measure, ``q`` to stop.

    Implements :class:`PartLoader`.
    """

    def __init__(self, ask: Callable[[str], str] | None = None, say: Callable[[str], None] | None = None):
        # looked up at call time so a caller (or a test) replacing input/print is honoured
        self.ask = ask or (lambda prompt: input(prompt))
        self.say = say or (lambda text: print(text))
        self.used: list[str] = []  # distinct labels given so far

    def progress(self, text: str) -> None:
        self.say(text)

    def next(self) -> str | None:
        default = f"Q{len(self.used) + 1:02d}"
        while True:
            try:
                answer = self.ask(f"Part {len(self.used) + 1}: put it in the fixture (output is off), type its label "
                                  f"[{default}] and press Enter, or q to stop: ").strip()
            except EOFError:
                return None
            if answer.lower() in ("q", "quit"):
                return None
            label = answer or default
            try:
                check_name("part label", label)
            except InputError as exc:
                self.say(str(exc))
                continue
            if label not in self.used:
                self.used.append(label)
            return label


# --------------------------------------------------------------------------------------------- sweeping
@contextlib.contextmanager
def sigterm_as_exception() -> Iterator[None]:
    """Turn SIGTERM and SIGHUP into :class:`SweepCancelled` in the main thread while the block runs.

    SIGHUP is what a sweep gets when its terminal window is closed or its remote login drops; left at
    its default it would end the process at once with the output still on.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    stopping = [sig for sig in (signal.SIGTERM, getattr(signal, "SIGHUP", None)) if sig is not None]

    def handler(signum, frame):
        # a second signal must not interrupt the clean-up that switches the output off (SIGKILL still works)
        for sig in stopping:
            signal.signal(sig, signal.SIG_IGN)
        name = signal.Signals(signum).name
        why = " (the terminal closed)" if name == "SIGHUP" else ""
        raise SweepCancelled(f"stopped by {name}{why}; the sweep is marked incomplete")

    previous = {sig: signal.signal(sig, handler) for sig in stopping}
    try:
        yield
    finally:
        for sig, action in previous.items():
            signal.signal(sig, action)


def session_meta(handle: BenchHandle) -> dict[str, Any]:
    return {"bench": handle.config.to_dict(), "instruments": dict(handle.bench.identities)}


def sweep_part(handle: BenchHandle, plan: SweepPlan, session: SessionWriter, label: str,
               on_event: Callable[[Any], None] | None = None, cancel=None) -> SweepOutcome:
    """Sweep the part in the fixture into ``session`` under ``label``."""
    recorder = session.start_part(label, plan.to_dict())
    running_fit = None
    if plan.vth_stderr_v is not None:
        from benchlab.services.fitting import running_vth_stderr as running_fit
    return run(plan, handle.bench, on_event, cancel, label=label, recorder=recorder, vth_stderr=running_fit)


def bag_prior(plan: SweepPlan, outcome: SweepOutcome, prior: float | None) -> float | None:
    """The running knowledge a bag hands to its next part's fit-aimed sweep: the lowest leak-check scale (VGS at
    250 uA, else at the onset of conduction) of the good parts so far (``SweepPlan.prior_leak_scale_v``).

    Only fit-aimed sweeps on the resistor fixture use it, and only good parts count: a leaky or shorted part's
    VGS says nothing about where the next part's leak region lies.
    """
    if plan.vth_stderr_v is None or plan.fixture != Fixture.RESISTOR or outcome.classification != PartClass.GOOD:
        return prior
    scale = leak_scale_v(plan, outcome.points)
    if scale is None or not scale > 0:
        return prior
    return scale if prior is None else min(prior, scale)


def sweep_bag(handle: BenchHandle, plan: SweepPlan, *, sessions_root: str | Path = DEFAULT_SESSIONS_DIR,
              lot: str = "bag", count: int | None = None, operator: str = "", ambient_c: float | None = None,
              loader: Any = None, resume: str | Path | None = None, on_event: Callable[[Any], None] | None = None,
              cancel=None, on_session: Callable[[Path], None] | None = None) -> BagResult:
    """Sweep parts one after another into one session (a new one, or ``resume`` an earlier one).

    Parameters
    ----------
    handle : BenchHandle
        The open bench.
    plan : SweepPlan
        Validated plan used for every part.
    sessions_root, lot, operator, ambient_c
        Where and under which names the new session goes.
    count : int, optional
        Parts to measure (a resumed session keeps its own count unless given).
    loader : PartLoader, optional
        Who loads each part; default: the simulator's bag when simulated, else prompts on the terminal.
    resume : path, optional
        A session folder: parts already complete are skipped.
    on_event, cancel
        Passed to the engine. ``on_session`` gets the session folder as soon as it exists.

    Returns
    -------
    BagResult
    """
    if count is not None and (not isinstance(count, int) or count < 1):
        raise InputError(f"count must be a whole number >= 1, got {count!r}")
    preflight(plan, handle.bench)  # a bench that refuses its settings writes no session
    if resume is not None:
        session = SessionWriter.reopen(resume)
        count = count or session.meta.get("planned_count")
    else:
        check_name("lot name", lot)
        session = SessionWriter.create(sessions_root, lot, operator=operator, ambient_c=ambient_c,
                                       planned_count=count, **session_meta(handle))
    if on_session:
        on_session(session.path)
    if loader is None:
        loader = SimPartLoader(handle.bench) if is_simulated(handle) else PromptPartLoader()
    done = session.completed_labels()
    skipped, outcomes, stopped = [], [], None
    prior = plan.prior_leak_scale_v
    try:
        while count is None or len(done) < count:
            if cancel is not None and cancel.is_set():
                stopped = "cancelled"
                break
            label = loader.next()
            if label is None:
                stopped = "no more parts (bag used up or the operator stopped)"
                break
            if label in done:
                skipped.append(label)
                loader.progress(f"{label} is already measured in this session: skipped")  # now, not only at the end
                continue
            outcome = sweep_part(handle, replace(plan, prior_leak_scale_v=prior), session, label, on_event, cancel)
            outcomes.append(outcome)
            if not outcome.complete:
                stopped = outcome.stop_reason
                break
            prior = bag_prior(plan, outcome, prior)
            done.add(label)
            loader.progress(f"{len(done)} of {count} parts done" if count else f"{len(done)} parts done")
    finally:
        session.finish()
    return BagResult(session.path, tuple(outcomes), tuple(skipped), stopped)


def run_demo(sessions_root: str | Path = DEFAULT_SESSIONS_DIR, *, count: int = 12, seed: int = 1,
             on_event: Callable[[Any], None] | None = None, time_scale: float = 0.0,
             on_session: Callable[[Path], None] | None = None) -> BagResult:
    """The invented demo: sweep ``count`` parts of the 40-part simulated bag into a new session.

    The simulator runs in this process on free loopback ports; the first 12 parts of the seed-1
    bag include a leaky dud.
    """
    if not isinstance(count, int) or not 1 <= count <= 40:
        raise InputError(f"the demo sweeps 1 to 40 parts, got {count!r}")
    sim, config = start_simulator(SimOptions(seed=seed, bag_size=40, time_scale=time_scale))
    handle = connect(config, sim)
    try:
        plan = build_plan(config, points=20, max_current_a=0.1, down_sweep=False)
        with sigterm_as_exception():
            return sweep_bag(handle, plan, sessions_root=sessions_root, lot="demo-led-rack", count=count,
                             operator="demo (invented scenario)",
                             # the simulated parts sit at the simulator's ambient: record that, so fits
                             # evaluated at the session temperature compare with the simulator's truth
                             ambient_c=round(sim.config.ambient_k - 273.15, 2), on_event=on_event,
                             on_session=on_session)
    finally:
        handle.close()


__all__ = ["BagResult", "BenchHandle", "SimOptions", "PartLoader", "PromptPartLoader", "SimPartLoader", "build_plan",
           "connect", "prepare", "sweep_one",
           "load_config", "preflight", "run_demo", "sigterm_as_exception", "start_simulator", "sweep_bag", "sweep_part",
           "CAUTION", "DEMO_STORY", "default_operator"]
