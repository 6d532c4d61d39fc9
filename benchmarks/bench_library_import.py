"""Bulk session import speed: the library's one-transaction import against a row-by-row committing writer.

Builds sessions of an invented bag (test data, see tests/library/session_builder.py), imports them with
``Library.import_sessions`` (one transaction, ``executemany`` for the points), then writes the same rows
with one commit per row (what a naive writer does) into a fresh library, and prints both rates and their
ratio. The naive writer is timed on a subset of the parts and scaled up; the output says so.

Run: ``cd /work/main && python benchmarks/bench_library_import.py [--sessions N] [--parts N] [--points N]``
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "library"))

from benchlab.library import Library, import_sessions  # noqa: E402
from benchlab.library.sessions import read_session  # noqa: E402
from benchlab.library.records import utc_now  # noqa: E402
from session_builder import demo_bag, write_session  # noqa: E402


def naive_import(db: Path, sessions: list[Path], max_parts: int) -> tuple[int, int, float]:
    """Insert parts, sweeps and points with a commit after every statement; returns (parts, points, seconds)."""
    with Library.open(db) as lib:
        conn = lib.connection
        parts = points = 0
        start = time.perf_counter()
        for path in sessions:
            session = read_session(path)
            lot_id = conn.execute("INSERT INTO lots (name, created) VALUES (?, ?)",
                                  (f"{session.lot}-{path.name}", utc_now())).lastrowid
            for sweep in session.sweeps:
                if parts >= max_parts:
                    return parts, points, time.perf_counter() - start
                part_id = conn.execute("INSERT INTO parts (lot_id, label, created) VALUES (?, ?, ?)",
                                       (lot_id, sweep.label, utc_now())).lastrowid
                sweep_id = conn.execute("INSERT INTO sweeps (part_id, session_id, imported) VALUES (?, ?, ?)",
                                        (part_id, session.id, utc_now())).lastrowid
                for p, v, i, s in zip(sweep.point, sweep.vgs, sweep.id, sweep.status):
                    conn.execute("INSERT INTO sweep_points (sweep_id, point, vgs, id, status) VALUES (?, ?, ?, ?, ?)",
                                 (sweep_id, p, v, i, s))  # autocommit: one transaction (and sync) per row
                    points += 1
                parts += 1
        return parts, points, time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sessions", type=int, default=5)
    parser.add_argument("--parts", type=int, default=40, help="parts per session")
    parser.add_argument("--points", type=int, default=100, help="points per sweep")
    parser.add_argument("--naive-parts", type=int, default=4, help="parts the naive writer is timed on")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        sessions = []
        for k in range(args.sessions):
            bag = demo_bag(args.parts, seed=k)
            for part in bag:
                part["count"] = args.points
            sessions.append(write_session(root, f"s{k}", f"bag-{k}", bag))
        with Library.open(root / "fast.db") as lib:
            start = time.perf_counter()
            summary = import_sessions(lib, sessions, refit=False)
            fast_s = time.perf_counter() - start
        total_parts = len(summary.sweeps)
        total_points = total_parts * args.points
        naive_parts, naive_points, naive_s = naive_import(root / "naive.db", sessions, args.naive_parts)
    fast_rate = total_points / fast_s
    naive_rate = naive_points / naive_s
    print(f"library import : {total_parts} sweeps, {total_points} points in {fast_s:.3f} s "
          f"({fast_rate:,.0f} points/s, includes reading the CSV files)")
    print(f"row-by-row     : {naive_parts} sweeps, {naive_points} points in {naive_s:.3f} s "
          f"({naive_rate:,.0f} points/s; timed on a subset of {naive_parts} sweeps, rate scaled to the whole)")
    print(f"ratio (library / row-by-row points per second): {fast_rate / naive_rate:.1f}x")


if __name__ == "__main__":
    main()
