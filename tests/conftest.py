"""Shared test fixtures, and the CI rule: tests never skip in CI.

Under ``CI=true`` (``.ci/run`` sets it) any skip -- ``pytest.skip``, a skip marker, ``importorskip``, at run time
or at collection -- is reported as a failure, so a missing tool (ngspice, tmux, PostgreSQL) or a broken import
can never pass CI silently. Locally a test may still skip for a missing tool; use :func:`skip_or_fail` for that,
which names what CI must install.
"""

from __future__ import annotations

import os
import shutil

import pytest


def in_ci() -> bool:
    """True under CI (``CI`` set to anything but empty, 0, false or no)."""
    return os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no")


def skip_or_fail(reason: str) -> None:
    """Skip the test with ``reason`` on a developer's machine; fail it in CI, where everything must run."""
    if in_ci():
        pytest.fail(f"{reason} (required in CI: .ci/run installs it)")
    pytest.skip(reason)


def _fail_skips_in_ci(report) -> None:
    if in_ci() and report.skipped and not hasattr(report, "wasxfail"):
        reason = report.longrepr[2] if isinstance(report.longrepr, tuple) else str(report.longrepr)
        report.outcome = "failed"
        report.longrepr = f"skipped in CI, where every test must run: {reason}"


@pytest.hookimpl(hookwrapper=True)
def pytest_runtest_makereport(item, call):
    outcome = yield
    _fail_skips_in_ci(outcome.get_result())


@pytest.hookimpl(hookwrapper=True)
def pytest_make_collect_report(collector):
    outcome = yield
    _fail_skips_in_ci(outcome.get_result())


@pytest.fixture
def ngspice_path() -> str:
    """Path of the ngspice binary; skip when absent, except in CI where its checks must run."""
    path = shutil.which("ngspice")
    if path is None:
        skip_or_fail("ngspice not installed (apt-get install -y ngspice)")
    return path


PG_URL_ENV = "BENCHLAB_TEST_PG_URL"


@pytest.fixture(scope="session")
def postgres_url() -> str:
    """URL of a PostgreSQL database the tests may fill (``$BENCHLAB_TEST_PG_URL``, set by ``.ci/run``).

    Skipped with a message when absent or unreachable, except in CI where the PostgreSQL tests must run.
    """
    url = os.environ.get(PG_URL_ENV)
    problem = None
    if not url:
        problem = f"no PostgreSQL for the tests: set {PG_URL_ENV} (bash .ci/run sets one up)"
    else:
        try:
            import psycopg

            psycopg.connect(url, connect_timeout=5).close()
        except Exception as exc:  # ImportError or any connection failure: the same verdict
            problem = f"PostgreSQL at {PG_URL_ENV} is not reachable: {str(exc).strip().splitlines()[0]}"
    if problem:
        skip_or_fail(problem)
    return url


@pytest.fixture
def fresh_postgres(postgres_url):
    """Factory of empty PostgreSQL libraries: each call makes a new schema and returns a URL that uses it
    (``options=-csearch_path=...``); every schema is dropped after the test."""
    import uuid
    from urllib.parse import parse_qsl, urlencode, urlsplit, urlunsplit

    import psycopg
    from psycopg import sql

    made: list[str] = []

    def make() -> str:
        name = f"t_{uuid.uuid4().hex[:16]}"
        with psycopg.connect(postgres_url, autocommit=True) as conn:
            conn.execute(sql.SQL("CREATE SCHEMA {}").format(sql.Identifier(name)))
        made.append(name)
        parts = urlsplit(postgres_url)
        query = [(k, v) for k, v in parse_qsl(parts.query) if k != "options"] + [("options", f"-csearch_path={name}")]
        return urlunsplit((parts.scheme, parts.netloc, parts.path, urlencode(query), parts.fragment))

    yield make
    if made:
        with psycopg.connect(postgres_url, autocommit=True) as conn:
            for name in made:
                conn.execute(sql.SQL("DROP SCHEMA IF EXISTS {} CASCADE").format(sql.Identifier(name)))


@pytest.fixture(params=["sqlite", "postgresql"])
def library_backend(request) -> str:
    """The library tests run once on each backend."""
    return request.param


@pytest.fixture
def new_library_target(library_backend, tmp_path, request):
    """Factory of empty library targets on the test's backend: a new file path, or a new PostgreSQL schema URL."""
    if library_backend == "sqlite":
        count = iter(range(1, 10_000))
        return lambda: str(tmp_path / f"library-{next(count)}.db")
    return request.getfixturevalue("fresh_postgres")


@pytest.fixture
def library_target(new_library_target) -> str:
    """One empty library (file path or URL) on the test's backend."""
    return new_library_target()
