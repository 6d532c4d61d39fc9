"""The soak: a bag of parts on the simulated bench with faults at a few percent of messages, resumed after
every stop the way an operator would (``bag --resume``), and the figures that prove nothing was lost.

Used by ``tests/reliability/test_soak.py`` (a short bag, in CI) and by ``benchmarks/bench_soak.py`` (the
200-part bag); both hold the run to the same claims (:func:`soak_problems`). Loopback only; everything stops by itself (bounded attempts per part).
"""

from __future__ import annotations

import csv
import random
from dataclasses import asdict, dataclass, replace
from pathlib import Path

from benchlab.errors import BenchlabError
from benchlab.instruments.config import simulator_bench_config
from benchlab.services.characterize import build_plan, connect, sweep_bag
from benchlab.sim.bench import SimBench, SimConfig
from benchlab.sweep.records import PointMeasured
from benchlab.sweep.session import read_session

MAX_TRIES_PER_PART = 6


@dataclass(frozen=True)
class SoakReport:
    """What a soak run did and what it proved (plain data)."""

    parts: int
    fault_rate: float
    messages: int  # messages the simulated instruments received
    faults_fired: int  # transport faults (flaky) + parts failing open/short + parts pulled
    attempts: int  # bag runs (the first one and every resume)
    stops: int  # bag runs that ended with an error or an interrupted part
    completed: int  # parts with a complete record
    retried: int  # parts swept more than once (an interrupted record kept beside the complete one)
    incomplete: int  # parts given up after MAX_TRIES_PER_PART tries
    classes: dict
    readings_served: int  # readings the simulator took and answered (meter, supply readbacks, SMU)
    points_acknowledged: int  # points the engine reported stored (PointMeasured events)
    points_on_disk: int  # CSV rows of every record in the session, interrupted ones included
    points_lost: int  # acknowledged - on disk (must be 0)
    records_inconsistent: int  # records whose CSV rows differ from their sidecar's point count (must be 0)
    outputs_left_on: int  # bag runs after which the simulator's log shows a source output on (must be 0)
    wall_s: float
    stop_reasons: tuple = ()

    def to_dict(self) -> dict:
        return asdict(self)


def _fault_specs(parts: int, fault_rate: float, seed: int) -> tuple[str, ...]:
    rng = random.Random(seed)
    specs = [f"flaky={fault_rate}"] if fault_rate else []
    # a few parts fail open or short part-way (counted in bench readings: about 90 per part) and one in
    # forty is pulled out of the fixture mid-sweep by the simulated operator
    for kind in ("open", "short"):
        for _ in range(max(1, parts // 40)):
            specs.append(f"{kind}={rng.randrange(60, 90 * parts)}")
    for index in rng.sample(range(2, parts + 1), k=max(1, parts // 40)):
        specs.append(f"pull={index}")
    return tuple(specs)


def run_soak(root: Path, parts: int = 30, *, fault_rate: float = 0.01, seed: int = 1,
             timeout_ms: int = 250) -> SoakReport:
    """Sweep a bag of ``parts`` simulated parts under faults, resuming after every stop, and measure."""
    import time

    started = time.monotonic()
    config = SimConfig(bag_size=parts, seed=seed, time_scale=0.0, faults=_fault_specs(parts, fault_rate, seed))
    acknowledged = 0

    def on_event(event) -> None:
        nonlocal acknowledged
        if isinstance(event, PointMeasured):
            acknowledged += 1

    attempts = stops = left_on = 0
    reasons: list[str] = []
    tries: dict[str, int] = {}
    session_path: Path | None = None
    with SimBench(config) as sim:
        resources = sim.start(first_port=0)
        bench = simulator_bench_config(resources, series_resistor_ohm=sim.series_resistor_actual_ohm)
        specs = {role: replace(spec, timeout_ms=timeout_ms) for role, spec in bench.instruments.items()}
        bench = replace(bench, instruments=specs)
        handle = connect(bench, sim)
        try:
            plan = build_plan(bench, points=12, max_current_a=0.05)
            while attempts < parts * MAX_TRIES_PER_PART:
                attempts += 1
                if sim.core.part_index == -1 and sim.core._pending_index is not None and not sim.core.outputs_on():
                    sim.core.next_part()  # a part was pulled out mid-sweep: the operator seats the next one
                label = sim.current_part.label if sim.current_part is not None else None
                if label is not None:
                    tries[label] = tries.get(label, 0) + 1
                    if tries[label] > MAX_TRIES_PER_PART:  # give this part up: the operator sets it aside
                        sim.core.next_part() if not sim.core.outputs_on() else None
                        continue

                def keep(path: Path) -> None:
                    nonlocal session_path
                    session_path = path

                try:
                    result = sweep_bag(handle, plan, sessions_root=root, lot="soak", count=parts, resume=session_path,
                                       on_event=on_event, on_session=keep)
                    stopped = result.stopped_early
                except BenchlabError as exc:
                    stopped = f"error: {exc}"
                if sim.log.last_output_state("supply"):
                    left_on += 1
                if stopped is None or stopped.startswith("no more parts"):
                    break
                stops += 1
                reasons.append(stopped)
        finally:
            handle.close()
        messages = sum(server.faults.messages_seen for server in sim._servers.values())
        flaky = sum(sum(server.faults.flaky_fired.values()) for server in sim._servers.values())
        dut = len([e for e in sim.log.entries(kind="fault") if "failed" in e.text or "pulled" in e.text])
        dut += len([e for e in sim.log.entries() if "pulled" in e.text and e.kind != "fault"])
        served = sim.core.readings_taken
    assert session_path is not None
    session = read_session(session_path)
    completed = set(session.meta.get("completed", []) or [])
    records_inconsistent = on_disk = 0
    labels_with_interrupts: set[str] = set()
    classes: dict[str, int] = {}
    complete_labels: set[str] = set()
    for sidecar in sorted(session_path.glob("*.json")):
        if sidecar.name == "session.json":
            continue
        import json

        meta = json.loads(sidecar.read_text(encoding="utf-8"))
        with open(sidecar.with_suffix(".csv"), encoding="utf-8", newline="") as handle_csv:
            rows = sum(1 for _ in csv.reader(handle_csv)) - 1
        on_disk += rows
        if rows != meta.get("points", rows):
            records_inconsistent += 1
        label = sidecar.name.split(".")[0]
        if ".interrupted-" in sidecar.name:
            labels_with_interrupts.add(label)
        elif meta.get("complete"):
            complete_labels.add(label)
            classes[meta.get("classification", "?")] = classes.get(meta.get("classification", "?"), 0) + 1
        elif not meta.get("complete"):
            labels_with_interrupts.add(label)
    del completed
    return SoakReport(
        parts=parts, fault_rate=fault_rate, messages=messages, faults_fired=flaky + dut, attempts=attempts,
        stops=stops, completed=len(complete_labels), retried=len(labels_with_interrupts & complete_labels),
        incomplete=parts - len(complete_labels), classes=classes, readings_served=served,
        points_acknowledged=acknowledged, points_on_disk=on_disk, points_lost=acknowledged - on_disk,
        records_inconsistent=records_inconsistent, outputs_left_on=left_on,
        wall_s=round(time.monotonic() - started, 1), stop_reasons=tuple(reasons))


def soak_problems(report: SoakReport, parts: int) -> list[str]:
    """The claims a soak of ``parts`` parts must meet; each one broken, in words (empty: all met)."""
    checks = [
        (report.faults_fired > 0.01 * report.messages, "the faults did not strike at about the rate asked"),
        (report.points_lost == 0, f"{report.points_lost} acknowledged points are not on disk"),
        (report.points_acknowledged == report.points_on_disk > 0,
         f"points acknowledged {report.points_acknowledged} != on disk {report.points_on_disk}"),
        (report.records_inconsistent == 0, f"{report.records_inconsistent} records differ from their sidecar"),
        # from the simulator's own log after every stop
        (report.outputs_left_on == 0, f"an output was left on after {report.outputs_left_on} bag runs"),
        (report.completed + report.incomplete == parts, "parts neither completed nor given up"),
        (report.completed >= 0.9 * parts, f"only {report.completed} of {parts} parts completed"),
        (sum(report.classes.values()) == report.completed, "classes do not add up to the completed parts"),
        # the parts made to fail open or short were found so
        (report.classes.get("open", 0) + report.classes.get("shorted", 0) >= 2, "the failed parts were not found"),
    ]
    return [text for ok, text in checks if not ok]
