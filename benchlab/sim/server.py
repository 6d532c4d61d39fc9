"""Raw-socket SCPI server of one simulated instrument (one thread per connection).

Messages are lines ending in ``\\n`` (a trailing ``\\r`` is dropped). Each accepted socket gets
TCP_NODELAY so a query's reply is not held back by Nagle's algorithm. Bad input never stops
the server: a line that is not UTF-8 or holds control characters is a -101 error, a line
longer than :data:`MAX_LINE_BYTES` is a -223 error (and is skipped up to its end), and a
client that disconnects mid-line only loses that line.

Bounds (so one client cannot exhaust the simulator): at most :data:`MAX_CONNECTIONS` open
connections per instrument (a further one is accepted and closed at once, and logged); a listen
backlog of :data:`LISTEN_BACKLOG`; at most :data:`~benchlab.sim.instrument.MAX_UNITS_PER_MESSAGE`
commands per line. Two IEEE 488.2 query errors are produced where a socket makes them visible:
-410 (query interrupted) when a new message arrives while the reply to a query is still held back
(a ``slow`` fault), the reply then being discarded; -420 (query unterminated) when a query sits
without its line end for :attr:`InstrumentServer.unterminated_s` (a controller waiting for the
reply to a message it never ended), the partial message then being discarded.
"""

from __future__ import annotations

import select
import socket
import threading
import time

from benchlab.sim.faults import DEFAULT_INJECTED_ERROR, FLAKY_SLOW_S, RoleFaults, garble
from benchlab.sim.instrument import SimInstrument

MAX_LINE_BYTES = 256 * 1024
MAX_CONNECTIONS = 16
LISTEN_BACKLOG = 128
UNTERMINATED_S = 2.0
_POLL_S = 0.2
_LOGGED_TEXT_CHARS = 4000


class InstrumentServer:
    """Serve one :class:`SimInstrument` on a TCP port.

    Parameters
    ----------
    instrument : SimInstrument
        What executes the messages.
    faults : RoleFaults
        Transport-level faults of this instrument (slow, mute, hang, drop, garble).
    latency_s : float
        Real delay before every reply, standing in for a LAN round trip: a query costs one round trip, a
        message without a query (a setting) costs none, as on a LAN where the host writes and goes on.
    """

    def __init__(self, instrument: SimInstrument, faults: RoleFaults, latency_s: float = 0.0):
        self.instrument = instrument
        self.faults = faults
        self.latency_s = latency_s
        self.port = 0
        self.host = ""
        self._listener: socket.socket | None = None
        self._stopping = threading.Event()
        self._threads: list[threading.Thread] = []
        self._connections: set[socket.socket] = set()
        self._lock = threading.Lock()
        self.unterminated_s = UNTERMINATED_S
        self.refused_connections = 0

    @property
    def role(self) -> str:
        """Role of the served instrument (``supply``, ``meter``, ``smu``)."""
        return self.instrument.ROLE

    def start(self, host: str, port: int) -> int:
        """Bind and start accepting; returns the port actually bound (``port`` 0 picks a free one)."""
        self._stopping.clear()  # a stopped server may be started again
        listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            listener.bind((host, port))
        except OSError:
            listener.close()
            raise
        listener.listen(LISTEN_BACKLOG)
        listener.settimeout(_POLL_S)
        self._listener = listener
        self.host, self.port = host, listener.getsockname()[1]
        self._spawn(self._accept_loop, f"sim-{self.role}-accept")
        return self.port

    def _spawn(self, target, name: str, *args) -> None:
        thread = threading.Thread(target=target, args=args, name=name, daemon=True)
        with self._lock:
            self._threads = [t for t in self._threads if t.is_alive()]
            self._threads.append(thread)
        thread.start()

    def _accept_loop(self) -> None:
        assert self._listener is not None
        while not self._stopping.is_set():
            try:
                conn, peer = self._listener.accept()
            except socket.timeout:
                continue
            except OSError:
                break
            with self._lock:
                full = len(self._connections) >= MAX_CONNECTIONS
                if not full:
                    self._connections.add(conn)
            if full:
                self.refused_connections += 1
                self._log("connection", f"refused {peer[0]}:{peer[1]}: {MAX_CONNECTIONS} connections already open")
                try:
                    conn.close()
                except OSError:
                    pass
                continue
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            conn.settimeout(_POLL_S)
            self._log("connection", f"open {peer[0]}:{peer[1]}")
            self._spawn(self._serve, f"sim-{self.role}-conn", conn)

    def _log(self, kind: str, text: str) -> None:
        core = self.instrument.core
        core.log.add(self.role, kind, text, core.now())

    def _serve(self, conn: socket.socket) -> None:
        buffer = b""
        skipping = False  # inside an over-long line, dropping bytes up to its newline
        partial_since: float | None = None  # when the unterminated text in the buffer started waiting
        try:
            while not self._stopping.is_set():
                try:
                    chunk = conn.recv(65536)
                except socket.timeout:
                    if (partial_since is not None and not skipping and b"?" in buffer
                            and time.monotonic() - partial_since > self.unterminated_s):
                        self._query_error(-420, "Query UNTERMINATED; a query waited "
                                          f"{self.unterminated_s:g} s for its line end", "unterminated query")
                        buffer, partial_since = b"", None
                    continue
                except OSError:
                    break
                if not chunk:
                    break  # peer closed; a partial line is discarded
                buffer += chunk
                while b"\n" in buffer:
                    line, buffer = buffer.split(b"\n", 1)
                    if skipping:
                        skipping = False
                        continue
                    if len(line) > MAX_LINE_BYTES:
                        self._too_long()
                        continue
                    if not self._handle_line(conn, line, pending=lambda: b"\n" in buffer):
                        return
                partial_since = (partial_since or time.monotonic()) if buffer else None
                if len(buffer) > MAX_LINE_BYTES:
                    buffer = b""
                    if not skipping:
                        skipping = True
                        self._too_long()
        finally:
            self._close(conn)

    def _too_long(self) -> None:
        with self.instrument.lock:
            self.instrument.status.push(-223, f"Too much data; line longer than {MAX_LINE_BYTES} bytes")
        self._log("input", "over-long line skipped")

    def _query_error(self, code: int, text: str, note: str) -> None:
        with self.instrument.lock:
            self.instrument.status.push(code, text)
        self._log("input", f"{note}: {code} queued")

    @staticmethod
    def _input_waiting(conn: socket.socket, seconds: float) -> str:
        """Wait up to ``seconds`` for the client: ``"data"`` (it sent more), ``"closed"`` or ``""`` (quiet)."""
        deadline = time.monotonic() + seconds
        while (left := deadline - time.monotonic()) > 0:
            try:
                readable, _, _ = select.select([conn], [], [], left)
                if not readable:
                    return ""
                return "data" if conn.recv(1, socket.MSG_PEEK) else "closed"
            except socket.timeout:
                continue
            except (OSError, ValueError):
                return "closed"
        return ""

    def _close(self, conn: socket.socket) -> None:
        with self._lock:
            self._connections.discard(conn)
        try:
            conn.close()
        except OSError:
            pass

    def _handle_line(self, conn: socket.socket, raw: bytes, pending=lambda: False) -> bool:
        """Execute one line and send its reply; False when the connection must close.

        ``pending()`` tells whether another complete line is already waiting behind this one.
        """
        if raw.endswith(b"\r"):
            raw = raw[:-1]
        if not raw.strip():
            return True
        text = raw.decode("utf-8", errors="replace")
        with self.instrument.lock:
            number = self.faults.note_message()
            self._log("command", text[:_LOGGED_TEXT_CHARS])
        if self.faults.hung(number):
            self._log("fault", f"hang: message {number} ignored")
            return True
        flaky = self.faults.flaky_pick()
        if flaky:
            self._log("fault", f"flaky {flaky}: message {number}")
        if flaky == "error":
            self._query_error(DEFAULT_INJECTED_ERROR, "Hardware error; injected fault (flaky)",
                              f"message {number} refused")
            return True
        replies = self.instrument.execute(text)
        if self.faults.drop_now(number) or flaky == "drop":
            self._log("fault", f"drop: connection closed after message {number}")
            try:
                conn.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass
            return False
        if not replies:
            return True  # a setting alone: the host wrote it and went on, no round trip to wait for
        if self.latency_s > 0:
            time.sleep(self.latency_s)
        if self.faults.muted(number) or flaky == "mute":
            self._log("fault", f"mute: reply to message {number} withheld")
            return True
        reply = ";".join(replies)
        if self.faults.garble_next_reply() or flaky == "garble":
            self._log("fault", f"garble: reply to message {number} garbled")
            reply = garble(reply)
        delay = self.faults.extra_delay_s(number) + (FLAKY_SLOW_S if flaky == "slow" else 0.0)
        if delay > 0:
            waiting = "data" if pending() else self._input_waiting(conn, delay)
            if waiting == "data":
                # IEEE 488.2 6.3.2.3: a new message before the reply was read interrupts the query
                self._query_error(-410, "Query INTERRUPTED; a new message came before the reply was sent",
                                  f"reply to message {number} discarded")
                return True
            if waiting == "closed":
                return False
        try:
            conn.sendall(reply.encode("ascii", errors="replace") + b"\n")
        except OSError:
            return False
        return True

    def stop(self, join_timeout_s: float = 2.0) -> None:
        """Stop accepting, close every connection and wait for the threads."""
        self._stopping.set()
        if self._listener is not None:
            try:
                self._listener.shutdown(socket.SHUT_RDWR)  # wakes a blocked accept() on Linux
            except OSError:
                pass
            try:
                self._listener.close()
            except OSError:
                pass
        with self._lock:
            connections = list(self._connections)
            threads = list(self._threads)
        for conn in connections:
            try:
                conn.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass
        deadline = time.monotonic() + join_timeout_s
        for thread in threads:
            if thread is not threading.current_thread():
                thread.join(max(0.0, deadline - time.monotonic()))
