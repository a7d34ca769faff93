"""Opening VISA resources and the SCPI link on them (:class:`Link`): commands,
queries, the error queue, IEEE 488.2 arbitrary blocks. The reply formats are
:mod:`probelog.drivers.blocks` (pure functions); reading by exact byte count and
the translation of I/O errors are :mod:`probelog.drivers.visa_io`.

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

from typing import cast

import numpy as np
import pyvisa
from pyvisa.errors import VisaIOError
from pyvisa.resources import MessageBasedResource

from probelog.drivers.blocks import DIGITS, float64_from_block, floats_from_ascii, parse_block_header, parse_error_reply
from probelog.drivers.errors import (
    BadResourceName,
    DriverError,
    InstrumentError,
    InstrumentTimeout,
    InstrumentUnreachable,
    MalformedBlock,
)
from probelog.drivers.visa_io import LinkSettings, RawLink, translate_os_error, translate_visa_error

__all__ = ["BACKEND_ALIASES", "Link", "LinkSettings", "check_resource_name", "normalise_backend", "open_resource"]

BACKEND_ALIASES = {"py": "@py", "pyvisa-py": "@py", "ni": "@ivi", "ivi": "@ivi", "sim": "@sim"}
DEFAULT_SETTINGS = LinkSettings()  # LF terminations, 10 s timeout (frozen: one shared default)


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
    settings: LinkSettings = DEFAULT_SETTINGS,
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


class Link(RawLink):
    """One open VISA resource speaking SCPI text plus IEEE 488.2 blocks.

    Every method raises only :mod:`probelog.drivers.errors` exceptions for I/O failures.
    After a :class:`TransportError` call :meth:`reopen`.
    """

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
            raise translate_visa_error(exc, "while opening", self.resource, self.settings.timeout_ms) from None
        except OSError as exc:
            raise translate_os_error(exc, "while opening", self.resource) from None
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
        if digit[0] not in DIGITS:
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
