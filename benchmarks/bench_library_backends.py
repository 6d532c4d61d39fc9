"""SQLite against PostgreSQL, side by side in one run: importing a 1,000-part session, and ``design match`` on a
library of 10,000 parts. Prints each time and the ratio (PostgreSQL / SQLite).

The bag is invented test data (tests/library/session_builder.py: theta-law N-channel parts, 40 points a sweep).
Both backends run the same library code; the PostgreSQL library lives in a new schema of the database named by
``--pg`` (default ``$BENCHLAB_TEST_PG_URL``), dropped at the end. The SQLite library is a file in a temporary
folder. Times are the best of ``--repeat`` runs for ``design match`` (one import each: an import is not
repeatable on the same library).

Run: ``BENCHLAB_TEST_PG_URL=postgresql://... python benchmarks/bench_library_backends.py [--parts 1000]
[--stock 10000]``
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
import uuid
from pathlib import Path
from urllib.parse import parse_qsl, urlencode, urlsplit, urlunsplit

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests" / "library"))

from benchlab.library import Library, import_library, import_sessions  # noqa: E402
from benchlab.services.design import match_parts  # noqa: E402
from session_builder import demo_bag, write_session  # noqa: E402


def stock_export(count: int) -> dict:
    """A library export (benchlab-library/1) of ``count`` in-stock parts with one fit each (invented)."""
    parts = []
    for k, part in enumerate(demo_bag(count, seed=11)):
        parts.append({"lot": "stock", "label": f"S{k + 1:05d}", "fits": [
            {"source": "hand", "model": "theta", "params": part["params"].to_dict()}]})
    return {"format": "benchlab-library/1", "lots": [{"name": "stock"}], "parts": parts}


def with_schema(url: str, schema: str) -> str:
    parts = urlsplit(url)
    query = [(k, v) for k, v in parse_qsl(parts.query) if k != "options"] + [("options", f"-csearch_path={schema}")]
    return urlunsplit((parts.scheme, parts.netloc, parts.path, urlencode(query), parts.fragment))


def run(target: str, session: Path, stock: dict, repeat: int) -> dict[str, float]:
    times = {}
    with Library.open(target) as lib:
        start = time.perf_counter()
        summary = import_sessions(lib, [session], refit=False)
        times["import"] = time.perf_counter() - start
        assert summary.fitted == len(summary.sweeps), "every part of the invented session has a stored fit"
        import_library(lib, stock)
        # the imported session's parts stay: match only the 10,000 of lot 'stock'
    best = float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        result = match_parts(target, 0.02, 2, lot="stock")
        best = min(best, time.perf_counter() - start)
    times["match"] = best
    times["pairs"] = len(result.sets)
    return times


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=1000, help="parts in the imported session")
    parser.add_argument("--stock", type=int, default=10000, help="in-stock parts design match searches")
    parser.add_argument("--repeat", type=int, default=3, help="design match runs per backend (best is shown)")
    parser.add_argument("--pg", default=os.environ.get("BENCHLAB_TEST_PG_URL"), help="PostgreSQL database URL")
    args = parser.parse_args()
    if not args.pg:
        sys.exit("name a PostgreSQL database: --pg URL or BENCHLAB_TEST_PG_URL")
    import psycopg
    from psycopg import sql

    schema = f"bench_{uuid.uuid4().hex[:12]}"
    with tempfile.TemporaryDirectory() as tmp, psycopg.connect(args.pg, autocommit=True) as admin:
        session = write_session(Path(tmp), "bench-session", "bench-bag", demo_bag(args.parts, seed=3))
        stock = stock_export(args.stock)
        admin.execute(sql.SQL("CREATE SCHEMA {}").format(sql.Identifier(schema)))
        try:
            lite = run(str(Path(tmp) / "bench.db"), session, stock, args.repeat)
            pg = run(with_schema(args.pg, schema), session, stock, args.repeat)
        finally:
            admin.execute(sql.SQL("DROP SCHEMA {} CASCADE").format(sql.Identifier(schema)))
    points = args.parts * 40
    print(f"{'':34} {'SQLite':>10} {'PostgreSQL':>11} {'ratio PG/SQLite':>16}")
    print(f"{f'import {args.parts} parts ({points} points)':34} {lite['import']:9.2f}s {pg['import']:10.2f}s "
          f"{pg['import'] / lite['import']:15.2f}x")
    print(f"{f'design match, {args.stock} parts':34} {lite['match']:9.2f}s {pg['match']:10.2f}s "
          f"{pg['match'] / lite['match']:15.2f}x")
    print(f"(match found {lite['pairs']} pairs on SQLite, {pg['pairs']} on PostgreSQL; the same stock, the same code)")


if __name__ == "__main__":
    main()
