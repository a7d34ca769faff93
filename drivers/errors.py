"""Exceptions raised by the instrument layer, one class per thing that went wrong.

Every driver in ``drivers/`` turns pyvisa's ``VisaIOError`` and Python's
``OSError`` into one of these, so callers (the session engine, the CLI) can act
on the kind of failure without knowing which VISA backend is underneath. Each
message names the resource, the command and what was expected versus found.

==========================  =================================================
exception                   when
==========================  =================================================
``InstrumentTimeout``       no (complete) reply within the I/O timeout; also a
                            watched folder that received no file in time
``ConnectionLost``          the peer closed or reset the link, e.g. mid-block
``InstrumentUnreachable``   nothing listens at the address (refused, no route)
``MalformedBlock``          a reply that is not a valid IEEE 488.2 block
``ShortBlock``              a block that ended before its announced byte count
``InstrumentError``         the instrument's error queue reported errors
``ReplyError``              a text reply we cannot parse (position, *OPC?)
``PowerLimitError``         requested source power above the plan's limit
``SettingMismatch``         the instrument reads back another setting than
                            was asked (clamped power, rounded IF bandwidth)
``InterlockError``          an XY move was asked for while probes are down
``OperatorDeclined``        the operator answered "no" to a manual-prober prompt
``DialectError``            a dialect TOML file is missing keys, has unknown
                            keys or bad placeholders
``TouchstoneRejected``      a file in the watched folder failed validation
``WaitCancelled``           a wait (watched folder) was cancelled by the caller
``BadResourceName``         a VISA resource string that does not parse
==========================  =================================================

Transport failures (timeout, lost, unreachable, malformed/short block) leave the
byte stream in an unknown state: call the driver's ``reopen()`` before going on.
"""

from __future__ import annotations


class DriverError(Exception):
    """Base class of every error raised by ``drivers``.

    ``resource`` is the VISA resource string (or folder path) involved, or "".
    """

    def __init__(self, message: str, *, resource: str = "") -> None:
        super().__init__(message)
        self.resource = resource


class TransportError(DriverError):
    """The link to the instrument failed; reopen before the next command.

    ``cause`` says which layer reported it: ``"VisaIOError"`` (pyvisa status code
    given in the message) or ``"OSError"`` (the socket layer, e.g. pyvisa-py's
    BrokenPipeError), or ``"socket"`` when our own block reader saw the event.
    """

    def __init__(self, message: str, *, resource: str = "", cause: str = "") -> None:
        super().__init__(message, resource=resource)
        self.cause = cause


class InstrumentTimeout(TransportError):
    """No reply, or an incomplete one, within the I/O timeout."""


class ConnectionLost(TransportError):
    """The instrument closed or reset the connection."""


class InstrumentUnreachable(TransportError):
    """Nothing answers at the address (connection refused, host unreachable)."""


class MalformedBlock(DriverError):
    """Bytes that are not an IEEE 488.2 arbitrary block (bad ``#`` header)."""


class ShortBlock(MalformedBlock):
    """A definite-length block that ended before its announced byte count.

    ``expected`` and ``received`` are byte counts of the payload.
    """

    def __init__(self, message: str, *, expected: int, received: int, resource: str = "") -> None:
        super().__init__(message, resource=resource)
        self.expected = expected
        self.received = received


class InstrumentError(DriverError):
    """The instrument's error queue was not empty after a command.

    ``errors`` is a list of (code, message) as the instrument reported them, in
    queue order; ``command`` is the command after which they were read.
    """

    def __init__(
        self, message: str, *, errors: list[tuple[int, str]], command: str, resource: str = ""
    ) -> None:
        super().__init__(message, resource=resource)
        self.errors = errors
        self.command = command


class ReplyError(DriverError):
    """A text reply that does not have the expected form."""


class PowerLimitError(DriverError, ValueError):
    """Requested RF source power (dBm) above the plan's limit; nothing was sent."""


class SettingMismatch(DriverError):
    """The instrument reads back a setting other than the one just sent: it
    clamped, rounded or ignored it. Nothing is swept with such settings.

    ``setting`` names it ("source power"), ``asked`` and ``got`` are numbers in
    ``unit`` ("dBm", "Hz", "points").
    """

    def __init__(self, message: str, *, setting: str, asked: float, got: float, unit: str,
                 resource: str = "") -> None:
        super().__init__(message, resource=resource)
        self.setting = setting
        self.asked = asked
        self.got = got
        self.unit = unit


class InterlockError(DriverError):
    """An XY stage move was requested while the probes are (or may be) in contact."""


class OperatorDeclined(DriverError):
    """The operator answered "no" to a manual-prober prompt."""


class DialectError(DriverError, ValueError):
    """A dialect file that cannot be used; the message names file, section, key."""


class TouchstoneRejected(DriverError, ValueError):
    """A Touchstone file from the watched folder that failed validation."""


class WaitCancelled(DriverError):
    """A wait was cancelled by the caller (operator pressed cancel)."""


class BadResourceName(DriverError, ValueError):
    """A VISA resource string that pyvisa cannot parse."""
