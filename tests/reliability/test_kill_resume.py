"""SIGKILL the bag run at seeded random moments (30 times), resume it each time: no part duplicated or missing,
no complete record rewritten, every record whole, and the library import after it passes SQLite's
``PRAGMA integrity_check`` and holds each part once. The 100-kill run on 200 parts is
``benchmarks/bench_soak.py`` (the same claims). Figures: docs/reliability.md."""

from __future__ import annotations

from tests.reliability.killhelp import kill_problems, run_kills


def test_thirty_kills_and_resumes(tmp_path):
    report = run_kills(tmp_path, 30, parts=60, seed=13)
    problems = kill_problems(report, 60, 30)
    assert not problems, (problems, report)
