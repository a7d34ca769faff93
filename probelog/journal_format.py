"""The journal's line format: constants, errors, the event record, canonical JSON
and the byte-level readers of a line (parse, file references).

One event a line: ``{"payload", "prev", "seq", "ts", "type"}`` as canonical JSON
(sorted keys, compact, UTF-8, no NaN); ``prev`` is the SHA-256 (hex) of the line
before, 64 zeros for seq 1 (docs/journal-events.md). Besides the standard
library only orjson is used (to read lines back fast); importable without numpy.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterator
from dataclasses import dataclass, is_dataclass
from datetime import datetime, timezone
from enum import Enum
from pathlib import Path
from typing import Any

import orjson  # reading only (2-3x faster than json on long journals); lines are written by json

JOURNAL_NAME = "journal.jsonl"
DATA_DIR = "data"
LOCK_NAME = ".lock"
STAGING_PREFIX = ".creating-"  # a session folder being built; renamed into place whole
TORN_PREFIX = "journal.torn-"
ZERO_HASH = "0" * 64
HEX64 = re.compile(r"^[0-9a-f]{64}$")
_EVENT_KEYS = frozenset(("seq", "ts", "type", "payload", "prev"))


class JournalError(Exception):
    """The journal cannot do what was asked; the message says why and what to do."""


class NotASessionError(JournalError):
    """The folder holds no journal.jsonl."""


class SessionInUseError(JournalError):
    """Another process has the session open for writing (its lock is held)."""


@dataclass(frozen=True)
class FileRef:
    """A data file: ``path`` relative to the session folder (POSIX), SHA-256 hex."""

    path: str
    sha256: str

    def to_json(self) -> dict[str, str]:
        return {"path": self.path, "sha256": self.sha256}


@dataclass(frozen=True)
class Event:
    """One journal line. ``hash`` is SHA-256 of the line's bytes (no newline);
    ``prev`` the hash of the line before (64 zeros for seq 1)."""

    seq: int
    ts: str
    type: str
    payload: dict[str, Any]
    prev: str
    hash: str



def _plain(obj: Any) -> Any:
    """Payload -> JSON types: NaN/inf become None, numpy scalars/arrays become
    Python numbers/lists, paths and enums their text, FileRefs their object."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if obj is None or isinstance(obj, (str, bool, int)):
        return obj
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    return _plain(_default(obj))


def _default(obj: Any) -> Any:
    if hasattr(obj, "to_json"):
        return obj.to_json()
    if isinstance(obj, Enum):
        return obj.value
    if isinstance(obj, Path):
        return obj.as_posix()
    if hasattr(obj, "tolist"):  # numpy scalars and arrays, without importing numpy
        value = obj.tolist()
        if isinstance(value, complex):
            raise TypeError("complex numbers have no JSON form; store [re, im] or a data file")
        return value
    if is_dataclass(obj) and not isinstance(obj, type):
        return {k: getattr(obj, k) for k in obj.__dataclass_fields__}
    raise TypeError(f"{type(obj).__name__} cannot be written as JSON")


# One encoder for all lines: json.dumps with options builds a new one per call.
_ENCODER = json.JSONEncoder(sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                            allow_nan=False, default=_default)


def canonical_json(obj: Any) -> bytes:
    """Sorted keys, compact separators, UTF-8, no NaN (NaN/inf become null)."""
    try:
        text = _ENCODER.encode(obj)  # fast path: most payloads are plain and finite
    except ValueError:
        text = _ENCODER.encode(_plain(obj))
    return text.encode("utf-8")


def utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def new_session_id(wafer_id: str, when: datetime | None = None) -> str:
    """``YYYYMMDD-HHMMSS-<wafer>`` in UTC, e.g. ``20261201-224501-QF2611-W07``."""
    when = (when or datetime.now(timezone.utc)).astimezone(timezone.utc)
    # At most 100 characters of the wafer: the name must stay a legal file name
    # with "-bundle" and a "-<n>" suffix added (255 bytes on common file systems).
    wafer = re.sub(r"[^A-Za-z0-9._-]+", "_", wafer_id).strip("._")[:100].rstrip("._") or "wafer"
    return f"{when:%Y%m%d-%H%M%S}-{wafer}"



def parse_line(raw: bytes) -> tuple[dict[str, Any] | None, str]:
    """One line -> (record, "") or (None, what is wrong)."""
    try:
        rec = orjson.loads(raw)
    except (ValueError, RecursionError) as exc:  # UnicodeDecodeError is a ValueError
        return None, f"not valid JSON ({exc.__class__.__name__})"
    if not isinstance(rec, dict) or set(rec) != _EVENT_KEYS:
        return None, "not an event object with seq, ts, type, payload, prev"
    if not (isinstance(rec["seq"], int) and not isinstance(rec["seq"], bool) and isinstance(rec["ts"], str)
            and isinstance(rec["type"], str) and isinstance(rec["payload"], dict)
            and isinstance(rec["prev"], str)):
        return None, "an event field has the wrong type"
    return rec, ""


def file_refs_in(obj: Any) -> Iterator[tuple[str, str]]:
    """Every {"path", "sha256"} object inside a payload."""
    stack = [obj]
    while stack:
        o = stack.pop()
        if isinstance(o, dict):
            p, h = o.get("path"), o.get("sha256")
            if isinstance(p, str) and isinstance(h, str):
                yield p, h
            # only containers can hold a file reference: skip the numbers of
            # metrics and check figures (most of a landing's payload)
            stack.extend(v for v in o.values() if isinstance(v, (dict, list)))
        elif isinstance(o, list):
            stack.extend(v for v in o if isinstance(v, (dict, list)))


# A file reference as canonical_json writes FileRef.to_json(): sorted keys, compact.
_REF_RE = re.compile(rb'"path":("(?:[^"\\]|\\.)*"),"sha256":"[0-9a-f]{64}"')


def referenced_paths(journal_bytes: bytes) -> set[str]:
    """Paths of every file reference in the journal's lines: a regex over the raw
    bytes, ~20x faster than walking every parsed payload on a long session."""
    # a path without escapes is its bytes between the quotes (most are): json.loads
    # only for the rest, and once per distinct reference
    return {m[1:-1].decode("utf-8") if b"\\" not in m else json.loads(m)
            for m in set(_REF_RE.findall(journal_bytes))}

