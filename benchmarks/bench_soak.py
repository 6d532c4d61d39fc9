"""The soak and the kill-and-resume run at full size, printing the figures of docs/reliability.md.

Soak: a bag of 200 simulated parts with faults at 2 % of messages (slow, dropped, refused with -240, garbled
and unanswered replies), parts failing open and short, one in forty pulled out mid-sweep, resumed after every
stop. Kill: 100 SIGKILLs of the bag run at seeded random moments on a 200-part bag, resumed each time.
Loopback only; both stop by themselves. Run: ``python benchmarks/bench_soak.py [--parts 200] [--kills 100]`` (0 leaves one out).
These are the long versions of ``tests/reliability/test_soak.py`` and ``test_kill_resume.py`` (30 parts, 30 kills),
held to the same claims (``soak_problems``, ``kill_problems``): each claim broken is printed and the exit status
is 1.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout without installing

from tests.reliability.killhelp import kill_problems, run_kills  # noqa: E402
from tests.reliability.soakhelp import run_soak, soak_problems  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=200)
    parser.add_argument("--fault-rate", type=float, default=0.02)
    parser.add_argument("--kills", type=int, default=100)
    parser.add_argument("--kill-parts", type=int, default=200)
    parser.add_argument("--seed", type=int, default=2)
    args = parser.parse_args(argv)
    problems = []
    if args.parts:
        with tempfile.TemporaryDirectory() as folder:
            soak = run_soak(Path(folder) / "soak", args.parts, fault_rate=args.fault_rate, seed=args.seed,
                            timeout_ms=150)
        figures = soak.to_dict()
        figures.pop("stop_reasons")
        print("soak:", json.dumps(figures), flush=True)
        problems += [f"soak: {text}" for text in soak_problems(soak, args.parts)]
    if args.kills:
        with tempfile.TemporaryDirectory() as folder:
            kills = run_kills(Path(folder), args.kills, parts=args.kill_parts, seed=args.seed + 12)
        print("kill:", json.dumps(kills.to_dict()))
        problems += [f"kill: {text}" for text in kill_problems(kills, args.kill_parts, args.kills)]
    for text in problems:
        print("FAILED", text)
    return 1 if problems else 0


if __name__ == "__main__":
    raise SystemExit(main())
