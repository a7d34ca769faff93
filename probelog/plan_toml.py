"""Plan text to a TOML table, and plan errors that point at a line.

Everything a plan reader needs before the values are judged: reading the file
(UTF-8, one line naming the file on any failure), parsing it with tomllib (the
line of a syntax error leads the message), and :class:`Ctx`, which turns a key
path such as ``site[3].offset_um`` into ``file, line N: site[3].offset_um: ...``.
Array tables are counted from 1, as a reader counts them in the file.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path
from typing import Any


class PlanError(ValueError):
    """A plan that cannot be used; the message is one line a person can act on."""


def read_plan_file(p: Path) -> str:
    """The text of plan file ``p``; PlanError naming the file when it cannot be read."""
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise PlanError(f"{p}: no such plan file") from None
    except IsADirectoryError:
        raise PlanError(f"{p}: is a folder, expected a plan file (.toml)") from None
    except OSError as exc:
        raise PlanError(f"{p}: cannot read the plan ({exc.strerror})") from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise PlanError(f"{p}, line {line}: not UTF-8 text (byte {exc.start})") from None


def parse_toml(text: str, source: str) -> dict[str, Any]:
    """``text`` as a TOML table; PlanError naming ``source`` and the line if it is not TOML."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        # tomllib ends its message with "(at line L, column C)"; lead with the line.
        msg = str(exc)
        m = re.search(r"\s*\(at line (\d+), column (\d+)\)$", msg)
        if m:
            raise PlanError(f"{source}, line {m.group(1)}: not valid TOML: {msg[: m.start()]} "
                            f"(column {m.group(2)})") from None
        raise PlanError(f"{source}: not valid TOML: {msg}") from None
    except RecursionError:  # tomllib parses nested arrays and tables recursively
        raise PlanError(f"{source}: {too_deep(text)}") from None


def too_deep(text: str) -> str:
    """The message for TOML nested past Python's recursion limit, naming the
    first line where the nesting passes 100 levels (no plan needs 10)."""
    depth = 0
    for n, line in enumerate(text.splitlines(), start=1):
        for ch in re.sub(r'"[^"]*"|\'[^\']*\'', "", line.split("#", 1)[0]):
            depth += (ch in "[{") - (ch in "]}")
            if depth > 100:
                return f"line {n}: arrays or tables nested more than 100 levels deep; expected a plain plan"
    return "arrays or tables nested too deep; expected a plain plan"


class Ctx:
    """Error reporting for one plan: maps key paths to line numbers by scanning the text."""

    def __init__(self, source: str, text: str) -> None:
        self.source = source
        self.lines = index_lines(text)

    def error(self, path: str, message: str) -> PlanError:
        """The PlanError for key ``path``: ``source, line N: path: message``."""
        line = self._line_of(path)
        where = f"{self.source}, line {line}" if line else self.source
        return PlanError(f"{where}: {path}: {message}")

    def _line_of(self, path: str) -> int | None:
        # Walk up the path until something in the text matches.
        p = path
        while p:
            if p in self.lines:
                return self.lines[p]
            m = re.search(r"(\.[^.\[\]]+|\[\d+\])$", p)
            p = p[: m.start()] if m else ""
        return None


_HEADER_RE = re.compile(r"^\s*(\[\[?)\s*([A-Za-z0-9_.\-]+)\s*\]\]?")
_KEY_RE = re.compile(r"^\s*([A-Za-z0-9_\-]+)\s*=")


def index_lines(text: str) -> dict[str, int]:
    """Key path -> first line number, for the usual one-key-a-line TOML layout."""
    index: dict[str, int] = {}
    counts: dict[str, int] = {}
    table = ""
    depth = 0  # inside a multi-line array: no keys there
    for n, line in enumerate(text.splitlines(), start=1):
        code = line.split("#", 1)[0]
        if depth == 0:
            m = _HEADER_RE.match(code)
            if m:
                name = m.group(2)
                if m.group(1) == "[[":
                    counts[name] = counts.get(name, 0) + 1
                    table = f"{name}[{counts[name]}]"
                else:
                    table = name
                index.setdefault(table, n)
                if m.group(1) == "[[":
                    index.setdefault(name, n)
                continue
            m = _KEY_RE.match(code)
            if m:
                key = f"{table}.{m.group(1)}" if table else m.group(1)
                index.setdefault(key, n)
        # Track brackets outside strings to skip the inside of multi-line arrays.
        stripped = re.sub(r'"[^"]*"|\'[^\']*\'', "", code)
        if depth or _KEY_RE.match(code):
            depth = max(0, depth + stripped.count("[") - stripped.count("]"))
    return index
