"""Over real TCP: each simulated instrument has its own lock, the server bounds connections and the
work one line may queue, the listen backlog takes a burst of connections, the IEEE 488.2 query
errors -410/-420 are produced where a socket shows them, and the ``unsettled`` fault makes readings
that never settle. Error codes: IEEE 488.2-1992 6.3.2 and SCPI-1999 vol. 2, ch. 21."""

from __future__ import annotations

import socket
import threading
import time

import pytest

from benchlab.sim.instrument import MAX_UNITS_PER_MESSAGE
from benchlab.sim.server import MAX_CONNECTIONS
from benchlab.sweep.engine import run
from tests.sim.test_faults_and_robustness import _ask, _raw
from tests.sweep.simhelp import plan_for, sim_bench


def _line(sock: socket.socket) -> str:
    data = b""
    while not data.endswith(b"\n"):
        chunk = sock.recv(65536)
        if not chunk:
            raise ConnectionError("closed")
        data += chunk
    return data.decode().strip()


def test_a_busy_meter_does_not_hold_up_the_supply(make_bench):
    # 100 PLC at real time: each READ? integrates for 2 s while holding the meter
    bench = make_bench(time_scale=1.0)
    meter, supply = _raw(bench.resources["meter"]), _raw(bench.resources["supply"])
    assert _ask(supply, "OUTP ON;*OPC?") == "1"
    meter.sendall(b"VOLT:DC:NPLC 100;:READ?\n")
    time.sleep(0.2)  # the meter is now integrating
    started = time.monotonic()
    assert _ask(supply, "OUTP OFF;OUTP?") == "0"
    took = time.monotonic() - started
    # with one lock shared by the bench, OUTP OFF waited for the end of the 2 s integration
    assert took < 0.5, took
    float(_line(meter))  # the reading still arrives
    assert bench.log.last_output_state("supply") is False
    meter.close()
    supply.close()


def test_connections_beyond_the_bound_are_closed_and_the_rest_keep_working(bench):
    resource = bench.resources["supply"]
    kept = [_raw(resource) for _ in range(MAX_CONNECTIONS)]
    for sock in kept:
        assert _ask(sock, "*IDN?").startswith("BENCHLAB-SIM")
    extra = _raw(resource)
    extra.settimeout(3)
    assert extra.recv(100) == b""  # accepted and closed at once
    assert any("refused" in e.text for e in bench.log.entries("supply", "connection"))
    kept.pop().close()
    time.sleep(0.5)  # the server notices the close within its poll interval
    again = _raw(resource)
    assert _ask(again, "*IDN?").startswith("BENCHLAB-SIM")
    for sock in kept + [again, extra]:
        sock.close()


def test_a_burst_of_connections_is_accepted_without_syn_retries(bench):
    # a backlog of 8 left most of 200 simultaneous connects waiting for the kernel's SYN retry (1 s, 3 s...)
    port = int(bench.resources["meter"].split("::")[2])
    opened, errors = [], []

    def connect() -> None:
        try:
            opened.append(socket.create_connection(("127.0.0.1", port), timeout=10))
        except OSError as exc:
            errors.append(exc)

    threads = [threading.Thread(target=connect) for _ in range(120)]
    started = time.monotonic()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    took = time.monotonic() - started
    for sock in opened:
        sock.close()
    assert not errors and len(opened) == 120
    assert took < 0.9, took  # below the first SYN retry (1 s on Linux, RFC 6298 initial RTO)


def test_the_work_one_line_may_queue_is_bounded(bench):
    sock = _raw(bench.resources["meter"])
    at_bound = ";".join(["*OPC?"] * MAX_UNITS_PER_MESSAGE)
    assert _ask(sock, at_bound) == ";".join(["1"] * MAX_UNITS_PER_MESSAGE)
    sock.sendall((";".join(["READ?"] * (MAX_UNITS_PER_MESSAGE + 1)) + "\n").encode())
    assert _ask(sock, "SYST:ERR?").startswith("-223")  # too much data: nothing of it ran
    assert bench.core.readings_taken == 0
    sock.close()


def test_a_new_message_before_a_held_reply_is_query_interrupted(make_bench):
    bench = make_bench(faults=("slow@supply=0.5",))
    sock = _raw(bench.resources["supply"])
    sock.sendall(b"VOLT?\n")
    sock.sendall(b"SYST:ERR?\n")  # before the reply to VOLT? came
    reply = _line(sock)  # the only reply: VOLT?'s was discarded
    assert reply.startswith("-410,"), reply  # IEEE 488.2 6.3.2.3 query INTERRUPTED
    sock.close()


def test_a_query_without_its_line_end_is_query_unterminated(bench):
    bench._servers["supply"].unterminated_s = 0.3
    sock = _raw(bench.resources["supply"])
    sock.sendall(b"VOLT 3")  # a setting without its line end is left alone
    time.sleep(0.7)
    sock.sendall(b"\nVOLT?")  # ... but a query waiting for its line end is not
    time.sleep(0.9)
    assert _ask(sock, "\nSYST:ERR?").startswith("-420,")  # IEEE 488.2 6.3.2.2 query UNTERMINATED
    assert float(_ask(sock, "VOLT?")) == 3.0
    assert _ask(sock, "SYST:ERR?").startswith("0,")
    sock.close()


def test_unsettled_fault_makes_readings_swing(make_bench):
    bench = make_bench(faults=("unsettled@meter=0.05/1",))
    sock = _raw(bench.resources["meter"])
    readings = [float(_ask(sock, "READ?")) for _ in range(5)]
    steps = [abs(b - a) for a, b in zip(readings[1:], readings[2:])]
    assert all(abs(s - 0.05) < 1e-3 for s in steps), readings  # +/-25 mV about the true value
    sock.close()


@pytest.mark.parametrize("fixture", ["resistor", "smu"])
def test_unsettled_readings_over_tcp_give_the_unstable_verdict(fixture):
    # the repeated reading disagrees at every point: the engine marks each point unsettled and the part unstable
    with sim_bench(fixture, faults=("unsettled=0.05",)) as (sim, handle):
        outcome = run(plan_for(handle), handle.bench)
        assert sim.log.last_output_state("supply" if fixture == "resistor" else "smu") is False
    assert outcome.classification == "unstable", outcome.reason
    assert sum(p.status == "unsettled" for p in outcome.points) >= 2
