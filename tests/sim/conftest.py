"""Fixtures for the simulator tests: a bench on free loopback ports and pyvisa-py clients."""

from __future__ import annotations

import socket

import pytest
import pyvisa

from benchlab.sim import SimBench, SimConfig


def open_client(rm: pyvisa.ResourceManager, resource: str, timeout_ms: int = 3000):
    """A pyvisa-py socket session with TCP_NODELAY on its socket (pyvisa-py does not set it)."""
    inst = rm.open_resource(resource, read_termination="\n", write_termination="\n", timeout=timeout_ms)
    rm.visalib.sessions[inst.session].interface.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    return inst


@pytest.fixture
def rm():
    manager = pyvisa.ResourceManager("@py")
    yield manager
    manager.close()


@pytest.fixture
def make_bench():
    """Factory: ``make_bench(**SimConfig kwargs)`` -> a started bench (time_scale 0 unless given)."""
    benches: list[SimBench] = []

    def factory(**kwargs) -> SimBench:
        kwargs.setdefault("time_scale", 0.0)
        bench = SimBench(SimConfig(**kwargs))
        bench.start(first_port=0)
        benches.append(bench)
        return bench

    yield factory
    for bench in benches:
        bench.stop()


@pytest.fixture
def bench(make_bench):
    return make_bench()


@pytest.fixture
def supply(bench, rm):
    inst = open_client(rm, bench.resources["supply"])
    yield inst
    inst.close()


@pytest.fixture
def meter(bench, rm):
    inst = open_client(rm, bench.resources["meter"])
    yield inst
    inst.close()


def error_code(inst) -> int:
    """Pop one error from the instrument's queue and return its code."""
    return int(inst.query("SYST:ERR?").split(",", 1)[0])


def drain_errors(inst) -> list[int]:
    """All codes in the queue, oldest first."""
    codes = []
    while True:
        code = error_code(inst)
        if code == 0:
            return codes
        codes.append(code)
