"""The pyvisa transport against a scripted fake server over real TCP (pyvisa-py backend)."""

from __future__ import annotations

import socket

import pytest

from benchlab.errors import ConfigError, ConnectionLost, InstrumentTimeout, SweepCancelled
from benchlab.instruments.transport import RESOURCE_KINDS, VisaTransport, find_socket, resource_kind

from .conftest import SHORT_TIMEOUT_MS, TEST_TIMEOUT_MS


@pytest.mark.parametrize("resource, kind", [
    # Resource-string forms from the VISA specification (IVI VPP-4.3, resource names; section from memory).
    ("TCPIP0::192.168.1.20::5025::SOCKET", "tcpip-socket"),
    ("TCPIP::bench-psu.local::5025::SOCKET", "tcpip-socket"),
    ("TCPIP0::192.168.1.20::inst0::INSTR", "tcpip-instr"),
    ("TCPIP::192.168.1.20::INSTR", "tcpip-instr"),
    ("TCPIP0::192.168.1.20::hislip0::INSTR", "tcpip-hislip"),
    ("USB0::0x1234::0x5678::SN0001::INSTR", "usb"),
    ("USB::0x1234::0x5678::SN0001::0::INSTR", "usb"),
    ("GPIB0::22::INSTR", "gpib"),
    ("GPIB::5", "gpib"),
    ("ASRL/dev/ttyUSB0::INSTR", "serial"),
    ("ASRL3::INSTR", "serial"),
])
def test_resource_kinds_by_table(resource, kind):
    assert resource_kind(resource).name == kind


def test_unknown_resource_kind_is_a_config_error():
    with pytest.raises(ConfigError, match="not a VISA resource string"):
        resource_kind("192.168.1.20:5025")


def test_every_kind_sets_both_terminations():
    # Without read_termination every socket read runs to its timeout (measured, see docs/profiles.md).
    for kind in RESOURCE_KINDS:
        assert kind.open_options["read_termination"] == "\n"
        assert kind.open_options["write_termination"] == "\n"


def test_socket_resource_gets_tcp_nodelay(transport):
    sock = find_socket(transport._handle)
    assert sock is not None
    assert sock.getsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY) != 0


def test_query_and_write(transport, server):
    transport.write("VOLT 1.5")
    assert transport.query("VOLT?") == "1.5"
    assert server.lines() == ["VOLT 1.5", "VOLT?"]


def test_timed_out_query_is_retried_once_after_clear(short_transport, server):
    server.fault("*IDN?", "silent")
    assert short_transport.query("*IDN?") == server.identity
    assert short_transport.retry_count == 1
    assert server.lines() == ["*IDN?", "*IDN?"]


def test_two_timeouts_raise_instrument_timeout(short_transport, server):
    server.fault("MEAS:VOLT?", "silent")
    server.fault("MEAS:VOLT?", "silent")
    server.replies["MEAS:VOLT?"] = "1.0"
    with pytest.raises(InstrumentTimeout, match="no reply to 'MEAS:VOLT\\?'.*asked twice"):
        short_transport.query("MEAS:VOLT?")
    assert server.lines() == ["MEAS:VOLT?", "MEAS:VOLT?"]


def test_late_reply_is_not_taken_for_the_next_answer(short_transport, server):
    server.replies["MEAS:VOLT?"] = "1.0"
    server.replies["MEAS:CURR?"] = "0.002"
    # The first reply arrives after the timeout; clear() must discard it before the retry.
    server.fault("MEAS:VOLT?", "late", seconds=SHORT_TIMEOUT_MS / 1000 * 1.2)
    assert short_transport.query("MEAS:VOLT?") == "1.0"
    assert short_transport.query("MEAS:CURR?") == "0.002"


def test_reply_later_than_the_drain_is_not_taken_for_the_next_answer(short_transport, server):
    server.replies["MEAS:VOLT?"] = "1.0"
    server.replies["MEAS:CURR?"] = "0.002"
    # The first reply comes well after the timeout (a busy instrument), so the retry is sent before
    # it lands. Two replies to MEAS:VOLT? would then be on the way and the second would be read as
    # the drain current; the socket is reopened instead, so the late reply never reaches us.
    server.fault("MEAS:VOLT?", "late", seconds=SHORT_TIMEOUT_MS / 1000 * 2.0)
    assert short_transport.query("MEAS:VOLT?") == "1.0"
    assert short_transport.query("MEAS:CURR?") == "0.002"
    assert short_transport.resync_count == 1 and short_transport.retry_count == 1
    assert server.connections == 2


def test_non_idempotent_query_is_not_repeated(short_transport, server):
    server.fault("INIT;*OPC?", "silent")
    server.replies["INIT;*OPC?"] = "1"
    with pytest.raises(InstrumentTimeout):
        short_transport.query("INIT;*OPC?", idempotent=False)
    assert server.lines() == ["INIT;*OPC?"]


def test_reset_connection_is_reopened_once(transport, server):
    server.fault("*IDN?", "reset")
    assert transport.query("*IDN?") == server.identity
    assert transport.reopen_count == 1
    assert server.connections == 2


def test_cleanly_closed_peer_is_reopened(short_transport, server):
    # pyvisa-py shows a clean close as a timeout; the transport tells them apart.
    server.fault("*IDN?", "close")
    assert short_transport.query("*IDN?") == server.identity
    assert short_transport.reopen_count == 1
    assert short_transport.retry_count == 0


def test_reset_after_a_write_is_noticed_by_the_next_query(transport, server):
    server.fault("VOLT 2", "reset")
    transport.write("VOLT 2")  # the bytes leave before the reset: the write itself cannot tell
    # The next query meets the reset, reopens once and is answered on the new connection.
    assert transport.query("*IDN?") == server.identity
    assert transport.reopen_count == 1
    # The instrument never applied the setting: the role layer re-sends it (see test_roles).
    assert "VOLT" not in server.settings


def test_half_a_reply_then_close_is_reopened_not_misread(short_transport, server):
    server.replies["MEAS:VOLT?"] = "4.56"
    server.fault("MEAS:VOLT?", "partial")
    assert short_transport.query("MEAS:VOLT?") == "4.56"
    assert short_transport.reopen_count == 1


def test_lost_twice_raises_connection_lost(transport, server):
    server.fault("*IDN?", "reset")
    server.fault("*IDN?", "reset")
    with pytest.raises(ConnectionLost, match="lost again after reopening"):
        transport.query("*IDN?")
    assert transport.reopen_count == 1


def test_refused_port_raises_connection_lost(resource_manager):
    probe = socket.socket()
    probe.bind(("127.0.0.1", 0))
    port = probe.getsockname()[1]
    probe.close()  # nothing listens there now: connect is refused at first I/O
    link = VisaTransport(resource_manager, f"TCPIP0::127.0.0.1::{port}::SOCKET", timeout_ms=SHORT_TIMEOUT_MS)
    with pytest.raises(ConnectionLost, match="connection refused") as caught:
        link.open()
        link.query("*IDN?")
    assert f"127.0.0.1::{port}" in str(caught.value)
    link.close()


def test_lost_non_idempotent_query_is_not_repeated(transport, server):
    server.replies["INIT;*OPC?"] = "1"
    server.fault("INIT", "reset")
    with pytest.raises(ConnectionLost, match="not safe to repeat"):
        transport.query("INIT;*OPC?", idempotent=False)
    assert server.lines().count("INIT;*OPC?") == 1
    # The link was reopened, so the caller can go on (e.g. switch the output off).
    assert transport.query("*IDN?") == server.identity
    assert transport.reopen_count == 1


def test_close_sends_nothing(resource_manager, server):
    link = VisaTransport(resource_manager, server.resource, timeout_ms=TEST_TIMEOUT_MS).open()
    link.query("*IDN?")
    link.close()
    link.close()  # twice is harmless
    assert server.lines() == ["*IDN?"]


class _InterruptAfterWrite:
    """Stands in for the pyvisa resource: sends the query, then is interrupted by ``error``."""

    def __init__(self, real, error):
        self._real = real
        self._error = error

    def __getattr__(self, name):
        return getattr(self._real, name)

    def query(self, message):
        self._real.write(message)
        raise self._error


@pytest.mark.parametrize("interruption", [KeyboardInterrupt, SweepCancelled])  # Ctrl-C; a SIGTERM handler's error
def test_reply_of_an_interrupted_query_is_discarded(transport, server, interruption):
    server.replies["MEAS:VOLT?"] = "1.0"
    real = transport._handle
    transport._handle = _InterruptAfterWrite(real, interruption("stop"))
    with pytest.raises(interruption):
        transport.query("MEAS:VOLT?")
    transport._handle = real
    # The late "1.0" must not be taken as the answer to the next query.
    assert transport.query("*IDN?") == server.identity
    assert server.lines() == ["MEAS:VOLT?", "*IDN?"]
