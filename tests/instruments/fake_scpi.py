"""A small scripted SCPI server over TCP for the instrument-layer tests.

It is not the simulator: it keeps settings as plain key/value pairs (``VOLT 1.5`` then
``VOLT?`` -> ``1.5``), answers fixed replies, logs every line it receives, and can be told to
misbehave once (stay silent, answer late, reset or cleanly close the connection) so the
transport's recovery can be tested against real sockets through pyvisa-py.
"""

from __future__ import annotations

import socket
import struct
import threading
import time
from collections import deque
from typing import Callable

Reply = str | Callable[[str], str]


class FakeScpiServer:
    """Listen on 127.0.0.1 (port 0 = a free port) and answer like a scripted instrument.

    Parameters
    ----------
    identity : str
        Reply to ``*IDN?``.
    replies : dict
        Query text (upper case, as sent) -> reply text or ``callable(query) -> reply``.
    rejects : dict
        Command text prefix (upper case) -> (code, text) pushed on the error queue when a
        command starting with it arrives (a list pushes several).
    """

    def __init__(self, identity: str = "BENCHLAB-SIM,FAKE-1,0001,1.0", replies: dict[str, Reply] | None = None,
                 rejects: dict[str, tuple[int, str] | list[tuple[int, str]]] | None = None):
        self.identity = identity
        self.replies: dict[str, Reply] = dict(replies or {})
        self.rejects = dict(rejects or {})
        self.settings: dict[str, str] = {}
        self.errors: deque[tuple[int, str]] = deque()
        self.log: list[str] = []
        self.faults: deque[tuple[str, str, float]] = deque()  # (line prefix, action, seconds)
        self.connections = 0
        self._listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self._listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._listener.bind(("127.0.0.1", 0))
        self._listener.listen(8)
        self._listener.settimeout(0.05)
        self.port = self._listener.getsockname()[1]
        self._stop = threading.Event()
        self._threads: list[threading.Thread] = []
        self._lock = threading.Lock()

    @property
    def resource(self) -> str:
        """The VISA resource string of this server."""
        return f"TCPIP0::127.0.0.1::{self.port}::SOCKET"

    def fault(self, prefix: str, action: str, seconds: float = 0.0) -> None:
        """Misbehave once at the next line starting with ``prefix``.

        ``action``: ``"silent"`` (no reply), ``"late"`` (reply after ``seconds``), ``"reset"``
        (abort the connection with RST), ``"close"`` (close it cleanly), ``"partial"`` (send part
        of a reply, then close).
        """
        self.faults.append((prefix.upper(), action, seconds))

    def lines(self, *, without_error_queries: bool = False) -> list[str]:
        """Lines received so far (optionally without the ``SYST:ERR?`` reads)."""
        with self._lock:
            lines = list(self.log)
        if without_error_queries:
            lines = [line for line in lines if line.upper() != "SYST:ERR?"]
        return lines

    def clear_log(self) -> None:
        with self._lock:
            self.log.clear()

    # -- server -----------------------------------------------------------------------------
    def start(self) -> "FakeScpiServer":
        thread = threading.Thread(target=self._accept_loop, daemon=True)
        thread.start()
        self._threads.append(thread)
        return self

    def stop(self) -> None:
        self._stop.set()
        try:
            self._listener.close()
        except OSError:
            pass

    def __enter__(self) -> "FakeScpiServer":
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def _accept_loop(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._listener.accept()
            except (TimeoutError, socket.timeout):
                continue
            except OSError:
                return
            conn.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            self.connections += 1
            thread = threading.Thread(target=self._serve, args=(conn,), daemon=True)
            thread.start()
            self._threads.append(thread)

    def _serve(self, conn: socket.socket) -> None:
        buffer = b""
        conn.settimeout(0.05)
        with conn:
            while not self._stop.is_set():
                try:
                    chunk = conn.recv(65536)
                except (TimeoutError, socket.timeout):
                    continue
                except OSError:
                    return
                if not chunk:
                    return
                buffer += chunk
                while b"\n" in buffer:
                    raw, buffer = buffer.split(b"\n", 1)
                    line = raw.decode().strip()
                    if not line:
                        continue
                    with self._lock:
                        self.log.append(line)
                    if not self._answer(conn, line):
                        return

    def _answer(self, conn: socket.socket, line: str) -> bool:
        action, seconds = None, 0.0
        if self.faults and line.upper().startswith(self.faults[0][0]):
            _, action, seconds = self.faults.popleft()
        if action == "reset":
            # SO_LINGER with 0 s makes close() send RST: the client sees ConnectionResetError.
            conn.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER, struct.pack("ii", 1, 0))
            conn.close()
            return False
        if action == "partial":
            # Half a reply, no terminator, then a clean close.
            conn.sendall(b"1.23")
            conn.shutdown(socket.SHUT_RDWR)
            conn.close()
            return False
        if action == "close":
            conn.shutdown(socket.SHUT_RDWR)
            conn.close()
            return False
        reply = self._reply_to(line)
        if reply is None or action == "silent":
            return True
        if action == "late":
            time.sleep(seconds)
        try:
            conn.sendall(reply.encode() + b"\n")
        except OSError:
            return False
        return True

    def _reply_to(self, line: str) -> str | None:
        if ";" in line and '"' not in line:  # a compound message: each unit in turn, query replies joined by ';'
            replies = [self._reply_to(unit.strip().lstrip(":")) for unit in line.split(";")]
            answered = [r for r in replies if r is not None]
            return ";".join(answered) if answered else None
        upper = line.upper()
        for prefix, error in self.rejects.items():
            if upper.startswith(prefix):
                self.errors.extend(error if isinstance(error, list) else [error])
                return None
        if upper == "*IDN?":
            return self.identity
        if upper.lstrip(":") in ("SYST:ERR?", "SYSTEM:ERROR?", "SYST:ERR:NEXT?", "SYSTEM:ERROR:NEXT?"):
            if self.errors:
                code, text = self.errors.popleft()
                return f'{code},"{text}"'
            return '+0,"No error"'
        if upper == "*OPC?":
            return "1"
        if upper in self.replies:
            reply = self.replies[upper]
            return reply(line) if callable(reply) else reply
        if upper.endswith("?"):
            key = upper[:-1]
            if key in self.settings:
                return self.settings[key]
            self.errors.append((-113, "Undefined header"))
            return None
        if upper.startswith("*"):
            return None
        header, _, value = line.partition(" ")
        self.settings[header.upper()] = value.strip()
        return None
