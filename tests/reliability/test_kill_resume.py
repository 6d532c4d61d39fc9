"""SIGKILL the bag run at seeded random moments (30 times in CI), resume it each time: no part duplicated or
missing, no complete record rewritten, every record whole, and the library import after it passes SQLite's
``PRAGMA integrity_check`` and holds each part once. Figures: docs/reliability.md."""

from __future__ import annotations

import pytest

from tests.reliability.killhelp import run_kills


def _check(report, parts: int, kills: int) -> None:
    assert report.kills == kills and report.kills_mid_part >= kills // 2  # most kills strike mid-sweep
    assert report.parts_swept_again >= 3  # the kills fell on several different parts
    assert report.completed == parts and report.missing == 0 and report.duplicated == 0
    assert report.records_inconsistent == 0 and report.rows_torn == 0
    assert report.integrity_check == "ok"  # SQLite's own check of the library file
    assert report.library_parts == parts and report.library_parts_twice == 0


def test_thirty_kills_and_resumes(tmp_path):
    report = run_kills(tmp_path, 30, parts=60, seed=13)
    _check(report, 60, 30)


@pytest.mark.slow
@pytest.mark.timeout(1800)
def test_hundred_kills_and_resumes(tmp_path):
    report = run_kills(tmp_path, 100, parts=200, seed=14)
    _check(report, 200, 100)
