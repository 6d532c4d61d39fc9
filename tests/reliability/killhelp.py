"""Kill and resume: a bag run in a forked child (same code path as ``benchlab bag --sim``, without the
interpreter start-up) is killed with SIGKILL at seeded random moments and resumed, over and over; then the
session is checked (no part duplicated or missing, every record whole) and imported into a library."""

from __future__ import annotations

import hashlib
import json
import multiprocessing
import os
import random
import signal
import sqlite3
import time
from dataclasses import asdict, dataclass
from pathlib import Path

# imported here, before the fork, so each child starts sweeping at once
from benchlab.instruments.config import simulator_bench_config  # noqa: E402
from benchlab.services.characterize import build_plan, connect, sweep_bag  # noqa: E402
from benchlab.services.library import import_sessions  # noqa: E402
from benchlab.sim.bench import SimBench, SimConfig  # noqa: E402

PLAN = dict(points=8, max_current_a=0.01)


def _bag_child(root: str, session: str | None, parts: int, seed: int) -> None:
    with SimBench(SimConfig(bag_size=parts, seed=seed, time_scale=0.0)) as sim:
        config = simulator_bench_config(sim.start(first_port=0), series_resistor_ohm=sim.series_resistor_actual_ohm)
        handle = connect(config, sim)
        try:
            result = sweep_bag(handle, build_plan(config, **PLAN), sessions_root=root, lot="kill", count=parts,
                               resume=session)
        finally:
            handle.close()
    if result.stopped_early is not None:  # e.g. a reply late on a loaded machine stopped a part: not done yet,
        raise SystemExit(3)  # the harness resumes it (exit 0 means the whole bag is complete)


@dataclass(frozen=True)
class KillReport:
    parts: int
    kills: int
    kills_mid_part: int  # kills after which an incomplete record was on disk (struck in the middle of a sweep)
    parts_swept_again: int  # parts whose interrupted record was kept aside and swept again
    runs: int
    completed: int
    duplicated: int  # labels listed twice in session.json, or a complete record swept again
    missing: int
    records_inconsistent: int  # complete: CSV rows differ from the sidecar's count; killed: fewer rows than it says
    rows_torn: int  # CSV files ending in a partly written row
    integrity_check: str
    library_parts: int
    library_parts_twice: int
    wall_s: float

    def to_dict(self) -> dict:
        return asdict(self)


def _complete_records(session: Path) -> dict[str, str]:
    """Label -> SHA-256 of the CSV of every complete record."""
    out = {}
    for sidecar in session.glob("*.json"):
        if sidecar.name == "session.json" or ".interrupted-" in sidecar.name:
            continue
        try:
            meta = json.loads(sidecar.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if meta.get("complete"):
            out[sidecar.stem] = hashlib.sha256(sidecar.with_suffix(".csv").read_bytes()).hexdigest()
    return out


def _has_open_record(sessions: Path) -> bool:
    for sidecar in sessions.glob("*/*.json"):
        if sidecar.name == "session.json" or ".interrupted-" in sidecar.name:
            continue
        try:
            if not json.loads(sidecar.read_text(encoding="utf-8")).get("complete"):
                return True
        except (OSError, ValueError):
            return True
    return False


def _csv_rows(sessions: Path) -> int:
    rows = 0
    for path in sessions.glob("*/*.csv") if sessions.exists() else ():
        try:
            rows += path.read_bytes().count(b"\n")
        except OSError:
            pass
    return rows


def _wait_for_rows(sessions: Path, child, rows: int, stall_s: float = 60.0) -> None:
    """Wait until the child has written ``rows`` more CSV lines (or ended, or wrote nothing for ``stall_s``).

    A condition, not a time: on a loaded machine the child is slower and the kill comes later, at the same
    point of the bag."""
    target = _csv_rows(sessions) + rows
    seen, last_change = -1, time.monotonic()
    while rows and child.is_alive():
        now = _csv_rows(sessions)
        if now >= target:
            return
        if now != seen:
            seen, last_change = now, time.monotonic()
        elif time.monotonic() - last_change > stall_s:
            return
        time.sleep(0.002)


def _join(child, sessions: Path, stall_s: float = 120.0) -> None:
    """Wait for the child to end while it keeps writing rows; fail only when it wrote nothing for ``stall_s``
    (a bag run on a loaded machine may take long; one that is stuck never ends)."""
    seen, last_change = -1, time.monotonic()
    while True:
        child.join(1.0)
        if not child.is_alive():
            return
        now = _csv_rows(sessions)
        if now != seen:
            seen, last_change = now, time.monotonic()
        assert time.monotonic() - last_change < stall_s, f"a bag run wrote nothing for {stall_s:.0f} s"


def _session_folder(sessions: Path) -> Path | None:
    """The bag's session folder, once its ``session.json`` exists (a kill during start-up may leave an empty
    folder behind: the next run starts a new session, as an operator would)."""
    folders = sorted(p for p in sessions.iterdir() if (p / "session.json").is_file()) if sessions.exists() else []
    return folders[0] if folders else None


def run_kills(root: Path, kills: int, *, parts: int = 40, seed: int = 13, max_rows: int = 100) -> KillReport:
    """Kill the bag ``kills`` times at seeded random delays, resume until it completes, and check it all."""
    started = time.monotonic()
    rng = random.Random(seed)
    context = multiprocessing.get_context("fork")
    sessions = root / "sessions"
    session: Path | None = None
    done_kills = runs = duplicated = mid_part = 0
    seen: dict[str, str] = {}
    while True:
        runs += 1
        child = context.Process(target=_bag_child, args=(str(sessions), str(session) if session else None,
                                                         parts, seed))
        child.start()
        if done_kills < kills:
            # after a random number of rows written in this run (so a kill lands at a random point of a sweep
            # whatever the machine's speed), or now and then during start-up
            _wait_for_rows(sessions, child, 0 if rng.random() < 0.1 else rng.randint(1, max_rows))
            if child.is_alive():
                os.kill(child.pid, signal.SIGKILL)
                done_kills += 1
                child.join()  # SIGKILL cannot be caught: it ends
                mid_part += _has_open_record(sessions)
        _join(child, sessions)
        if session is None:
            session = _session_folder(sessions)
        if session is None:
            continue
        now = _complete_records(session)
        # a part completed before must keep its very record: never swept again, never rewritten
        duplicated += sum(1 for label, digest in seen.items() if now.get(label) != digest)
        seen.update(now)
        if child.exitcode == 0:  # the bag is done (after the last kill, or before all kills were made)
            break
        assert runs < kills * 3 + 20, "the bag does not finish"
    meta = json.loads((session / "session.json").read_text(encoding="utf-8"))
    listed = meta["parts"]
    duplicated += len(listed) - len(set(listed))
    expected = {f"Q{n:02d}" for n in range(1, parts + 1)}
    inconsistent = torn = 0
    for sidecar in session.glob("*.json"):
        if sidecar.name == "session.json":
            continue
        record = json.loads(sidecar.read_text(encoding="utf-8"))
        text = sidecar.with_suffix(".csv").read_text(encoding="utf-8")
        rows = text.count("\n") - 1
        torn += bool(text) and not text.endswith("\n")  # a row cut by the kill
        if record.get("complete"):
            inconsistent += rows != record["points"]
        else:  # killed in flight: the sidecar is not rewritten per point, the CSV is (fsync per point)
            inconsistent += rows < record["points"]
    interrupted = {p.name.split(".")[0] for p in session.glob("*.interrupted-*.json")}

    library = root / "library.sqlite"
    import_sessions(library, [str(session)])
    with sqlite3.connect(library) as db:
        check = db.execute("PRAGMA integrity_check").fetchone()[0]
        labels = [row[0] for row in db.execute("SELECT label FROM parts")]
    return KillReport(parts=parts, kills=done_kills, kills_mid_part=mid_part, runs=runs,
                      parts_swept_again=len(interrupted), completed=len(set(seen) & expected), duplicated=duplicated,
                      missing=len(expected - set(seen)), records_inconsistent=inconsistent, rows_torn=torn,
                      integrity_check=check,
                      library_parts=len(set(labels)), library_parts_twice=len(labels) - len(set(labels)),
                      wall_s=round(time.monotonic() - started, 1))


def kill_problems(report: KillReport, parts: int, kills: int) -> list[str]:
    """The claims a kill-and-resume run must meet; each one broken, in words (empty: all met)."""
    checks = [
        (report.kills == kills, f"{report.kills} kills made of {kills}"),
        (report.kills_mid_part >= kills // 2, f"only {report.kills_mid_part} kills struck mid-sweep"),
        (report.parts_swept_again >= 3, "the kills did not fall on several different parts"),
        (report.completed == parts and report.missing == 0,
         f"{report.completed} of {parts} parts completed, {report.missing} missing"),
        (report.duplicated == 0, f"{report.duplicated} parts duplicated or complete records rewritten"),
        (report.records_inconsistent == 0 and report.rows_torn == 0,
         f"{report.records_inconsistent} records inconsistent, {report.rows_torn} rows torn"),
        (report.integrity_check == "ok", f"library integrity_check: {report.integrity_check}"),  # SQLite's own
        (report.library_parts == parts and report.library_parts_twice == 0,
         f"library holds {report.library_parts} parts, {report.library_parts_twice} twice"),
    ]
    return [text for ok, text in checks if not ok]
