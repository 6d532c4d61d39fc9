"""Fixtures of the instrument-layer tests: pyvisa-py resource manager and scripted fake servers."""

from __future__ import annotations

import pytest

from benchlab.instruments.profiles import load_profile
from benchlab.instruments.transport import VisaTransport

from .fake_scpi import FakeScpiServer

# Normal replies: generous, so a loaded machine never causes a spurious retry.
TEST_TIMEOUT_MS = 1500
# Tests that provoke a timeout on purpose wait this long per attempt.
SHORT_TIMEOUT_MS = 250


@pytest.fixture
def resource_manager():
    import pyvisa

    # A fresh one per test, never closed here: pyvisa shares the manager session between
    # instances, so a test elsewhere that closes its manager ends every older one in the process,
    # and closing ours would end theirs.
    return pyvisa.ResourceManager("@py")


@pytest.fixture
def server():
    with FakeScpiServer() as fake:
        yield fake


@pytest.fixture
def transport(resource_manager, server):
    link = VisaTransport(resource_manager, server.resource, timeout_ms=TEST_TIMEOUT_MS).open()
    yield link
    link.close()


@pytest.fixture
def short_transport(resource_manager, server):
    link = VisaTransport(resource_manager, server.resource, timeout_ms=SHORT_TIMEOUT_MS).open()
    yield link
    link.close()


@pytest.fixture(scope="session")
def profiles():
    return {role: load_profile(name) for role, name in (("supply", "generic-scpi-supply"),
                                                         ("meter", "generic-scpi-meter"),
                                                         ("smu", "generic-scpi-smu"))}
