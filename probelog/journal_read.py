"""Reading a journal back: the hash-chain walk :meth:`Journal.open` runs over
lines, the prefix a state snapshot vouches for, and one line by its number.

A :class:`Prefix` is the first ``seq`` lines of a journal as they were when a
snapshot was folded from them: their byte length, one SHA-256 over all those
bytes (:class:`PrefixHash`), where each line starts, and the data files they
name. Reopening a long session then checks that one hash instead of parsing and
hashing every line; any difference and the whole chain is walked as before.
"""

from __future__ import annotations

import hashlib
import os
import re
import sys
from concurrent.futures import ThreadPoolExecutor
from array import array
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any, cast

from probelog.journal_format import (JOURNAL_NAME, ZERO_HASH, Event, JournalError, parse_line,
                                     referenced_paths)


BLOCK = 4 << 20  # bytes per block of a PrefixHash


class PrefixHash:
    """SHA-256 of a journal prefix taken in 4 MiB blocks: the SHA-256 (hex) of the
    concatenated SHA-256 digests of the blocks (the last one partial). The blocks
    of a long journal are hashed on several cores at once (hashlib releases the
    GIL); a live journal keeps it running as lines are appended."""

    def __init__(self) -> None:
        self._done: list[bytes] = []  # digests of the full blocks
        self._cur = hashlib.sha256()
        self._fill = 0  # bytes in the current block

    def update(self, data: bytes | memoryview) -> None:
        view = memoryview(data)
        while view:
            take = min(BLOCK - self._fill, len(view))
            self._cur.update(view[:take])
            self._fill += take
            view = view[take:]
            if self._fill == BLOCK:
                self._done.append(self._cur.digest())
                self._cur, self._fill = hashlib.sha256(), 0

    def hexdigest(self) -> str:
        tail = [self._cur.digest()] if self._fill else []
        return hashlib.sha256(b"".join([*self._done, *tail])).hexdigest()

    @classmethod
    def of_file(cls, path: Path, size: int) -> PrefixHash | None:
        """The hash of ``path``'s first ``size`` bytes, or None when it is shorter."""
        full = size // BLOCK
        out = cls()
        try:
            if full > 1:
                with ThreadPoolExecutor(max_workers=min(4, os.cpu_count() or 1)) as pool:
                    digests = list(pool.map(lambda k: _block_digest(path, k), range(full)))
            else:
                digests = [_block_digest(path, k) for k in range(full)]
            if any(d is None for d in digests):
                return None
            out._done = [d for d in digests if d is not None]
            with open(path, "rb") as fh:
                fh.seek(full * BLOCK)
                rest = fh.read(size - full * BLOCK)
        except OSError:
            return None
        if len(rest) != size - full * BLOCK:
            return None
        out.update(rest)
        return out


def _block_digest(path: Path, k: int) -> bytes | None:
    with open(path, "rb") as fh:
        fh.seek(k * BLOCK)
        data = fh.read(BLOCK)
    return hashlib.sha256(data).digest() if len(data) == BLOCK else None


@dataclass(frozen=True)
class Prefix:
    """The first ``seq`` lines of a journal: ``size`` bytes (the last one a
    newline) whose :class:`PrefixHash` is ``sha256``; ``last_hash`` is line ``seq``'s own
    hash (the chain's head). ``offsets``: ``seq + 1`` little-endian uint64, the
    byte where each line starts, then ``size``. ``referenced``: every data-file
    path those lines name; ``reported_temps``: leftover temporary files a
    ``recovered`` event among them already reported."""

    size: int
    sha256: str
    seq: int
    last_hash: str
    offsets: bytes
    referenced: tuple[str, ...] = ()
    reported_temps: tuple[str, ...] = ()

    def line_starts(self) -> array[int] | None:
        """Where lines 1..seq start (bytes), or None when ``offsets`` does not fit."""
        starts = array("Q")
        if len(self.offsets) != 8 * (self.seq + 1):
            return None
        starts.frombytes(self.offsets)
        if sys.byteorder != "little":
            starts.byteswap()
        if starts[0] != 0 or starts[-1] != self.size:
            return None
        starts.pop()
        return starts


def pack_offsets(starts: Iterable[int], size: int) -> bytes:
    """``starts`` and then ``size`` as little-endian uint64 (:attr:`Prefix.offsets`)."""
    out = array("Q", starts)
    out.append(size)
    if sys.byteorder != "little":
        out.byteswap()
    return out.tobytes()


def reported_temps(payloads: Iterable[dict[str, Any]]) -> set[str]:
    """Leftover temporary files named by ``payloads`` (of ``recovered`` events)."""
    return {t for p in payloads for t in p.get("leftover_temp", []) if isinstance(t, str)}


def read_prefix(folder: str | Path, seq: int) -> Prefix:
    """The :class:`Prefix` of the first ``seq`` lines of ``folder``'s journal, read
    from the file (what a live :class:`Journal` keeps as it goes)."""
    data = (Path(folder) / JOURNAL_NAME).read_bytes()
    starts, pos = [], 0
    for _ in range(seq):
        end = data.find(b"\n", pos)
        if end < 0:
            raise JournalError(f"{folder}: the journal has fewer than {seq} lines")
        starts.append(pos)
        pos = end + 1
    head = data[starts[-1]:pos - 1] if seq else b""
    lines = [data[a:b - 1] for a, b in zip(starts, [*starts[1:], pos], strict=True)]
    hasher = PrefixHash()
    hasher.update(data[:pos])
    return Prefix(size=pos, sha256=hasher.hexdigest(), seq=seq,
                  last_hash=hashlib.sha256(head).hexdigest() if seq else ZERO_HASH,
                  offsets=pack_offsets(starts, pos), referenced=tuple(sorted(referenced_paths(data[:pos]))),
                  reported_temps=tuple(sorted(reported_temps(_recovered_payloads(lines)))))


def _recovered_payloads(lines: Iterable[bytes]) -> Iterable[dict[str, Any]]:
    for raw in lines:
        if raw.endswith(b'"type":"recovered"}'):
            rec, _ = parse_line(raw)
            if rec is not None:
                yield rec["payload"]


class LazyEvent:
    """An :class:`Event` read back by :meth:`Journal.open`, whose payload is parsed
    only when asked for. Opening checks seq, prev and type from the line's fixed
    tail (canonical JSON sorts the keys, so ``prev``, ``seq``, ``ts``, ``type``
    end every line)."""

    __slots__ = ("seq", "ts", "type", "prev", "hash", "_raw", "_payload")

    def __init__(self, seq: int, ts: str, type: str, prev: str, hash: str, raw: bytes) -> None:
        self.seq, self.ts, self.type, self.prev, self.hash = seq, ts, type, prev, hash
        self._raw: bytes | None = raw
        self._payload: dict[str, Any] | None = None

    @property
    def payload(self) -> dict[str, Any]:
        if self._payload is None:
            rec, why = parse_line(self._raw or b"")
            if rec is None:
                raise JournalError(f"journal line {self.seq}: {why}")
            self._payload, self._raw = rec["payload"], None
        return self._payload


# The tail every canonical journal line ends with (keys sorted: payload, prev, seq,
# ts, type). Inside a JSON string a quote is escaped, so the payload cannot fake it.
_TAIL = re.compile(rb',"prev":"([0-9a-f]{64})","seq":(\d+),"ts":"([^"\\]*)","type":"([^"\\]*)"\}\Z')


def _tail_fields(raw: bytes) -> tuple[int, str, str, str] | None:
    """(seq, prev, ts, type) from a canonical line's tail, or None (read it whole)."""
    # the tail is under 300 bytes (64-hex prev, seq, ts, type): search only there
    tail = _TAIL.search(raw, max(0, len(raw) - 400)) if raw.startswith(b'{"payload":{') else None
    if tail is None:
        return None
    try:
        return (int(tail.group(2)), tail.group(1).decode("ascii"), tail.group(3).decode("utf-8"),
                tail.group(4).decode("utf-8"))
    except UnicodeDecodeError:
        return None


def walk_chain(lines: list[bytes], seq0: int, prev: str, where: str) -> list[Event]:
    """Check that ``lines`` continue a chain whose line ``seq0`` hashed to ``prev``:
    consecutive seq, each prev the hash of the line before. Returns them as
    lazily parsed events; raises JournalError naming the first bad line."""
    events: list[Event] = []
    n_lines = len(lines)
    for k, raw in enumerate(lines, start=1):
        i = seq0 + k
        # A line inside the chain is vouched for by the next line's prev: its fixed
        # tail is enough. The last line (nothing after it vouches for it) or an
        # odd one is read whole.
        fields = _tail_fields(raw) if k < n_lines else None
        why = ""
        if fields is None:
            rec, why = parse_line(raw)
            fields = (rec["seq"], rec["prev"], rec["ts"], rec["type"]) if rec is not None else (0, "", "", "")
        seq, line_prev, ts, type_ = fields
        if why or seq != i or line_prev != prev:
            if not why:
                why = (f"seq {seq}, expected {i}" if seq != i
                       else "prev does not match the line before (edited, removed or reordered lines)")
            raise JournalError(f"{where}, line {i}: {why}; the journal is damaged "
                               f"and cannot be appended to: run `probelog verify {Path(where).parent}`")
        h = hashlib.sha256(raw).hexdigest()
        events.append(cast(Event, LazyEvent(seq, ts, type_, prev, h, raw)))  # read like an Event
        prev = h
    return events


def parse_events(data: bytes, seq0: int, prev: str) -> list[Event]:
    """Every complete line of ``data`` (lines ``seq0 + 1`` on, the first one's prev
    being ``prev``), parsed eagerly; for a journal already checked at open."""
    out: list[Event] = []
    for raw in data.split(b"\n")[:-1]:
        rec, why = parse_line(raw)
        if rec is None:
            raise JournalError(f"journal line {seq0 + len(out) + 1}: {why}")
        h = hashlib.sha256(raw).hexdigest()
        out.append(Event(rec["seq"], rec["ts"], rec["type"], rec["payload"], prev, h))
        prev = h
    return out


def head_event(raw: bytes, prefix: Prefix) -> Event | None:
    """Line ``prefix.seq`` (its bytes ``raw``, no newline) as an Event, or None when
    it is not the line the prefix names."""
    rec, _ = parse_line(raw)
    if rec is None or rec["seq"] != prefix.seq or hashlib.sha256(raw).hexdigest() != prefix.last_hash:
        return None
    return Event(rec["seq"], rec["ts"], rec["type"], rec["payload"], rec["prev"], prefix.last_hash)


class LineSource:
    """Reads line ``seq`` of a journal by where it starts (a verified prefix's
    offsets), long after the journal was opened: the journal only grows."""

    def __init__(self, path: Path, prefix: Prefix) -> None:
        starts = prefix.line_starts()
        if starts is None:
            raise JournalError(f"{path}: the snapshot's line offsets do not fit its prefix")
        self.path = path
        self._starts = starts
        self._size = prefix.size

    def line(self, seq: int) -> bytes:
        """The bytes of line ``seq`` (1-based, no newline)."""
        if not 0 < seq <= len(self._starts):
            raise JournalError(f"{self.path}: no line {seq} in the part the snapshot covers")
        start = self._starts[seq - 1]
        end = self._starts[seq] if seq < len(self._starts) else self._size
        try:
            with open(self.path, "rb") as fh:
                fh.seek(start)
                raw = fh.read(end - start)
        except OSError as exc:
            raise JournalError(f"{self.path}: cannot read line {seq}: {exc.strerror or exc}") from None
        if len(raw) != end - start or not raw.endswith(b"\n"):
            raise JournalError(f"{self.path}: line {seq} is not where the snapshot says (the journal was cut)")
        return raw[:-1]
