"""Line-oriented SCPI over TCP on loopback for the simulated instruments.

One threaded server per instrument, a bounded number of connections, and a clean
shutdown that also wakes handlers sleeping in a slow reply. Messages end with
"\\n"; replies end with "\\n" (binary blocks are definite-length, then "\\n").
"""

from __future__ import annotations

import socket
import socketserver
import threading
from dataclasses import dataclass
from typing import Protocol

from probelog.drivers.simbench.scpi import CommandTable, ErrorQueue, ScpiError, split_line

MAX_LINE = 1 << 16
_QUICKACK = getattr(socket, "TCP_QUICKACK", None)  # Linux only


@dataclass
class Reply:
    """One reply. ``fault``: None, "slow" (delay_s before sending), "garbled"
    (already garbled data), "drop" (send part of the data, then close)."""

    data: bytes
    fault: str | None = None
    delay_s: float = 0.0


class Instrument(Protocol):
    def handle_line(self, line: str) -> Reply | None: ...


def run_line(line: str, table: CommandTable, errors: ErrorQueue, lock: threading.Lock) -> Reply | None:
    """Run every command of one SCPI line against ``table`` under
    ``lock``; an ScpiError goes to ``errors``, the queries' answers are joined
    with ';' (IEEE 488.2 response message units) into one Reply, or None."""
    answers: list[Reply] = []
    with lock:
        for header, args in split_line(line):
            try:
                out = table.find(header)(args)
            except ScpiError as err:
                errors.push(err)
                continue
            if isinstance(out, Reply):
                answers.append(out)
            elif isinstance(out, str):
                answers.append(Reply(out.encode("ascii")))
    if not answers:
        return None
    if len(answers) == 1:
        return answers[0]
    return Reply(b";".join(a.data for a in answers), next((a.fault for a in answers if a.fault), None),
                 max(a.delay_s for a in answers))


class _Handler(socketserver.StreamRequestHandler):
    server: "InstrumentServer"

    def setup(self) -> None:
        # replies are small and latency-bound: no Nagle delay behind the client's ACK
        self.request.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
        super().setup()

    def handle(self) -> None:
        srv = self.server
        if not srv.admit(self.request):
            return
        try:
            while not srv.stopping.is_set():
                try:
                    raw = self.rfile.readline(MAX_LINE)
                except OSError:
                    return
                if not raw:
                    return
                if _QUICKACK is not None:
                    # ACK at once: a client with Nagle on waits for it before its next write
                    self.request.setsockopt(socket.IPPROTO_TCP, _QUICKACK, 1)
                line = raw.decode("ascii", errors="replace").strip()
                if not line:
                    continue
                reply = srv.instrument.handle_line(line)
                if reply is None:
                    continue
                if reply.fault == "slow" and srv.stopping.wait(reply.delay_s):
                    return
                if reply.fault == "drop":
                    self.wfile.write(reply.data[: max(1, len(reply.data) // 2)])
                    self.wfile.flush()
                    self.request.shutdown(socket.SHUT_RDWR)
                    return
                self.wfile.write(reply.data + b"\n")
                self.wfile.flush()
        except (BrokenPipeError, ConnectionResetError):
            return
        finally:
            srv.release(self.request)


class InstrumentServer(socketserver.ThreadingTCPServer):
    """Serves one instrument on 127.0.0.1:port (0 = a free port)."""

    daemon_threads = True
    allow_reuse_address = True
    block_on_close = False

    def __init__(self, instrument: Instrument, port: int = 0, max_connections: int = 4) -> None:
        self.instrument = instrument
        self.stopping = threading.Event()
        self._max = max_connections
        self._conns: set[socket.socket] = set()
        self._lock = threading.Lock()
        self._thread: threading.Thread | None = None
        super().__init__(("127.0.0.1", port), _Handler)

    @property
    def port(self) -> int:
        return self.server_address[1]

    def admit(self, sock: socket.socket) -> bool:
        with self._lock:
            if len(self._conns) >= self._max or self.stopping.is_set():
                sock.close()
                return False
            self._conns.add(sock)
            return True

    def release(self, sock: socket.socket) -> None:
        with self._lock:
            self._conns.discard(sock)

    def start(self) -> None:
        self._thread = threading.Thread(target=self.serve_forever, kwargs={"poll_interval": 0.05},
                                        name=f"simbench-{self.port}", daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self.stopping.set()
        if self._thread is not None:
            self.shutdown()  # only valid once serve_forever runs
        with self._lock:
            conns = list(self._conns)
        for sock in conns:
            try:
                sock.shutdown(socket.SHUT_RDWR)
            except OSError:
                pass
        self.server_close()
        if self._thread is not None:
            self._thread.join(timeout=2.0)
