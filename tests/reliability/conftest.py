"""The long reliability runs (``@pytest.mark.slow``: the 200-part soak, the 30-kill run) stay out of the plain
``python -m pytest`` that CI runs; ``python -m pytest -m slow tests/reliability`` runs them."""

from __future__ import annotations

import pytest


def pytest_collection_modifyitems(config, items):
    if "slow" in (config.getoption("markexpr") or ""):
        return
    skip = pytest.mark.skip(reason="long run: select it with -m slow")
    for item in items:
        if "slow" in item.keywords and "tests/reliability" in str(item.fspath).replace("\\", "/"):
            item.add_marker(skip)
