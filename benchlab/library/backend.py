"""The two database backends of the library behind one small interface: SQLite (a file, the default) and
PostgreSQL (a server shared by a lab, through psycopg 3).

Every statement of the library is written once, with ``?`` placeholders; the PostgreSQL side turns each
``?`` into psycopg's ``%s`` placeholder (values always travel as parameters, never inside the text).
Transactions are explicit: :meth:`Database.begin_write` (one writer at a time, as SQLite has it: on
PostgreSQL a transaction-scoped advisory lock), :meth:`Database.begin_read` (one consistent snapshot).
"""

from __future__ import annotations

import functools
import re
import sqlite3
import time
from pathlib import Path
from typing import Any, Iterable, Iterator, Sequence
from urllib.parse import urlsplit, urlunsplit

from benchlab.errors import LibraryError

URL_SCHEMES = ("postgresql", "postgres")
# key of the advisory lock that serializes writers on one PostgreSQL database (any constant; "benc")
WRITE_LOCK_KEY = 0x62656E63
VERSION_TABLE = "benchlab_schema"


def is_url(target: Any) -> bool:
    """True when ``target`` names a PostgreSQL library (``postgresql://...``) rather than a file."""
    return isinstance(target, str) and urlsplit(target).scheme in URL_SCHEMES


def redact(url: str) -> str:
    """The URL without its password (for messages, ``library info`` and reports)."""
    parts = urlsplit(url)
    if parts.password is None:
        return url
    host = parts.hostname or ""
    netloc = f"{parts.username or ''}:***@{host}" + (f":{parts.port}" if parts.port else "")
    return urlunsplit((parts.scheme, netloc, parts.path, parts.query, parts.fragment))


class Database:
    """One open connection to a library database (the interface both backends implement).

    Attributes
    ----------
    kind : str
        ``sqlite`` or ``postgresql``.
    target : str
        The file path or the URL without its password.
    errors : tuple of exception types
        What the driver raises.
    """

    kind = ""
    errors: tuple = ()

    def __init__(self, target: str):
        self.target = target

    # -- statements --------------------------------------------------------------------------------
    def execute(self, sql: str, params: Sequence[Any] = ()):
        """Run one statement with ``?`` placeholders; returns a cursor (``fetchone``, ``fetchall``, iteration)."""
        raise NotImplementedError

    def executemany(self, sql: str, rows: Iterable[Sequence[Any]]) -> None:
        """Run one statement for every row of parameters."""
        raise NotImplementedError

    def batches(self, sql: str, size: int) -> Iterator[list[tuple]]:
        """The rows of a query in lists of at most ``size`` (without holding every row in memory)."""
        cursor = self.execute(sql)
        while rows := cursor.fetchmany(size):
            yield [tuple(r) for r in rows]

    def insert(self, sql: str, params: Sequence[Any] = ()) -> int:
        """Run an ``INSERT`` into a table with an ``id`` key and return the new row's id."""
        return int(self.execute(sql + " RETURNING id", params).fetchone()[0])

    # -- transactions ------------------------------------------------------------------------------
    def begin_write(self) -> None:
        raise NotImplementedError

    def begin_read(self) -> None:
        raise NotImplementedError

    def begin_migration(self) -> None:
        """A write transaction that also holds off every other program migrating the same database."""
        self.begin_write()

    def commit(self) -> None:
        self.execute("COMMIT")  # on PostgreSQL a lost connection here is the LibraryError of execute

    def rollback(self) -> None:
        """Roll back the open transaction; a connection already lost has nothing left to roll back."""
        try:
            if self.in_transaction:
                self.execute("ROLLBACK")
        except (LibraryError, *self.errors):
            pass

    @property
    def in_transaction(self) -> bool:
        raise NotImplementedError

    def close(self) -> None:
        raise NotImplementedError

    # -- schema and facts --------------------------------------------------------------------------
    def schema_version(self) -> int:
        raise NotImplementedError

    def set_schema_version(self, version: int) -> None:
        """Record the schema version (inside the migration's transaction)."""
        raise NotImplementedError

    def ddl(self, statement: str) -> str:
        """A migration statement in this backend's dialect (the migration files are written for SQLite)."""
        return statement

    def is_unique_violation(self, exc: BaseException) -> bool:
        raise NotImplementedError

    def is_connection_lost(self, exc: BaseException) -> bool:
        """True when ``exc`` means the server went away (nothing of the open transaction was kept)."""
        return False

    def facts(self) -> dict[str, Any]:
        """Backend-specific facts for ``library info``."""
        return {}

    def after_copy(self, tables: Sequence[str]) -> None:
        """Called after rows were copied in with their ids (PostgreSQL moves its id counters past them)."""

    def refresh_statistics(self) -> None:
        """After a bulk write (outside any transaction): let the query planner see the new sizes.

        PostgreSQL plans from table statistics; right after thousands of rows arrive in a new database it
        has none until autovacuum gets there, and picked a plan that read 10,000 parts in 20 s instead of
        1 s (benchmarks/bench_library_backends.py). SQLite needs nothing here.
        """


class SqliteDatabase(Database):
    """A library file: WAL mode, foreign keys on, ``BEGIN IMMEDIATE`` for writes."""

    kind = "sqlite"
    errors = (sqlite3.Error,)

    def __init__(self, connection: sqlite3.Connection, target: str):
        super().__init__(target)
        self.raw = connection

    @classmethod
    def open(cls, path: Path, timeout_s: float, create: bool) -> "SqliteDatabase":
        if path.exists() and path.is_dir():
            raise LibraryError(f"{path}: is a folder, not a library file")
        if not create and not path.exists():
            raise LibraryError(f"{path}: no library here yet (add a part or import a session first, "
                               f"or name another file with --library)")
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            connection = sqlite3.connect(str(path), isolation_level=None, timeout=timeout_s)
        except (OSError, sqlite3.Error) as exc:
            raise LibraryError(f"{path}: cannot open the library: {exc}") from exc
        try:
            connection.execute("PRAGMA foreign_keys = ON")
            connection.execute(f"PRAGMA busy_timeout = {int(timeout_s * 1000)}")  # a number, not input
            mode = _switch_to_wal(connection, timeout_s)
            if str(mode).lower() != "wal":
                raise LibraryError(f"{path}: cannot switch the library to WAL mode (got {mode})")
        except sqlite3.DatabaseError as exc:
            connection.close()
            raise LibraryError(f"{path}: not a usable library file: {exc}") from exc
        except BaseException:
            connection.close()
            raise
        return cls(connection, str(path))

    def execute(self, sql, params=()):
        return self.raw.execute(sql, params)

    def executemany(self, sql, rows):
        self.raw.executemany(sql, rows)

    def begin_write(self):
        try:
            self.raw.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError as exc:
            raise LibraryError(f"{self.target}: the library is busy (another program is writing): {exc}") from exc

    def begin_read(self):
        self.raw.execute("BEGIN DEFERRED")

    @property
    def in_transaction(self):
        return self.raw.in_transaction

    def close(self):
        self.raw.close()

    def schema_version(self):
        return int(self.raw.execute("PRAGMA user_version").fetchone()[0])

    def set_schema_version(self, version):
        self.raw.execute(f"PRAGMA user_version = {int(version)}")  # PRAGMA takes no parameters; an int

    def is_unique_violation(self, exc):
        return isinstance(exc, sqlite3.IntegrityError) and "UNIQUE" in str(exc)

    def facts(self):
        return {"journal_mode": self.raw.execute("PRAGMA journal_mode").fetchone()[0],
                "foreign_keys": bool(self.raw.execute("PRAGMA foreign_keys").fetchone()[0])}


def _switch_to_wal(connection: sqlite3.Connection, timeout_s: float) -> str:
    # Several programs opening a new file at once: the switch needs the file to itself and SQLite
    # answers "database is locked" at once instead of waiting (found by the concurrent-open test).
    deadline = time.monotonic() + timeout_s
    while True:
        try:
            return str(connection.execute("PRAGMA journal_mode = WAL").fetchone()[0])
        except sqlite3.OperationalError as exc:
            if "locked" not in str(exc) and "busy" not in str(exc) or time.monotonic() > deadline:
                raise
            time.sleep(0.01)


@functools.lru_cache(maxsize=512)
def _pg_sql(sql: str) -> str:
    # the library's statements hold no '%' and no '?' inside literals: a plain placeholder swap
    if "%" in sql:
        raise ValueError(f"a library statement may not contain '%': {sql[:60]}")
    return sql.replace("?", "%s")


# SQLite spellings in the migration files and what PostgreSQL needs for the same meaning: ids that number
# themselves, 8-byte floats (PostgreSQL's REAL has 4), byte-order text comparison (SQLite's BINARY), no rowid
_PG_DDL = ((r"\bINTEGER PRIMARY KEY\b", "BIGINT GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY"),
           (r"\bINTEGER\b", "BIGINT"), (r"\bREAL\b", "DOUBLE PRECISION"), (r"\bTEXT\b", 'TEXT COLLATE "C"'),
           (r"\)\s*WITHOUT ROWID", ")"))


class PostgresDatabase(Database):
    """A library in a PostgreSQL database (psycopg 3, autocommit with explicit transactions)."""

    kind = "postgresql"

    def __init__(self, connection, target: str, psycopg_module):
        super().__init__(target)
        self.raw = connection
        self._pg = psycopg_module
        self.errors = (psycopg_module.Error,)

    @classmethod
    def open(cls, url: str, timeout_s: float) -> "PostgresDatabase":
        shown = redact(url)
        try:
            import psycopg
        except ImportError as exc:
            raise LibraryError(f"{shown}: a PostgreSQL library needs psycopg 3 (pip install 'psycopg[binary]')") from exc
        options = {} if "connect_timeout" in url else {"connect_timeout": max(1, int(min(timeout_s, 10)))}
        try:
            connection = psycopg.connect(url, autocommit=True, **options)
        except psycopg.Error as exc:
            raise LibraryError(f"{shown}: cannot reach the library: {_first_line(exc)}") from exc
        try:
            # a write waits this long for another writer's lock before giving up with a clear error
            connection.execute("SELECT set_config('lock_timeout', %s, false)", (f"{int(timeout_s * 1000)}ms",))
        except psycopg.Error as exc:
            connection.close()
            raise LibraryError(f"{shown}: not a usable library database: {_first_line(exc)}") from exc
        return cls(connection, shown, psycopg)

    def execute(self, sql, params=()):
        try:
            return self.raw.execute(_pg_sql(sql), tuple(params))
        except self._pg.OperationalError as exc:
            raise self._lost(exc) from exc

    def executemany(self, sql, rows):
        try:
            with self.raw.cursor() as cur:
                cur.executemany(_pg_sql(sql), [tuple(r) for r in rows])
        except self._pg.OperationalError as exc:
            raise self._lost(exc) from exc

    def _lost(self, exc: BaseException) -> BaseException:
        # a dropped server or network: one LibraryError (the server rolls back what was not committed);
        # other operational errors (a lock wait that timed out...) go to the caller as they are
        if not (self.raw.closed or self.raw.broken):
            return exc
        return LibraryError(f"{self.target}: lost the connection to the library ({_first_line(exc)}); nothing of "
                            f"this change was written, the library is as it was")

    def batches(self, sql, size):
        # a server-side cursor (inside the caller's transaction): the rows come over in batches
        with self.raw.cursor(name=f"benchlab_batches_{id(sql):x}") as cursor:
            cursor.execute(_pg_sql(sql))
            while rows := cursor.fetchmany(size):
                yield [tuple(r) for r in rows]

    def begin_write(self):
        self.raw.execute("BEGIN ISOLATION LEVEL READ COMMITTED")
        try:
            # one writer at a time, as in SQLite: a check-then-write (is this part still in stock? was this
            # session already imported?) cannot interleave with another program's
            self.raw.execute("SELECT pg_advisory_xact_lock(%s)", (WRITE_LOCK_KEY,))
        except self._pg.errors.LockNotAvailable as exc:
            self.rollback()
            raise LibraryError(f"{self.target}: the library is busy (another program is writing): "
                               f"{_first_line(exc)}") from exc

    def begin_read(self):
        self.raw.execute("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY")

    def begin_migration(self):
        self.begin_write()
        self.raw.execute(f"CREATE TABLE IF NOT EXISTS {VERSION_TABLE} (version INTEGER NOT NULL)")  # a constant

    @property
    def in_transaction(self):
        return self.raw.info.transaction_status != self._pg.pq.TransactionStatus.IDLE

    def close(self):
        self.raw.close()

    def schema_version(self):
        exists = self.raw.execute("SELECT to_regclass(%s)", (VERSION_TABLE,)).fetchone()[0]
        if exists is None:
            return 0
        row = self.raw.execute(f"SELECT max(version) FROM {VERSION_TABLE}").fetchone()  # a constant name
        return int(row[0] or 0)

    def set_schema_version(self, version):
        self.raw.execute(f"DELETE FROM {VERSION_TABLE}")
        self.raw.execute(f"INSERT INTO {VERSION_TABLE} (version) VALUES (%s)", (int(version),))

    def ddl(self, statement):
        lines = [line for line in statement.splitlines() if not line.strip().startswith("--")]
        statement = "\n".join(lines)
        for pattern, replacement in _PG_DDL:
            statement = re.sub(pattern, replacement, statement)
        return statement

    def is_unique_violation(self, exc):
        return isinstance(exc, self._pg.errors.UniqueViolation)

    def is_connection_lost(self, exc):
        return isinstance(exc, self._pg.OperationalError) or self.raw.closed or self.raw.broken

    def facts(self):
        return {"server_version": self.raw.info.server_version}

    def refresh_statistics(self):
        try:
            # fixed table names; a role that does not own them gets a warning and nothing is analysed
            self.raw.execute("ANALYZE lots, parts, sweeps, sweep_points, fits, designs, design_parts, state_changes")
        except self._pg.Error:
            pass  # statistics only speed queries up; their absence is no error

    def after_copy(self, tables):
        from psycopg import sql

        for table in tables:
            # setval moves the identity past the copied ids (table names: the library's own, quoted as names)
            self.raw.execute(sql.SQL("SELECT setval(pg_get_serial_sequence(%s, 'id'), "
                                     "coalesce((SELECT max(id) FROM {}), 0) + 1, false)").format(sql.Identifier(table)),
                             (table,))


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def open_database(target: str | Path, *, timeout_s: float = 30.0, create: bool = True) -> Database:
    """Open the library database named by ``target``: a ``postgresql://`` URL or a file path.

    Parameters
    ----------
    target : str or Path
        ``postgresql://user@host/db`` (options such as ``sslmode`` in the query string) or a file.
    timeout_s : float
        How long a write waits for another writer (and, at most 10 s, for the server to answer).
    create : bool
        Create a missing file (a PostgreSQL database must exist already; its tables are created).

    Raises
    ------
    LibraryError
        When the library cannot be opened (one line, no password in it).
    """
    if is_url(target):
        return PostgresDatabase.open(str(target), timeout_s)
    return SqliteDatabase.open(Path(target), timeout_s, create)
