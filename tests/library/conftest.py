"""Fixtures of the library tests."""

from __future__ import annotations

import pytest

from benchlab.library import Library


@pytest.fixture
def lib(tmp_path):
    with Library.open(tmp_path / "library.db") as library:
        yield library
