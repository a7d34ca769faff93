"""Opening VISA resources, SCPI helpers, and IEEE 488.2 arbitrary blocks.

Resource strings are written as VISA defines them, e.g.
``TCPIP0::10.0.0.5::inst0::INSTR`` (VXI-11), ``TCPIP::host::5025::SOCKET``
(raw socket), ``GPIB0::16::INSTR``. The backend is pyvisa's: ``@py`` (pyvisa-py,
the default), ``@ivi`` (NI-VISA or another IVI VISA library; alias ``ni``), or
``@sim`` / ``path/to/file.yaml@sim`` (pyvisa-sim).

Binary data arrive as IEEE 488.2 definite-length arbitrary blocks (IEEE Std
488.2-1992, 8.7.9 and 7.7.6, from memory): ``#``, one digit n (1-9), n ASCII
digits giving the byte count L, then L bytes, then the response terminator.
The indefinite form is ``#0`` followed by bytes up to NL with END.

Traps of the pyvisa-py stack handled here (verified on pyvisa-py 0.8.1):

- over a SOCKET resource nothing sets terminations for you: :func:`open_resource`
  always sets read and write terminations (LF by default);
- with LF as read termination a read stops at every 0x0A byte inside binary
  data, so blocks are read by count: the header first, then exactly L bytes with
  termination off (:meth:`Link.query_block`), never by terminator;
- pyvisa-py reads a socket in 4 kB chunks with a ``select`` per chunk, and a peer
  that closes mid-block spins until the full timeout, then later raises a plain
  OSError (BrokenPipeError). For pyvisa-py SOCKET sessions the block payload is
  read straight from the session's socket with ``recv_into``: a closed peer shows
  up at once as :class:`~probelog.drivers.errors.ConnectionLost`;
- opening a SOCKET resource where nothing listens succeeds; the refusal surfaces
  at the first write as ConnectionRefusedError. Drivers query ``*IDN?`` right
  after opening so it surfaces there as :class:`~probelog.drivers.errors.InstrumentUnreachable`.

Every VisaIOError and OSError is translated into a :mod:`probelog.drivers.errors`
exception whose message says which of the two happened.
"""

from __future__ import annotations

import errno
import re
import socket
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Iterator, cast

import numpy as np
import pyvisa
from pyvisa import constants
from pyvisa.errors import VisaIOError
from pyvisa.resources import MessageBasedResource

from probelog.drivers.errors import (
    BadResourceName,
    ConnectionLost,
    DriverError,
    InstrumentError,
    InstrumentTimeout,
    InstrumentUnreachable,
    MalformedBlock,
    ReplyError,
    ShortBlock,
    TransportError,
)

BACKEND_ALIASES = {"py": "@py", "pyvisa-py": "@py", "ni": "@ivi", "ivi": "@ivi", "sim": "@sim"}

_DIGITS = frozenset(b"0123456789")


# --------------------------------------------------------------------------- blocks


def encode_block(payload: bytes) -> bytes:
    """Wrap ``payload`` in a definite-length IEEE 488.2 block (no terminator)."""
    count = str(len(payload)).encode("ascii")
    if len(count) > 9:
        raise ValueError(f"payload of {len(payload)} bytes is too large for a definite block")
    return b"#" + str(len(count)).encode("ascii") + count + bytes(payload)


def parse_block_header(data: bytes) -> tuple[int, int | None]:
    """Parse the start of an arbitrary block.

    Returns (header length in bytes, payload byte count), the count being None
    for the indefinite form ``#0``. Raises :class:`MalformedBlock` when ``data``
    does not start with a complete, valid header.
    """
    if len(data) < 2:
        raise MalformedBlock(f"block header truncated: got {bytes(data[:2])!r}, need '#' and a digit")
    if data[0:1] != b"#":
        raise MalformedBlock(f"block must start with '#', got {bytes(data[:12])!r}")
    if data[1] not in _DIGITS:
        raise MalformedBlock(f"block header digit must be 0-9, got {bytes(data[1:2])!r}")
    n = data[1] - 0x30
    if n == 0:
        return 2, None
    digits = bytes(data[2 : 2 + n])
    if len(digits) < n:
        raise MalformedBlock(f"block header '#{n}' announces {n} length digits, got {digits!r}")
    # int() would accept spaces, '_' and non-ASCII digits: check byte by byte.
    if not all(c in _DIGITS for c in digits):
        raise MalformedBlock(f"block length must be {n} ASCII digits, got {digits!r}")
    return 2 + n, int(digits)


def decode_block(data: bytes) -> bytes:
    """Payload of a complete IEEE 488.2 block, definite or indefinite.

    A trailing LF or CR LF terminator is accepted; other bytes after a definite
    block, or fewer bytes than announced, raise :class:`MalformedBlock`
    (:class:`ShortBlock` for the latter).
    """
    data = bytes(data)
    head, count = parse_block_header(data)
    if count is None:
        body = data[head:]
        return body[:-1] if body.endswith(b"\n") else body
    payload = data[head : head + count]
    if len(payload) < count:
        raise ShortBlock(
            f"block announces {count} bytes but only {len(payload)} follow the header",
            expected=count,
            received=len(payload),
        )
    tail = data[head + count :]
    if tail not in (b"", b"\n", b"\r\n"):
        raise MalformedBlock(f"{len(tail)} unexpected bytes after a {count}-byte block: {tail[:12]!r}")
    return payload


def float64_from_block(payload: bytes, byte_order: str) -> np.ndarray:
    """REAL,64 payload as float64; ``byte_order`` is "little" or "big"."""
    if len(payload) % 8:
        raise MalformedBlock(f"REAL,64 block of {len(payload)} bytes is not a multiple of 8")
    return np.frombuffer(payload, dtype="<f8" if byte_order == "little" else ">f8").copy()


def floats_from_ascii(text: str) -> np.ndarray:
    """Comma-separated ASCII numbers (SCPI ``FORMat:DATA ASCii``) as float64."""
    parts = [p.strip() for p in text.strip().split(",")]
    try:
        return np.array([float(p) for p in parts], dtype=float)
    except ValueError:
        bad = next(p for p in parts if not _is_float(p))
        raise ReplyError(f"ASCII data reply has a non-number {bad!r} in {text[:60]!r}") from None


def _is_float(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


# --------------------------------------------------------------------------- errors


_ERROR_REPLY = re.compile(r'^\s*([+-]?\d+)\s*(?:,\s*"?(.*?)"?)?\s*$', re.S)


def parse_error_reply(reply: str) -> tuple[int, str]:
    """``SYSTem:ERRor:NEXT?`` reply ``-222,"Data out of range"`` -> (code, message)."""
    m = _ERROR_REPLY.match(reply)
    if not m:
        raise ReplyError(f"error-queue reply {reply!r} is not of the form <code>,\"<message>\"")
    return int(m.group(1)), (m.group(2) or "").strip()


def _translate_os_error(exc: OSError, what: str, resource: str) -> TransportError:
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


def _translate_visa_error(exc: VisaIOError, what: str, resource: str, timeout_ms: int) -> TransportError:
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


# --------------------------------------------------------------------------- link


@dataclass(frozen=True)
class LinkSettings:
    """How to open a resource: terminations as Python strings, timeout in ms."""

    read_termination: str = "\n"
    write_termination: str = "\n"
    timeout_ms: int = 10000


def normalise_backend(backend: str | None) -> str:
    """User backend name -> pyvisa's: "", "py", "@py" -> "@py"; "ni" -> "@ivi"."""
    if not backend:
        return "@py"
    b = backend.strip()
    return BACKEND_ALIASES.get(b.lower(), b if "@" in b else "@" + b)


def check_resource_name(resource: str) -> str:
    """Validate a VISA resource string; returns it stripped or raises BadResourceName."""
    from pyvisa import rname

    name = resource.strip()
    hint = "write e.g. TCPIP0::10.0.0.5::inst0::INSTR, TCPIP::host::5025::SOCKET or GPIB0::16::INSTR"
    try:
        parsed = rname.parse_resource_name(name)
    except rname.InvalidResourceName as exc:
        raise BadResourceName(
            f"{resource!r} is not a VISA resource string ({exc}); {hint}", resource=resource
        ) from None
    port = getattr(parsed, "port", None)
    if port is not None and not (str(port).isdigit() and 0 < int(port) < 65536):
        raise BadResourceName(
            f"{resource!r} is not a VISA resource string (port {port!r} is not 1-65535); {hint}",
            resource=resource,
        )
    return name


def open_resource(
    resource: str,
    backend: str | None = "@py",
    settings: LinkSettings = LinkSettings(),
    *,
    error_query: str | None = None,
) -> "Link":
    """Open ``resource`` through pyvisa with ``backend`` and return a :class:`Link`.

    Terminations and timeout are always set explicitly (pyvisa-py's SOCKET
    sessions need them). ``error_query`` is the command that pops one entry of
    the instrument's error queue (e.g. ``SYSTem:ERRor:NEXT?``), used by
    :meth:`Link.check_errors`. Opening may succeed where nothing listens; the
    first command then raises :class:`InstrumentUnreachable`.
    """
    link = Link(check_resource_name(resource), normalise_backend(backend), settings, error_query)
    link.open()
    return link


class Link:
    """One open VISA resource speaking SCPI text plus IEEE 488.2 blocks.

    Every method raises only :mod:`probelog.drivers.errors` exceptions for I/O failures.
    After a :class:`TransportError` call :meth:`reopen`.
    """

    def __init__(self, resource: str, backend: str, settings: LinkSettings, error_query: str | None):
        self.resource = resource
        self.backend = backend
        self.settings = settings
        self.error_query = error_query
        # Read block payloads straight from pyvisa-py's socket (fast, sees a
        # closed peer at once); False forces the generic VISA read loop.
        self.direct_socket = True
        self._res: MessageBasedResource | None = None

    # -- lifecycle

    def open(self) -> None:
        if self._res is not None:
            return
        try:
            rm = pyvisa.ResourceManager(self.backend)
        except (OSError, ValueError) as exc:
            raise DriverError(
                f"VISA backend {self.backend!r} is not available: {exc}", resource=self.resource
            ) from None
        try:
            # every resource a probelog dialect talks to is message based (SOCKET, INSTR, GPIB, ASRL)
            res = cast(MessageBasedResource, rm.open_resource(self.resource))
        except VisaIOError as exc:
            raise _translate_visa_error(exc, "while opening", self.resource, self.settings.timeout_ms) from None
        except OSError as exc:
            raise _translate_os_error(exc, "while opening", self.resource) from None
        except Exception as exc:  # pyvisa-py raises bare Exception("could not connect: ...")
            raise InstrumentUnreachable(
                f"{self.resource}: could not open ({type(exc).__name__}: {exc})",
                resource=self.resource,
                cause=type(exc).__name__,
            ) from None
        res.read_termination = self.settings.read_termination or None
        res.write_termination = self.settings.write_termination or ""
        res.timeout = self.settings.timeout_ms
        self._res = res

    def close(self) -> None:
        """Close the resource; errors while closing are ignored (the link may be dead)."""
        res, self._res = self._res, None
        if res is not None:
            try:
                res.close()
            except Exception:  # a dead socket may fail to close; nothing to recover
                pass

    def reopen(self) -> None:
        """Close and open again, e.g. after a timeout or a dropped connection."""
        self.close()
        self.open()

    @property
    def is_open(self) -> bool:
        return self._res is not None

    @property
    def visa_resource(self) -> MessageBasedResource:
        """The underlying pyvisa resource (for tests and measurements)."""
        return self._require()

    def _require(self) -> MessageBasedResource:
        if self._res is None:
            raise ConnectionLost(f"{self.resource}: the link is closed; reopen it", resource=self.resource)
        return self._res

    @contextmanager
    def _io(self, what: str) -> Iterator[None]:
        try:
            yield
        except VisaIOError as exc:
            raise _translate_visa_error(exc, what, self.resource, self.settings.timeout_ms) from None
        except OSError as exc:
            raise _translate_os_error(exc, what, self.resource) from None

    # -- text

    def write(self, command: str) -> None:
        """Send one command (no reply expected)."""
        res = self._require()
        with self._io(f"sending {command!r}"):
            res.write(command)

    def query(self, command: str, timeout_ms: int | None = None) -> str:
        """Send ``command`` and return the text reply, stripped of whitespace.

        ``timeout_ms`` overrides the link timeout for this reply only (e.g. for
        ``*OPC?`` after a long sweep).
        """
        res = self._require()
        old = res.timeout
        if timeout_ms is not None:
            res.timeout = timeout_ms
        try:
            with self._io(f"waiting for the reply to {command!r}"):
                return res.query(command).strip()
        except InstrumentTimeout as exc:
            if timeout_ms is not None:
                raise InstrumentTimeout(
                    str(exc).replace(f"{self.settings.timeout_ms} ms", f"{timeout_ms} ms"),
                    resource=self.resource,
                    cause=exc.cause,
                ) from None
            raise
        finally:
            if self._res is not None and timeout_ms is not None:
                try:
                    res.timeout = old
                except Exception:  # session died meanwhile; reopen restores the timeout
                    pass

    def read_errors(self, max_entries: int = 64) -> list[tuple[int, str]]:
        """Pop the instrument's error queue until ``0,"No error"``; [] when clean."""
        if not self.error_query:
            return []
        found = []
        for _ in range(max_entries):
            code, message = parse_error_reply(self.query(self.error_query))
            if code == 0:
                break
            found.append((code, message))
        return found

    def check_errors(self, after: str) -> None:
        """Raise :class:`InstrumentError` quoting the queue if it is not empty."""
        errs = self.read_errors()
        if errs:
            quoted = "; ".join(f'{code},"{msg}"' for code, msg in errs)
            raise InstrumentError(
                f"{self.resource} reported after {after!r}: {quoted}",
                errors=errs,
                command=after,
                resource=self.resource,
            )

    def command(self, command: str) -> None:
        """Write ``command`` and check the error queue."""
        self.write(command)
        self.check_errors(command)

    # -- blocks

    def query_values(self, command: str, byte_order: str = "little") -> np.ndarray:
        """Send ``command`` and read float64 data: a REAL,64 block, or ASCII
        comma-separated numbers when the reply does not start with ``#``."""
        self.write(command)
        first = self._read_exact(1, command, total=None)
        if first != b"#":
            rest = self._read_line(command)
            return floats_from_ascii((first + rest).decode("ascii", "replace"))
        return float64_from_block(self._read_block_after_hash(command), byte_order)

    def query_block(self, command: str) -> bytes:
        """Send ``command`` and return the payload of the block it answers with."""
        self.write(command)
        first = self._read_exact(1, command, total=None)
        if first != b"#":
            rest = self._read_line(command)
            raise MalformedBlock(
                f"{self.resource}: reply to {command!r} is not a block: {(first + rest)[:40]!r}",
                resource=self.resource,
            )
        return self._read_block_after_hash(command)

    def _read_block_after_hash(self, command: str) -> bytes:
        digit = self._read_exact(1, command, total=None)
        if digit == b"0":
            # Indefinite form: ends at NL with END; only safe for text payloads.
            return self._read_line(command)
        head = b"#" + digit
        if digit[0] not in _DIGITS:
            raise MalformedBlock(
                f"{self.resource}: reply to {command!r} starts with {head!r}, not a block header",
                resource=self.resource,
            )
        n_digits = self._read_exact(digit[0] - 0x30, command, total=None)
        try:
            _, count = parse_block_header(head + n_digits)
        except MalformedBlock as exc:
            raise MalformedBlock(f"{self.resource}: reply to {command!r}: {exc}", resource=self.resource) from None
        assert count is not None  # only '#0' has no count, and it returned above
        payload = self._read_exact(count, command, total=count)
        term = (self.settings.read_termination or "").encode("ascii")
        if term:
            tail = self._read_exact(len(term), command, total=None)
            if tail != term:
                raise MalformedBlock(
                    f"{self.resource}: {count}-byte block from {command!r} is followed by "
                    f"{tail!r}, not the terminator {term!r} (block longer than announced?)",
                    resource=self.resource,
                )
        return payload

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
                    raise _translate_os_error(exc, f"reading data of {command!r}", self.resource) from None
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
                raise _translate_visa_error(
                    exc, f"reading data of {command!r}", self.resource, self.settings.timeout_ms
                ) from None
            except OSError as exc:
                raise _translate_os_error(exc, f"reading data of {command!r}", self.resource) from None
            if not chunk:
                raise self._short_or_timeout(len(out), count, command, total, "VisaIOError")
            out.extend(chunk)

    def _read_line(self, command: str) -> bytes:
        """Rest of a reply up to the read termination (for ASCII data)."""
        res = self._require()
        with self._io(f"waiting for the reply to {command!r}"):
            return res.read_raw()

