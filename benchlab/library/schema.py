"""Schema versions of the device library and the migrations between them (one path for both backends).

Migrations are the ordered ``.sql`` files of ``benchlab/library/migrations/`` (``NNNN_name.sql`` migrates
from version NNNN-1 to NNNN), written in SQLite's dialect; the PostgreSQL backend translates their column
types (:meth:`benchlab.library.backend.Database.ddl`). The version lives in ``PRAGMA user_version`` (SQLite)
or the one-row table ``benchlab_schema`` (PostgreSQL). Each migration runs in its own transaction together
with the version bump, so a crash mid-migration leaves the previous version.
"""

from __future__ import annotations

import re
import sqlite3
from dataclasses import dataclass
from importlib import resources

from benchlab.errors import LibraryError
from benchlab.library.backend import Database, SqliteDatabase

_MIGRATION_NAME = re.compile(r"^(\d{4})_([a-z0-9_]+)\.sql$")


@dataclass(frozen=True)
class Migration:
    """One step of the schema: ``version`` is the schema version after it ran."""

    version: int
    name: str
    sql: str


def load_migrations() -> tuple[Migration, ...]:
    """The bundled migrations in order; checks they number 1, 2, 3... without gaps.

    Returns
    -------
    tuple of Migration
        Sorted by version.
    """
    folder = resources.files("benchlab.library").joinpath("migrations")
    found = []
    for entry in folder.iterdir():
        match = _MIGRATION_NAME.match(entry.name)
        if match:
            found.append(Migration(int(match.group(1)), match.group(2), entry.read_text(encoding="utf-8")))
    found.sort(key=lambda m: m.version)
    expected = list(range(1, len(found) + 1))
    if [m.version for m in found] != expected:
        raise RuntimeError(f"library migrations are not numbered 1..{len(found)}: {[m.version for m in found]}")
    return tuple(found)


def latest_version() -> int:
    """Schema version this benchlab writes."""
    return len(load_migrations())


def schema_version(db: Database | sqlite3.Connection) -> int:
    """The database's schema version (0 for an empty database)."""
    return _database(db).schema_version()


def _database(db: Database | sqlite3.Connection) -> Database:
    # tests hand in a bare sqlite3 connection to build old-version files
    return SqliteDatabase(db, "") if isinstance(db, sqlite3.Connection) else db


def migrate(db: Database | sqlite3.Connection, target: int | None = None, *, path: str = "") -> int:
    """Bring the database up to ``target`` (default: the latest version), one transaction per step.

    Parameters
    ----------
    db : Database or sqlite3.Connection
        An open backend (a bare SQLite connection must be in autocommit mode, ``isolation_level=None``).
    target : int, optional
        Version to stop at; tests use it to build an old-version database.
    path : str
        Database path or URL, for error messages.

    Returns
    -------
    int
        The schema version after migrating.
    """
    db = _database(db)
    migrations = load_migrations()
    target = len(migrations) if target is None else target
    current = db.schema_version()
    if current > len(migrations):
        raise LibraryError(
            f"{path or 'library'}: schema version {current} is newer than this benchlab understands "
            f"({len(migrations)}); upgrade benchlab to open it"
        )
    for migration in migrations[current:target]:
        try:
            db.begin_migration()
            # another process may have migrated while this one waited for the write lock
            if db.schema_version() >= migration.version:
                db.commit()
                continue
            for statement in split_statements(migration.sql):
                db.execute(db.ddl(statement))
            # the version bump shares the transaction: a crash leaves the previous version intact
            db.set_schema_version(migration.version)
            db.commit()
        except db.errors as exc:
            db.rollback()
            raise LibraryError(
                f"{path or 'library'}: migration {migration.version} ({migration.name}) failed: {exc}"
            ) from exc
    return db.schema_version()


def split_statements(script: str) -> list[str]:
    """The complete SQL statements of a migration script, in order (comments kept with their statement)."""
    statements, buffer = [], ""
    for line in script.splitlines(keepends=True):
        buffer += line
        if sqlite3.complete_statement(buffer):
            statements.append(buffer.strip())
            buffer = ""
    if buffer.strip() and not all(l.strip().startswith("--") or not l.strip() for l in buffer.splitlines()):
        raise RuntimeError(f"incomplete SQL statement at the end of a migration: {buffer.strip()[:60]}")
    return statements
