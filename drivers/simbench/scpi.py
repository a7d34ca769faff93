"""A small SCPI parser for the simulated instruments: headers in short or long
form (SCPI-1999 vol. 1 ch. 6: "FREQuency" accepts FREQ or FREQUENCY, any case),
optional nodes in [brackets], ';'-separated commands on one line, an IEEE 488.2
error queue with the standard negative codes.
"""

from __future__ import annotations

import re
import threading
from collections import deque
from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable

if TYPE_CHECKING:  # server.py imports this module; Reply is only needed for the Handler type
    from probelog.drivers.simbench.server import Reply

ERRORS = {
    -100: "Command error",
    -104: "Data type error",
    -108: "Parameter not allowed",
    -109: "Missing parameter",
    -113: "Undefined header",
    -221: "Settings conflict",
    -222: "Data out of range",
    -224: "Illegal parameter value",
    -230: "Data corrupt or stale",
    -350: "Queue overflow",
}


class ScpiError(Exception):
    """A command failed; code is an SCPI error number, detail is appended to the text."""

    def __init__(self, code: int, detail: str = "") -> None:
        self.code = code
        self.detail = detail
        super().__init__(f"{code}: {ERRORS.get(code, 'Error')}{'; ' + detail if detail else ''}")

    @property
    def entry(self) -> str:
        text = ERRORS.get(self.code, "Error") + ("; " + self.detail if self.detail else "")
        return f'{self.code},"{text[:250]}"'


class ErrorQueue:
    """The instrument's error/event queue (IEEE 488.2), bounded, thread-safe."""

    def __init__(self, size: int = 20) -> None:
        self._q: deque[str] = deque()
        self._size = size
        self._lock = threading.Lock()

    def push(self, err: ScpiError) -> None:
        with self._lock:
            if len(self._q) >= self._size:
                self._q[-1] = ScpiError(-350).entry
            else:
                self._q.append(err.entry)

    def pop(self) -> str:
        with self._lock:
            return self._q.popleft() if self._q else '0,"No error"'

    def clear(self) -> None:
        with self._lock:
            self._q.clear()

    def __len__(self) -> int:
        with self._lock:
            return len(self._q)


def _mnemonic(word: str) -> str:
    short = "".join(ch for ch in word if ch.isupper() or ch.isdigit() or ch == "*")
    long = word.upper()
    return re.escape(long) if short.upper() == long else f"(?:{re.escape(long)}|{re.escape(short.upper())})"


def compile_header(pattern: str) -> re.Pattern[str]:
    """``[SENSe:]FREQuency:STARt`` -> a regex matching the accepted spellings.
    A trailing '?' in the pattern makes it a query."""
    query = pattern.endswith("?")
    body = pattern.rstrip("?")
    out = ""
    for part in re.findall(r"\[[^\]]*\]|[^\[\]]+", body):
        optional = part.startswith("[")
        words = [w for w in part.strip("[]").split(":") if w]
        seg = ":".join(_mnemonic(w) for w in words)
        if optional:
            lead = part.strip("[]").startswith(":")
            trail = part.strip("[]").endswith(":")
            seg = (":" if lead else "") + seg + (":" if trail else "")
            out += f"(?:{seg})?"
        else:
            out += seg
    return re.compile("^:?" + out + (r"\?" if query else "") + "$", re.IGNORECASE)


# a query answers a Reply (binary or faulty data) or text; a setting answers None
Handler = Callable[[list[str]], "Reply | str | None"]


@dataclass
class Command:
    regex: re.Pattern[str]
    handler: Handler


class CommandTable:
    def __init__(self) -> None:
        self._commands: list[Command] = []

    def add(self, pattern: str, handler: Handler) -> None:
        self._commands.append(Command(compile_header(pattern), handler))

    def find(self, header: str) -> Handler:
        for c in self._commands:
            if c.regex.match(header):
                return c.handler
        raise ScpiError(-113, f"header {header!r} not known")


def split_line(line: str) -> list[tuple[str, list[str]]]:
    """``'FREQ:STAR 1e9;:POW -10'`` -> [('FREQ:STAR', ['1e9']), (':POW', ['-10'])]."""
    out = []
    for part in line.split(";"):
        part = part.strip()
        if not part:
            continue
        header, _, rest = part.partition(" ")
        args = [a.strip() for a in rest.split(",")] if rest.strip() else []
        out.append((header.strip(), args))
    return out


_SUFFIX = {"": 1.0, "HZ": 1.0, "KHZ": 1e3, "MHZ": 1e6, "GHZ": 1e9, "MAHZ": 1e6, "DBM": 1.0}


def number(args: list[str], what: str) -> float:
    """The single numeric argument of a command, with an optional unit suffix."""
    if not args:
        raise ScpiError(-109, f"{what} needs a value")
    if len(args) > 1:
        raise ScpiError(-108, f"{what} takes one value, got {len(args)}")
    m = re.fullmatch(r"\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([A-Za-z]*)\s*", args[0])
    if not m or m.group(2).upper() not in _SUFFIX:
        raise ScpiError(-104, f"{what}: {args[0]!r} is not a number")
    return float(m.group(1)) * _SUFFIX[m.group(2).upper()]


def integer(args: list[str], what: str) -> int:
    v = number(args, what)
    if v != int(v):
        raise ScpiError(-104, f"{what}: {args[0]!r} is not a whole number")
    return int(v)
