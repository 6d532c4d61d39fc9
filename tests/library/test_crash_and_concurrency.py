"""A killed import leaves all or nothing; readers never see half an import (on both backends)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import threading
from pathlib import Path

from benchlab.library import Library, import_session, import_sessions
from session_builder import demo_bag, write_session

REPO = Path(__file__).resolve().parents[2]

CHILD = textwrap.dedent("""
    import sys, time
    from benchlab.library import Library, import_sessions
    db, *sessions = sys.argv[1:]

    def progress(label):
        print("wrote", label, flush=True)
        time.sleep(0.02)  # widen the window so the kill lands inside the transaction

    with Library.open(db) as lib:
        summary = import_sessions(lib, sessions, refit=False, progress=progress)
    print("done", summary.fitted, flush=True)
""")


def _run_child(db: Path, sessions: list[Path], kill_after: int | None):
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.Popen([sys.executable, "-c", CHILD, str(db), *map(str, sessions)], cwd=REPO, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    written = 0
    try:
        for line in proc.stdout:
            if line.startswith("wrote"):
                written += 1
                if kill_after is not None and written >= kill_after:
                    proc.send_signal(signal.SIGKILL)
                    break
    finally:
        proc.wait(timeout=60)
    return proc, written


def _check(db) -> int:
    with Library.open(db) as lib:
        if lib.backend == "sqlite":
            # SQLite documentation (https://sqlite.org/pragma.html#pragma_integrity_check): "ok" when intact
            assert lib.connection.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        return lib.connection.execute("SELECT count(*) FROM parts").fetchone()[0]


def test_kill_9_during_bulk_import_leaves_all_or_nothing(tmp_path, library_target):
    sessions = [write_session(tmp_path, f"s{k}", f"bag-{k}", demo_bag(10, seed=k, duds=(3,))) for k in range(4)]
    db = library_target
    with Library.open(db) as lib:
        lib.add_part("KEEP", lot="earlier")  # data from before the import must survive the kill

    proc, written = _run_child(db, sessions, kill_after=17)
    assert proc.returncode == -signal.SIGKILL and 0 < written < 40
    assert _check(db) == 1  # none of the import, the earlier part intact
    with Library.open(db) as lib:
        assert [p.label for p in lib.parts(state=None)] == ["KEEP"]

    proc, written = _run_child(db, sessions, kill_after=None)  # the same import run to the end
    assert proc.returncode == 0 and written == 40
    assert _check(db) == 41
    with Library.open(db) as lib:
        assert len(lib.parts(state="rejected")) == 4


def test_readers_never_see_a_part_without_its_fit_or_half_an_import(tmp_path, library_target):
    sessions = [write_session(tmp_path, f"s{k}", f"lot-{k}", demo_bag(8, seed=k)) for k in range(12)]
    db = library_target
    Library.open(db).close()
    done = threading.Event()
    problems: list[str] = []
    observations = [0]
    ready = threading.Barrier(3)

    def reader():
        with Library.open(db) as lib:
            ready.wait(timeout=30)
            while not done.is_set():
                parts = lib.parts(state=None)
                per_lot: dict[str, int] = {}
                for part in parts:
                    per_lot[part.lot] = per_lot.get(part.lot, 0) + 1
                    if part.params is None:
                        problems.append(f"{part.spec} seen without its fit")
                if any(n != 8 for n in per_lot.values()):
                    problems.append(f"half an import seen: {per_lot}")
                with lib.snapshot():  # several queries in one read transaction agree with each other
                    n_parts = lib.connection.execute("SELECT count(*) FROM parts").fetchone()[0]
                    n_fits = lib.connection.execute("SELECT count(*) FROM fits").fetchone()[0]
                if n_parts != n_fits:
                    problems.append(f"{n_parts} parts but {n_fits} fits")
                observations[0] += 1

    threads = [threading.Thread(target=reader) for _ in range(2)]
    for t in threads:
        t.start()
    try:
        ready.wait(timeout=30)  # both readers are reading before the first write
        with Library.open(db) as writer:
            for session in sessions:
                import_session(writer, session, refit=False)
    finally:
        done.set()
        for t in threads:
            t.join(timeout=60)
    assert not problems, problems[:5]
    assert observations[0] >= 2
    assert _check(db) == 96


READER = textwrap.dedent("""
    import os, sys
    from benchlab.library import Library
    db, stop, size = sys.argv[1], sys.argv[2], int(sys.argv[3])
    seen = problems = 0
    print("ready", flush=True)
    with Library.open(db) as lib:
        while not os.path.exists(stop):
            per_lot = {}
            for part in lib.parts(state=None):
                per_lot[part.lot] = per_lot.get(part.lot, 0) + 1
                problems += part.params is None
            problems += sum(1 for n in per_lot.values() if n != size)
            seen += 1
    print("seen", seen, "problems", problems, flush=True)
""")


def test_a_reader_process_sees_only_whole_imports(tmp_path, library_target):
    sessions = [write_session(tmp_path, f"s{k}", f"lot-{k}", demo_bag(8, seed=k)) for k in range(10)]
    db, stop = library_target, tmp_path / "stop"
    Library.open(db).close()
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.Popen([sys.executable, "-c", READER, str(db), str(stop), "8"], cwd=REPO, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        with Library.open(db) as writer:
            for session in sessions:
                import_session(writer, session, refit=False)
    finally:
        stop.touch()
        out, err = proc.communicate(timeout=60)
    words = out.split()
    assert proc.returncode == 0, err
    assert words[0] == "seen" and int(words[1]) >= 1 and words[2:] == ["problems", "0"]
