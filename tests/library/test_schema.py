"""Schema versions, migrations (one path for both backends) and the database settings the library relies on."""

from __future__ import annotations


import pytest

from benchlab.errors import LibraryError
from benchlab.library import Library, default_library_path
from benchlab.library import schema
from benchlab.library.backend import open_database
from benchlab.models import DeviceParams


def test_migrations_are_numbered_and_latest_matches_file(lib):
    migrations = schema.load_migrations()
    assert [m.version for m in migrations] == list(range(1, len(migrations) + 1))
    assert lib.info()["schema_version"] == schema.latest_version() == len(migrations)


def test_old_version_database_is_migrated_keeping_its_data(library_target):
    path = library_target
    conn = open_database(path)
    assert schema.migrate(conn, target=1) == 1
    conn.execute("INSERT INTO lots (name, created) VALUES ('bag-A', '2026-01-01T00:00:00+00:00')")
    conn.execute("INSERT INTO parts (lot_id, label, created) VALUES (1, 'Q01', '2026-01-01T00:00:00+00:00')")
    conn.execute("INSERT INTO fits (part_id, source, model, params_json, fitted_at) VALUES "
                 "(1, 'hand', 'square', '{\"model\": \"square\", \"vth\": 2.5, \"kp\": 0.9}', '2026-01-01')")
    # version 1 has no design tables yet
    with pytest.raises(conn.errors):
        conn.execute("SELECT * FROM designs")
    conn.close()

    with Library.open(path) as lib:
        assert lib.info()["schema_version"] == schema.latest_version()
        part = lib.get_part("Q01")
        assert part.params == DeviceParams("square", vth=2.5, kp=0.9)
        design_id = lib.record_design({"kind": "sink", "supply": 12.0}, [part])
        assert lib.get_part("Q01").state == "reserved"
        assert lib.design(design_id)["supply"] == 12.0
        assert lib.history("Q01")[-1]["new_state"] == "reserved"  # table of migration 3
        # the figures of migration 7, filled in for the fit stored before it: square law, VGS = Vth + sqrt(2 I / KP)
        # and gm = sqrt(2 KP I) at the built-in default current, 250 uA (Sedra & Smith, Microelectronic Circuits)
        assert part.vgs_ref == pytest.approx(2.5 + (2 * 250e-6 / 0.9) ** 0.5, abs=1e-12)
        assert part.gm_op == pytest.approx((2 * 0.9 * 250e-6) ** 0.5, rel=1e-12) and part.gm_current == 250e-6


def test_newer_schema_is_refused_with_a_clear_error(library_target):
    path = library_target
    with Library.open(path):
        pass
    conn = open_database(path)
    conn.begin_migration()
    conn.set_schema_version(schema.latest_version() + 5)
    conn.commit()
    conn.close()
    with pytest.raises(LibraryError, match="newer than this benchlab"):
        Library.open(path)


def test_wal_and_foreign_keys_are_on(lib):
    conn = lib.connection
    if lib.backend == "sqlite":
        # SQLite documentation (https://sqlite.org/pragma.html): journal_mode returns the new mode, 'wal';
        # foreign_keys returns 1 when enforcement is on.
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert conn.execute("PRAGMA foreign_keys").fetchone()[0] == 1
    lib.add_part("Q01", lot="bag")
    # SQLite documentation (https://sqlite.org/foreignkeys.html) and PostgreSQL documentation ("Constraints",
    # foreign keys): a violated constraint fails the statement
    with pytest.raises(conn.errors, match="(?i)foreign key"):
        conn.execute("INSERT INTO fits (part_id, source, model, params_json, fitted_at) "
                     "VALUES (999, 'hand', 'square', '{}', 'now')")
    with pytest.raises(conn.errors, match="(?i)foreign key"):
        conn.execute("DELETE FROM lots WHERE name = 'bag'")  # ON DELETE RESTRICT: the lot still holds a part
    if lib.backend == "sqlite":
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_postgresql_columns_keep_what_sqlite_keeps(lib):
    # an 8-byte float survives (PostgreSQL's REAL would keep about 6 digits: PostgreSQL documentation,
    # "Floating-Point Types"), and labels sort byte-wise as SQLite's BINARY collation does
    lib.add_part("Q01", lot="bag", params=DeviceParams("square", vth=2.123456789012345, kp=0.987654321098765))
    conn = lib.connection
    conn.execute("INSERT INTO sweeps (part_id, imported) VALUES (1, 'now')")
    conn.execute("INSERT INTO sweep_points (sweep_id, point, vgs, id) VALUES (1, 0, ?, ?)",
                 (2.123456789012345, 1.2345678901234567e-9))
    assert conn.execute("SELECT vgs, id FROM sweep_points").fetchone() == (2.123456789012345, 1.2345678901234567e-9)
    for label in ("b", "B", "a", "Q_", "Qa", "QB"):  # labels start with a letter or digit (benchlab.names)
        lib.add_part(label, lot="sort")
    rows = conn.execute("SELECT label FROM parts WHERE lot_id = 2 ORDER BY label").fetchall()
    # ASCII order: 'B' 0x42, '_' 0x5F, 'a' 0x61
    assert [r[0] for r in rows] == ["B", "QB", "Q_", "Qa", "a", "b"]


def test_not_a_database_gets_one_clear_error(tmp_path):
    path = tmp_path / "notes.db"
    path.write_text("this is not a database file, just some text " * 50)
    with pytest.raises(LibraryError, match="not a usable library file"):
        Library.open(path)
    with pytest.raises(LibraryError, match="is a folder"):
        Library.open(tmp_path)


def test_default_path_follows_the_environment(monkeypatch, tmp_path):
    monkeypatch.setenv("BENCHLAB_LIBRARY", str(tmp_path / "env.db"))
    assert default_library_path() == tmp_path / "env.db"
    monkeypatch.delenv("BENCHLAB_LIBRARY")
    path = default_library_path()
    assert path.name == "library.db" and "benchlab" in str(path.parent)
    # a PostgreSQL URL is kept as text (a Path would fold its '//' into one '/')
    monkeypatch.setenv("BENCHLAB_LIBRARY", " postgresql://bench1@db.lab.example/lab_parts?sslmode=verify-full ")
    assert default_library_path() == "postgresql://bench1@db.lab.example/lab_parts?sslmode=verify-full"


def test_several_programs_creating_the_same_library_at_once(new_library_target, library_backend):
    import threading

    errors = []
    # SQLite: one round failed about 1 time in 14 ("database is locked" from the switch to WAL): 60 rounds;
    # PostgreSQL: the migration lock must hold off the other three (12 rounds)
    for round_ in range(60 if library_backend == "sqlite" else 12):
        path = new_library_target()
        barrier = threading.Barrier(4)

        def opener():
            barrier.wait()
            try:
                with Library.open(path) as lib:
                    assert lib.info()["schema_version"] == schema.latest_version()
            except Exception as exc:  # any failure is the finding
                errors.append(repr(exc))

        threads = [threading.Thread(target=opener) for _ in range(4)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=60)
    assert errors == []


def test_statement_splitter_keeps_every_statement():
    script = "-- a comment; with a semicolon\nCREATE TABLE a (x TEXT DEFAULT ';');\nCREATE INDEX i ON a(x);\n"
    assert [s.splitlines()[-1] for s in schema.split_statements(script)] == [
        "CREATE TABLE a (x TEXT DEFAULT ';');", "CREATE INDEX i ON a(x);"]
