"""The byte level of a VISA link: pyvisa and OS errors translated into
:mod:`probelog.drivers.errors` exceptions, and replies read by exact byte count.

Binary blocks are read by count, never by terminator (an LF read termination
would stop at every 0x0A byte inside binary data). For pyvisa-py SOCKET sessions
the payload is read straight from the session's socket with ``recv_into``: a
peer that closes mid-block shows up at once as :class:`ConnectionLost` (pyvisa-py's
own loop spins until the full timeout, then raises a plain OSError; verified on
pyvisa-py 0.8.1). Other sessions go through the VISA library's read loop.
:class:`RawLink` holds that machinery; :class:`probelog.drivers.visa.Link` builds
SCPI text and blocks on it.
"""

from __future__ import annotations

import errno
import socket
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Iterator

from pyvisa import constants
from pyvisa.errors import VisaIOError
from pyvisa.resources import MessageBasedResource

from probelog.drivers.errors import (
    ConnectionLost,
    InstrumentTimeout,
    InstrumentUnreachable,
    ShortBlock,
    TransportError,
)

__all__ = ["LinkSettings", "RawLink", "translate_os_error", "translate_visa_error"]


@dataclass(frozen=True)
class LinkSettings:
    """How to open a resource: terminations as Python strings, timeout in ms."""

    read_termination: str = "\n"
    write_termination: str = "\n"
    timeout_ms: int = 10000


def translate_os_error(exc: OSError, what: str, resource: str) -> TransportError:
    name = type(exc).__name__
    code = getattr(exc, "errno", None)
    if isinstance(exc, ConnectionRefusedError) or code in (
        errno.ECONNREFUSED,
        errno.EHOSTUNREACH,
        errno.ENETUNREACH,
    ):
        return InstrumentUnreachable(
            f"{resource}: nothing answers there ({what}; OSError {name}: {exc}). "
            "Is the instrument on, the address and port right, remote control enabled?",
            resource=resource,
            cause="OSError",
        )
    if isinstance(exc, TimeoutError):
        return InstrumentTimeout(
            f"{resource}: timed out {what} (OSError {name})", resource=resource, cause="OSError"
        )
    return ConnectionLost(
        f"{resource}: the connection dropped {what} (OSError {name}: {exc}); reopen it",
        resource=resource,
        cause="OSError",
    )


def translate_visa_error(exc: VisaIOError, what: str, resource: str, timeout_ms: int) -> TransportError:
    code = exc.error_code
    label = f"VisaIOError {exc.abbreviation}"
    if code == constants.StatusCode.error_timeout:
        return InstrumentTimeout(
            f"{resource}: no reply within {timeout_ms} ms {what} ({label})",
            resource=resource,
            cause="VisaIOError",
        )
    if code == constants.StatusCode.error_resource_not_found:
        return InstrumentUnreachable(
            f"{resource}: resource not found {what} ({label})", resource=resource, cause="VisaIOError"
        )
    return ConnectionLost(
        f"{resource}: I/O failed {what} ({label}: {exc.description}); reopen it",
        resource=resource,
        cause="VisaIOError",
    )


class RawLink:
    """One VISA resource (``resource`` string, pyvisa ``backend``) read by exact
    byte counts. Every method raises only :mod:`probelog.drivers.errors`
    exceptions for I/O failures."""

    def __init__(self, resource: str, backend: str, settings: LinkSettings, error_query: str | None):
        self.resource = resource
        self.backend = backend
        self.settings = settings
        self.error_query = error_query
        # Read block payloads straight from pyvisa-py's socket (fast, sees a
        # closed peer at once); False forces the generic VISA read loop.
        self.direct_socket = True
        self._res: MessageBasedResource | None = None

    def _require(self) -> MessageBasedResource:
        if self._res is None:
            raise ConnectionLost(f"{self.resource}: the link is closed; reopen it", resource=self.resource)
        return self._res

    @contextmanager
    def _io(self, what: str) -> Iterator[None]:
        try:
            yield
        except VisaIOError as exc:
            raise translate_visa_error(exc, what, self.resource, self.settings.timeout_ms) from None
        except OSError as exc:
            raise translate_os_error(exc, what, self.resource) from None

    def _socket_session(self) -> Any:
        """pyvisa-py's TCPIP SOCKET session object, or None for other backends
        (Any: a private, untyped pyvisa-py class, recognised by its attributes)."""
        res = self._require()
        if not self.direct_socket:
            return None
        sess = getattr(res.visalib, "sessions", {}).get(res.session)
        if sess is None or not hasattr(sess, "_pending_buffer") or not isinstance(
            getattr(sess, "interface", None), socket.socket
        ):
            return None
        return sess

    def _read_exact(self, count: int, command: str, total: int | None) -> bytes:
        """Exactly ``count`` bytes, termination ignored. ``total`` (the block's
        payload size) turns a stall after some bytes into :class:`ShortBlock`."""
        if count == 0:
            return b""
        sess = self._socket_session()
        if sess is not None:
            return self._read_exact_socket(sess, count, command, total)
        return self._read_exact_visa(count, command, total)

    def _short_or_timeout(self, got: int, count: int, command: str, total: int | None, cause: str) -> ShortBlock | InstrumentTimeout:
        if total is not None and got > 0:
            return ShortBlock(
                f"{self.resource}: block from {command!r} announced {count} bytes, "
                f"{got} arrived before the {self.settings.timeout_ms} ms timeout ({cause})",
                expected=count,
                received=got,
                resource=self.resource,
            )
        return InstrumentTimeout(
            f"{self.resource}: no reply within {self.settings.timeout_ms} ms waiting for "
            f"data of {command!r} ({cause})",
            resource=self.resource,
            cause=cause,
        )

    def _read_exact_socket(self, sess: Any, count: int, command: str, total: int | None) -> bytes:
        buf = bytearray(count)
        pending = sess._pending_buffer
        got = min(len(pending), count)
        buf[:got] = pending[:got]
        del pending[:got]
        view = memoryview(buf)
        sock: socket.socket = sess.interface
        old = sock.gettimeout()
        sock.settimeout(self.settings.timeout_ms / 1000.0)  # idle timeout per recv
        try:
            while got < count:
                try:
                    n = sock.recv_into(view[got:], count - got)
                except (socket.timeout, TimeoutError):
                    raise self._short_or_timeout(got, count, command, total, "socket") from None
                except OSError as exc:
                    raise translate_os_error(exc, f"reading data of {command!r}", self.resource) from None
                if n == 0:
                    raise ConnectionLost(
                        f"{self.resource}: the instrument closed the connection after "
                        f"{got} of {count} bytes of the reply to {command!r} (socket); reopen it",
                        resource=self.resource,
                        cause="socket",
                    )
                got += n
        finally:
            try:
                sock.settimeout(old)
            except OSError:  # socket already closed
                pass
        return bytes(buf)

    def _read_exact_visa(self, count: int, command: str, total: int | None) -> bytes:
        res = self._require()
        out = bytearray()
        old_term = res.read_termination
        res.read_termination = None
        try:
            # A read that fills the requested count is the normal case here, not news.
            with res.ignore_warning(constants.StatusCode.success_max_count_read):
                self._visa_loop(res, out, count, command, total)
        finally:
            if self._res is not None:
                res.read_termination = old_term
        return bytes(out)

    def _visa_loop(self, res: MessageBasedResource, out: bytearray, count: int, command: str, total: int | None) -> None:
        while len(out) < count:
            try:
                chunk, _status = res.visalib.read(res.session, min(count - len(out), res.chunk_size))
            except VisaIOError as exc:
                if exc.error_code == constants.StatusCode.error_timeout:
                    raise self._short_or_timeout(len(out), count, command, total, "VisaIOError") from None
                raise translate_visa_error(
                    exc, f"reading data of {command!r}", self.resource, self.settings.timeout_ms
                ) from None
            except OSError as exc:
                raise translate_os_error(exc, f"reading data of {command!r}", self.resource) from None
            if not chunk:
                raise self._short_or_timeout(len(out), count, command, total, "VisaIOError")
            out.extend(chunk)

    def _read_line(self, command: str) -> bytes:
        """Rest of a reply up to the read termination (for ASCII data)."""
        res = self._require()
        with self._io(f"waiting for the reply to {command!r}"):
            return res.read_raw()
