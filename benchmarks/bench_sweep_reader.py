"""Benchmark: the one sweep reader (``benchlab.sweepfile``) against ``np.loadtxt`` and a csv-module loop.

Run: ``python benchmarks/bench_sweep_reader.py [--files N] [--points N] [--rounds N]``

Writes N session records in the recorder's format (``point,time_s,vgs,id,v_source,i_source,status,direction,
spread_v``; invented square-law parts, test data only), then times side by side in one run, taking turns round by
round (each side's fastest round counts, so another job's burst slows one round, not one side):

- ``read_table(path).fit_points()``: parse the file, check every ok point, order, noise floor, stated VGS noise;
- ``np.loadtxt`` of the four numeric columns a fit needs (what a plain script would do; no checks, no status);
- a csv-module loop (``csv.reader`` and ``float`` per cell, row by row: how the three readers used to parse).

Prints files per second and the ratios; the numbers of the three agree (checked).
"""

from __future__ import annotations

import argparse
import csv
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from benchlab.sweepfile import CSV_COLUMNS, read_table  # noqa: E402


def write_records(folder: Path, files: int, points: int) -> list[Path]:
    rng = np.random.default_rng(1)
    paths = []
    for k in range(files):
        vth, kp = 2.0 + rng.normal(0, 0.2), 1.0 + rng.normal(0, 0.1)
        i_d = np.geomspace(1e-4, 0.1, points)
        vgs = vth + np.sqrt(2 * i_d / kp) + rng.normal(0, 2e-4, points)
        spread = rng.normal(0, 3e-4, points)
        lines = [",".join(CSV_COLUMNS)] + [
            f"{n},{0.01 * n:.6f},{v!r},{i!r},{v + 100 * i!r},{i!r},ok,up,{s!r}"
            for n, (v, i, s) in enumerate(zip(vgs.tolist(), i_d.tolist(), spread.tolist()))]
        path = folder / f"Q{k:05d}.csv"
        path.write_text("\n".join(lines) + "\n")
        paths.append(path)
    return paths


def one_reader(paths):
    return [read_table(p).fit_points() for p in paths]


def loadtxt(paths):
    return [np.loadtxt(p, delimiter=",", skiprows=1, usecols=(0, 2, 3, 8)) for p in paths]


def csv_loop(paths):
    out = []
    for p in paths:
        with open(p, newline="", encoding="utf-8") as handle:
            rows = list(csv.reader(handle))
        header = rows[0]
        col = {name: header.index(name) for name in ("point", "vgs", "id", "status", "spread_v")}
        vgs, ids = [], []
        for row in rows[1:]:
            if row[col["status"]] == "ok":
                vgs.append(float(row[col["vgs"]]))
                ids.append(float(row[col["id"]]))
        out.append((np.array(vgs), np.array(ids)))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--files", type=int, default=2000)
    parser.add_argument("--points", type=int, default=100)
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        paths = write_records(Path(tmp), args.files, args.points)
        sides = {"one reader (read_table + fit_points)": one_reader, "np.loadtxt (4 columns)": loadtxt,
                 "csv-module loop": csv_loop}
        best = {name: float("inf") for name in sides}
        results = {}
        for _ in range(args.rounds):
            for name, run in sides.items():
                start = time.perf_counter()
                results[name] = run(paths)
                best[name] = min(best[name], time.perf_counter() - start)
        ours = results["one reader (read_table + fit_points)"]
        assert all(np.array_equal(a.vgs, b[:, 1]) for a, b in zip(ours, results["np.loadtxt (4 columns)"]))
        assert all(np.array_equal(a.id, b[1]) for a, b in zip(ours, results["csv-module loop"]))
        print(f"{args.files} records of {args.points} points, fastest of {args.rounds} rounds each")
        for name, seconds in best.items():
            print(f"  {name:<40} {args.files / seconds:8.0f} files/s")
        mine = best["one reader (read_table + fit_points)"]
        print(f"one reader / np.loadtxt speed: {best['np.loadtxt (4 columns)'] / mine:.2f}x; "
              f"one reader / csv-module loop speed: {best['csv-module loop'] / mine:.2f}x")


if __name__ == "__main__":
    main()
