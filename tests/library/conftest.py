"""Fixtures of the library tests: every test that takes ``lib`` (or ``library_target``) runs on both backends,
SQLite and PostgreSQL (see tests/conftest.py)."""

from __future__ import annotations

import pytest

from benchlab.library import Library


@pytest.fixture
def lib(library_target):
    with Library.open(library_target) as library:
        yield library
