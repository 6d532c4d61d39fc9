"""Shared test fixtures."""

from __future__ import annotations

import os
import shutil

import pytest


@pytest.fixture
def ngspice_path() -> str:
    """Path of the ngspice binary; skip when absent, except in CI where its checks must run."""
    path = shutil.which("ngspice")
    if path is None:
        if os.environ.get("CI"):
            pytest.fail("ngspice is required in CI (apt-get install -y ngspice)")
        pytest.skip("ngspice not installed")
    return path
