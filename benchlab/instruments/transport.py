"""Message transport over pyvisa: open by VISA resource string, query with one retry, reopen once.

This is the only module (with ``bench.py``) that touches pyvisa. Role classes receive an
object with the small :class:`Transport` interface, so tests can hand them a fake.

Recovery rules (each raises a :mod:`benchlab.errors` class once its one chance is used):

* a query that times out is retried once, after a clear so a late reply cannot be read as the
  answer to the next query (a raw socket is reopened for that: see
  :meth:`VisaTransport._clear_after_timeout`);
  only queries marked idempotent are retried;
* a lost connection (reset, broken pipe, refused port at first I/O, or a cleanly closed peer,
  which pyvisa-py reports as a timeout) is reopened once and the message sent again when that
  is safe; a second loss raises :class:`~benchlab.errors.ConnectionLost`.
"""

from __future__ import annotations

import re
import select
import socket
import threading
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Protocol, runtime_checkable

from benchlab.errors import ConfigError, ConnectionLost, InstrumentTimeout


@runtime_checkable
class Transport(Protocol):
    """What a role class needs from a connection: text in, text out."""

    resource: str

    def write(self, command: str, *, idempotent: bool = True) -> None: ...
    def query(self, command: str, *, idempotent: bool = True, timeout_ms: int | None = None) -> str: ...
    def close(self) -> None: ...


def _session_of(resource: Any) -> Any:
    sessions = getattr(getattr(resource, "visalib", None), "sessions", None)
    if not isinstance(sessions, Mapping):
        return None
    return sessions.get(getattr(resource, "session", None))


def find_socket(resource: Any) -> socket.socket | None:
    """Return the TCP socket behind an open pyvisa-py resource, or ``None`` when there is none.

    pyvisa-py keeps its sessions in ``visalib.sessions``; a SOCKET session's ``interface`` is the
    socket itself, a VXI-11 (INSTR) client keeps it as ``interface.sock``. Other backends
    (a system VISA library) expose no socket, and ``None`` is returned.
    """
    interface = getattr(_session_of(resource), "interface", None)
    for candidate in (interface, getattr(interface, "sock", None)):
        if isinstance(candidate, socket.socket):
            return candidate
    return None


def set_tcp_nodelay(resource: Any) -> None:
    """Switch off Nagle's algorithm on the socket behind a resource (pyvisa-py never does).

    Without it a write followed by a query waits for the delayed ACK (tens of ms per pair).
    """
    sock = find_socket(resource)
    if sock is not None:
        sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)


@dataclass(frozen=True)
class ResourceKind:
    """One family of VISA resource strings and how to open it."""

    name: str
    pattern: re.Pattern[str]
    open_options: Mapping[str, Any] = field(default_factory=dict)
    after_open: Callable[[Any], None] | None = None


# A late reply is taken as finished once the line has been quiet this long (pyvisa-py uses the same).
_CLEAR_QUIET_S = 0.1
_LINE_ENDINGS = {"read_termination": "\n", "write_termination": "\n"}

# Checked in order; the first pattern that matches wins (VISA resource-string grammar, VPP-4.3).
RESOURCE_KINDS: tuple[ResourceKind, ...] = (
    ResourceKind("tcpip-socket", re.compile(r"^TCPIP\d*::[^:]+::\d+::SOCKET$", re.I), _LINE_ENDINGS, set_tcp_nodelay),
    ResourceKind("tcpip-hislip", re.compile(r"^TCPIP\d*::[^:]+::hislip\d+(::INSTR)?$", re.I), _LINE_ENDINGS),
    ResourceKind("tcpip-instr", re.compile(r"^TCPIP\d*::[^:]+(::[^:]+)?(::INSTR)?$", re.I), _LINE_ENDINGS),
    ResourceKind("usb", re.compile(r"^USB\d*::[^:]+::[^:]+::[^:]+(::\d+)?(::INSTR)?$", re.I), _LINE_ENDINGS),
    ResourceKind("gpib", re.compile(r"^GPIB\d*::\d+(::\d+)?(::INSTR)?$", re.I), _LINE_ENDINGS),
    ResourceKind("serial", re.compile(r"^ASRL[^:]+(::INSTR)?$", re.I), _LINE_ENDINGS),
)


def resource_kind(resource: str) -> ResourceKind:
    """Return the :class:`ResourceKind` of a VISA resource string.

    Raises
    ------
    ConfigError
        When the string matches no supported kind.
    """
    for kind in RESOURCE_KINDS:
        if kind.pattern.match(resource.strip()):
            return kind
    kinds = ", ".join(kind.name for kind in RESOURCE_KINDS)
    raise ConfigError(f"'{resource}' is not a VISA resource string benchlab can open ({kinds})", key="resource")


def _one_line(exc: BaseException) -> str:
    # Library messages may span lines; benchlab errors are printed on one.
    return " ".join(str(exc).split()) or type(exc).__name__


def _is_timeout(exc: BaseException) -> bool:
    # Duck-typed so this module needs pyvisa only where a resource manager is made.
    code = getattr(exc, "error_code", None)
    return code is not None and getattr(code, "name", str(code)) == "error_timeout"


def _is_visa_error(exc: BaseException) -> bool:
    return type(exc).__name__ in ("VisaIOError", "InvalidSession") or hasattr(exc, "error_code")


class VisaTransport:
    """A pyvisa resource with benchlab's retry and reconnect rules.

    Parameters
    ----------
    resource_manager : pyvisa.ResourceManager
        Injected; one per bench (``pyvisa.ResourceManager("@py")`` by default, see ``bench.py``).
    resource : str
        VISA resource string, e.g. ``"TCPIP0::127.0.0.1::5025::SOCKET"``.
    timeout_ms : int
        Time allowed for each reply.
    options : mapping, optional
        Extra ``open_resource`` keyword arguments (a profile's ``[connection]`` table); they
        override the defaults of the resource kind.
    """

    def __init__(self, resource_manager: Any, resource: str, *, timeout_ms: int = 2000,
                 options: Mapping[str, Any] | None = None):
        self.resource = resource.strip()
        self.kind = resource_kind(self.resource)
        self.timeout_ms = int(timeout_ms)
        self._manager = resource_manager
        self._options = {**self.kind.open_options, **dict(options or {})}
        self._handle: Any = None
        self._lock = threading.RLock()
        self._interrupted = False
        self.reopen_count = 0  # how many times the connection was reopened (for reports and tests)
        self.retry_count = 0  # how many timed-out queries were sent again
        self.resync_count = 0  # how many times a socket was reopened to drop a possible late reply

    # -- life cycle -------------------------------------------------------------------------
    def open(self) -> "VisaTransport":
        """Open the resource (no message is sent). Returns ``self``."""
        with self._lock:
            if self._handle is None:
                self._handle = self._open_handle()
        return self

    def _open_handle(self) -> Any:
        try:
            handle = self._manager.open_resource(self.resource, timeout=self.timeout_ms, **self._options)
        except Exception as exc:  # pyvisa-py raises bare Exception("could not connect") here
            raise ConnectionLost(f"cannot open: {_one_line(exc)}", resource=self.resource) from exc
        try:
            if self.kind.after_open is not None:
                self.kind.after_open(handle)
        except OSError as exc:
            handle.close()
            raise ConnectionLost(f"cannot set up the connection: {exc}", resource=self.resource) from exc
        return handle

    def close(self) -> None:
        """Close the resource. Sends nothing (outputs are left as they are)."""
        with self._lock:
            handle, self._handle = self._handle, None
            if handle is not None:
                try:
                    handle.close()
                except Exception:  # closing a dead link must not hide the error that killed it
                    pass

    def __enter__(self) -> "VisaTransport":
        return self.open()

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    def _reopen(self) -> None:
        self.close()
        self.reopen_count += 1
        self._handle = self._open_handle()

    # -- I/O -------------------------------------------------------------------------------
    def write(self, command: str, *, idempotent: bool = True) -> None:
        """Send one message.

        Parameters
        ----------
        command : str
            The SCPI text (the termination is added by the resource).
        idempotent : bool
            Whether sending it twice is harmless (a setting); after a lost connection only
            idempotent messages are sent again, others raise :class:`ConnectionLost`.
        """
        with self._lock:
            self._run(lambda handle: handle.write(command), command, idempotent, allow_retry=False)

    def query(self, command: str, *, idempotent: bool = True, timeout_ms: int | None = None) -> str:
        """Send a query and return its reply (termination stripped).

        Parameters
        ----------
        command : str
            The SCPI query.
        idempotent : bool
            Whether asking twice is harmless; only then is a timed-out query retried.
        timeout_ms : int, optional
            A longer wait for this query only (e.g. ``*OPC?`` after a list sweep).

        Raises
        ------
        InstrumentTimeout
            No reply after the one retry.
        ConnectionLost
            The link dropped again after being reopened once.
        """
        with self._lock:
            return self._run(lambda handle: self._timed_query(handle, command, timeout_ms), command,
                             idempotent, allow_retry=idempotent, timeout_ms=timeout_ms)

    def _timed_query(self, handle: Any, command: str, timeout_ms: int | None) -> str:
        if timeout_ms is None:
            return handle.query(command)
        handle.timeout = int(timeout_ms)
        try:
            return handle.query(command)
        finally:
            handle.timeout = self.timeout_ms

    def _run(self, action: Callable[[Any], Any], command: str, idempotent: bool, allow_retry: bool,
             timeout_ms: int | None = None) -> Any:
        if self._handle is None:
            self.open()
        if self._interrupted:
            # An exchange was cut short: its reply may still arrive and would be read as the
            # answer to this message, so discard it first.
            self._interrupted = False
            if not self._peer_closed():
                self._clear()
        reopened = retried = False
        while True:
            try:
                return action(self._handle)
            except BaseException as exc:
                timed_out = isinstance(exc, Exception) and _is_timeout(exc)
                if not (timed_out or isinstance(exc, OSError) or (isinstance(exc, Exception) and _is_visa_error(exc))):
                    # Cut short by something else (Ctrl-C, a signal handler's exception): the
                    # exchange's reply may still come, so the next message clears it first.
                    self._interrupted = True
                    raise
                lost = not timed_out or self._peer_closed()
                if not lost:
                    self._clear_after_timeout()
                    if allow_retry and not retried:
                        retried = True
                        self.retry_count += 1
                        continue
                    raise InstrumentTimeout(
                        f"no reply to '{command}' within {timeout_ms or self.timeout_ms} ms"
                        + (" (asked twice)" if retried else ""), resource=self.resource) from exc
                if reopened:
                    if isinstance(exc, ConnectionRefusedError):
                        raise ConnectionLost(f"connection refused at '{command}': nothing answers at that "
                                             f"address and port (is the instrument on and its LAN port enabled?)",
                                             resource=self.resource) from exc
                    raise ConnectionLost(f"connection lost again after reopening, at '{command}': {_one_line(exc)}",
                                         resource=self.resource) from exc
                reopened = True
                self._reopen()
                if not idempotent:
                    raise ConnectionLost(
                        f"connection lost at '{command}'; reopened, but that message is not safe to repeat",
                        resource=self.resource) from exc

    def _peer_closed(self) -> bool:
        """True when the peer has closed the socket (a clean close looks like a timeout in pyvisa-py)."""
        sock = find_socket(self._handle)
        if sock is None:
            return False
        try:
            data = sock.recv(1, socket.MSG_PEEK | socket.MSG_DONTWAIT)
        except BlockingIOError:
            return False
        except OSError:
            return True
        return data == b""

    def _clear_after_timeout(self) -> None:
        """Discard the reply of a query that timed out, wherever it is.

        A raw socket has no device clear, and a reply may come any time after its timeout (a busy or
        slow instrument), so no quiet period proves it will not: the socket is closed and a new one
        opened, and the late reply dies with the old connection. Other resources get a device clear,
        which empties the instrument's output queue (IEEE 488.2).
        """
        if self.kind.name != "tcpip-socket":
            self._clear()
            return
        self.close()
        self.resync_count += 1
        self._handle = self._open_handle()

    def _clear(self) -> None:
        """Discard any late reply (device clear).

        On a raw socket the socket is drained here instead of through pyvisa-py's ``clear()``,
        which loops forever once the peer has closed after sending part of a reply. Used after an
        exchange cut short by Ctrl-C or a signal: the connection is kept, so the commands that follow
        (switching the output off) reach the instrument after everything sent before, in order.
        """
        sock = find_socket(self._handle)
        if sock is None:
            try:
                self._handle.clear()
            except Exception:  # a failed clear leaves the next exchange to find the problem
                pass
            return
        pending = getattr(_session_of(self._handle), "_pending_buffer", None)
        if isinstance(pending, bytearray):
            pending.clear()
        while True:
            ready, _, _ = select.select([sock], [], [], _CLEAR_QUIET_S)
            if not ready:
                return
            try:
                if not sock.recv(65536):
                    return  # the peer closed; the next exchange will reopen
            except OSError:
                return
