"""The session journal: append-only, hash-chained, crash-safe; and its data store.

A session is a folder ``<root>/<session_id>/`` holding ``journal.jsonl`` (one
event a line, canonical JSON, see docs/journal-events.md) and ``data/`` (the
Touchstone files and cal sets the events reference by path and SHA-256).

Durability (POSIX): a data file is written under a temporary name in its own
folder, fsync'ed, renamed into place and the folder fsync'ed; an event line is
written with one ``write`` on an O_APPEND descriptor and fsync'ed. An event is
acknowledged (``append`` returns) only after its fsync returned, so a crash
loses at most the event being written: its torn line is moved aside on reopen.

Besides the standard library only orjson is used (to read lines back fast when a
long session is reopened); the journal stays importable without numpy.
"""

from __future__ import annotations

import errno
import hashlib
import json
import math
import os
import re
import shutil
import tempfile
import threading
from dataclasses import dataclass, field, is_dataclass
from datetime import datetime, timezone
from enum import Enum
from pathlib import Path, PurePosixPath
from typing import Any, Iterator, cast

import orjson  # reading only (2-3x faster than json on long journals); lines are written by json

try:  # POSIX
    import fcntl
except ImportError:  # Windows (many probe-station PCs): byte-range lock instead of flock
    fcntl = None  # type: ignore[assignment]
    import msvcrt

# Flags that only some systems have: close-on-exec (POSIX), binary mode (Windows).
_OPEN_FLAGS = getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)

JOURNAL_NAME = "journal.jsonl"
DATA_DIR = "data"
LOCK_NAME = ".lock"
STAGING_PREFIX = ".creating-"  # a session folder being built; renamed into place whole
TORN_PREFIX = "journal.torn-"
ZERO_HASH = "0" * 64
_TEMP_RE = re.compile(r"^\..+\.tmp-\d+-\d+$")
_HEX64 = re.compile(r"^[0-9a-f]{64}$")
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


class _LazyEvent:
    """An :class:`Event` read back by :meth:`Journal.open`, whose payload is parsed
    only when asked for. Opening checks seq, prev and type from the line's fixed
    tail (canonical JSON sorts the keys, so ``prev``, ``seq``, ``ts``, ``type``
    end every line): a resume from a state snapshot then parses only the payloads
    after the snapshot (100,000 events: ~5 s -> a fraction of a second)."""

    __slots__ = ("seq", "ts", "type", "prev", "hash", "_raw", "_payload")

    def __init__(self, seq: int, ts: str, type: str, prev: str, hash: str, raw: bytes) -> None:
        self.seq, self.ts, self.type, self.prev, self.hash = seq, ts, type, prev, hash
        self._raw: bytes | None = raw
        self._payload: dict[str, Any] | None = None

    @property
    def payload(self) -> dict[str, Any]:
        if self._payload is None:
            rec, why = _parse(self._raw or b"")
            if rec is None:
                raise JournalError(f"journal line {self.seq}: {why}")
            self._payload, self._raw = rec["payload"], None
        return self._payload


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


# The tail every canonical journal line ends with (keys sorted: payload, prev, seq,
# ts, type). Inside a JSON string a quote is escaped, so the payload cannot fake it.
_TAIL = re.compile(rb',"prev":"([0-9a-f]{64})","seq":(\d+),"ts":"([^"\\]*)","type":"([^"\\]*)"\}\Z')


@dataclass(frozen=True)
class Problem:
    """Something ``verify`` found wrong. ``line`` is the 1-based journal line
    (None for a file no line names); ``file`` the journal or the data file."""

    line: int | None
    file: str
    expected: str
    found: str
    message: str


@dataclass(frozen=True)
class VerifyReport:
    """``ok`` is False when any ``problem`` was found. ``warnings`` do not make a
    session damaged but are worth a look: data files adopted on resume whose
    content no event vouches for (a crash before their event, or a file
    dropped into ``data/`` by hand)."""

    ok: bool
    events: int
    problems: list[Problem] = field(default_factory=list)
    last_seq: int = 0
    last_hash: str = ZERO_HASH
    warnings: list[Problem] = field(default_factory=list)


# --------------------------------------------------------------------------- encoding


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


def _utc_now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def new_session_id(wafer_id: str, when: datetime | None = None) -> str:
    """``YYYYMMDD-HHMMSS-<wafer>`` in UTC, e.g. ``20261201-224501-QF2611-W07``."""
    when = (when or datetime.now(timezone.utc)).astimezone(timezone.utc)
    # At most 100 characters of the wafer: the name must stay a legal file name
    # with "-bundle" and a "-<n>" suffix added (255 bytes on common file systems).
    wafer = re.sub(r"[^A-Za-z0-9._-]+", "_", wafer_id).strip("._")[:100].rstrip("._") or "wafer"
    return f"{when:%Y%m%d-%H%M%S}-{wafer}"


def _os_reason(exc: OSError, reading: bool = False) -> str:
    if exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        return "the disk is full (no space left)"
    if reading and exc.errno in (errno.EACCES, errno.EPERM):
        return "unreadable (permission denied)"
    if exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
        return "the folder is read-only or not writable"
    return exc.strerror or str(exc)


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        n = os.write(fd, view)
        view = view[n:]


def _lock_fd(fd: int) -> None:
    """Exclusive, non-blocking lock of an open file; OSError if another process holds it."""
    if fcntl is not None:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    else:
        os.lseek(fd, 0, os.SEEK_SET)
        msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)


def writer_pid(folder: str | Path) -> str | None:
    """The pid (as text, "?" if unknown) of the process that has the session
    open for writing, or None when nobody holds its lock. Read-only: a missing
    lock file means no writer, and none is created."""
    try:
        fd = os.open(Path(folder) / LOCK_NAME, os.O_RDONLY | _OPEN_FLAGS)
    except OSError:
        return None
    try:
        try:
            if fcntl is not None:
                fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
                fcntl.flock(fd, fcntl.LOCK_UN)
            else:
                msvcrt.locking(fd, msvcrt.LK_NBRLCK, 1)
                msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)
            return None
        except OSError:
            try:
                return os.read(fd, 32).decode("ascii", "replace").strip() or "?"
            except OSError:  # Windows refuses to read a locked range
                return "?"
    finally:
        os.close(fd)


def _fsync_dir(path: Path) -> None:
    """Make a rename or a new name in ``path`` durable (POSIX). Windows cannot open
    a folder for fsync; NTFS journals its metadata itself."""
    if not hasattr(os, "O_DIRECTORY"):
        return
    fd = os.open(path, os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


# --------------------------------------------------------------------------- reading


def _parse(raw: bytes) -> tuple[dict | None, str]:
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


def _refs(obj: Any) -> Iterator[tuple[str, str]]:
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


def _referenced_paths(journal_bytes: bytes) -> set[str]:
    """Paths of every file reference in the journal's lines: a regex over the raw
    bytes, ~20x faster than walking every parsed payload on a long session."""
    # a path without escapes is its bytes between the quotes (most are): json.loads
    # only for the rest, and once per distinct reference
    return {m[1:-1].decode("utf-8") if b"\\" not in m else json.loads(m)
            for m in set(_REF_RE.findall(journal_bytes))}


def _safe_rel(path: str) -> PurePosixPath | None:
    p = PurePosixPath(path)
    if p.is_absolute() or not p.parts or any(part in ("", ".", "..") for part in p.parts) or "\x00" in path:
        return None
    return p


def _data_files(root: Path) -> tuple[list[str], list[str]]:
    """(data files, leftover temp files) under data/, as POSIX paths relative to root."""
    files, temps = [], []
    base = root / DATA_DIR
    for dirpath, dirnames, filenames in os.walk(base):
        dirnames.sort()
        rel_dir = Path(dirpath).relative_to(root).as_posix()
        for name in sorted(filenames):
            (temps if _TEMP_RE.match(name) else files).append(f"{rel_dir}/{name}")
    return files, temps


def _sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


# --------------------------------------------------------------------------- writer


class Journal:
    """The one writer of a session folder (an exclusive flock on ``.lock``).

    Use :meth:`create` or :meth:`open`; close it (or use ``with``).
    """

    def __init__(self, root: Path, lock_fd: int) -> None:
        self.root = root
        self.session_id = root.name
        self.path = root / JOURNAL_NAME
        self._lock_fd = lock_fd
        self._fd: int | None = None
        # Only the last event stays in memory, so a long session's journal costs
        # nothing per event; events() reads the file (or hands over what open()
        # parsed, once).
        self._count = 0
        self._last: Event | None = None
        self._loaded: list[Event] | None = None
        self._size = 0
        self._broken: str | None = None
        self._mutex = threading.Lock()
        self._temp_n = 0
        self.recovered: Event | None = None

    # ------------------------------------------------------------ lifecycle

    @classmethod
    def create(cls, root: str | Path, session_id: str, unique: bool = False) -> "Journal":
        """Create ``root/session_id/`` with an empty journal and ``data/``.

        ``unique``: when that folder exists (the same wafer started twice in one
        second, two wafer ids that clean to the same text, a case-insensitive
        disk), take ``<session_id>-2``, ``-3``, ... instead of refusing.
        """
        if not re.match(r"^[A-Za-z0-9][A-Za-z0-9._-]*$", session_id):
            raise JournalError(f"session id {session_id!r}: expected letters, digits, '.', '_' or '-'")
        root = Path(root)
        if root.exists() and not root.is_dir():
            raise JournalError(f"{root}: is a file, not a folder; session folders need a folder to go into")
        try:
            root.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise JournalError(f"{root}: cannot create the folder for sessions: {_os_reason(exc)}") from None
        # The folder is built under a hidden staging name and renamed into place
        # whole, so a kill at any instant leaves either no session folder or one
        # with its journal (a killed start leaves only a '.creating-*' folder,
        # which no session list shows).
        try:
            staging = Path(tempfile.mkdtemp(prefix=f"{STAGING_PREFIX}{session_id}-", dir=root))
        except OSError as exc:
            raise JournalError(f"{root}: cannot create a session folder: {_os_reason(exc)}") from None
        lock_fd = cls._lock(staging)
        try:
            (staging / DATA_DIR).mkdir()
            fd = os.open(staging / JOURNAL_NAME, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_APPEND | _OPEN_FLAGS,
                         0o644)
            os.fsync(fd)
            _fsync_dir(staging)
        except OSError as exc:
            os.close(lock_fd)
            shutil.rmtree(staging, ignore_errors=True)
            raise JournalError(f"{root / session_id}: cannot create the journal: {_os_reason(exc)}") from None
        folder = root / session_id
        for n in range(1, 1000 if unique else 2):
            folder = root / (session_id if n == 1 else f"{session_id}-{n}")
            if folder.exists() or folder.is_symlink():
                continue
            try:
                # Atomic; of two processes racing for a name one wins, the other
                # finds the winner's folder not empty and tries the next name.
                os.rename(staging, folder)
                break
            except (FileExistsError, IsADirectoryError, NotADirectoryError):
                continue
            except OSError as exc:
                if exc.errno in (errno.ENOTEMPTY, errno.EEXIST):
                    continue
                os.close(fd)
                os.close(lock_fd)
                shutil.rmtree(staging, ignore_errors=True)
                raise JournalError(f"{folder}: cannot create the session folder: {_os_reason(exc)}") from None
        else:
            os.close(fd)
            os.close(lock_fd)
            shutil.rmtree(staging, ignore_errors=True)
            raise JournalError(f"{folder}: a session folder of that name exists already")
        journal = cls(folder, lock_fd)
        journal._fd = fd
        try:
            _fsync_dir(root)
        except OSError as exc:
            journal.close()
            raise JournalError(f"{folder}: cannot create the journal: {_os_reason(exc)}") from None
        return journal

    @classmethod
    def open(cls, folder: str | Path) -> "Journal":
        """Reopen a session for writing, recovering from a crash if needed."""
        folder = Path(folder)
        if not (folder / JOURNAL_NAME).is_file():
            raise NotASessionError(f"{folder}: not a session folder (no {JOURNAL_NAME})")
        journal = cls(folder, cls._lock(folder))
        try:
            journal._load_and_recover()
        except BaseException:
            journal.close()
            raise
        return journal

    @staticmethod
    def _lock(folder: Path) -> int:
        try:
            fd = os.open(folder / LOCK_NAME, os.O_RDWR | os.O_CREAT | _OPEN_FLAGS, 0o644)
        except OSError as exc:
            raise JournalError(f"{folder}: cannot open the session for writing: {_os_reason(exc)}") from None
        try:
            _lock_fd(fd)
        except OSError:
            try:
                os.lseek(fd, 0, os.SEEK_SET)
                holder = os.read(fd, 32).decode("ascii", "replace").strip() or "?"
            except OSError:  # Windows refuses to read a locked range
                holder = "?"
            finally:
                os.close(fd)
            raise JournalError(f"{folder}: the session is open for writing in another process "
                               f"(pid {holder}); close it there first") from None
        try:  # who holds it, for the message above; not needed for correctness
            os.ftruncate(fd, 0)
            os.lseek(fd, 0, os.SEEK_SET)
            os.write(fd, f"{os.getpid()}\n".encode())
        except OSError:
            pass
        return fd

    def close(self) -> None:
        with self._mutex:
            for fd in (self._fd, self._lock_fd):
                if fd is not None:
                    try:
                        os.close(fd)
                    except OSError:
                        pass
            self._fd = self._lock_fd = None  # type: ignore[assignment]
            self._broken = self._broken or "the journal is closed"

    def __enter__(self) -> "Journal":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------ reading

    def events(self) -> list[Event]:
        """Every event, in order. Right after :meth:`open` this hands over the
        events parsed there (once); otherwise it reads the file back."""
        with self._mutex:
            loaded, self._loaded = self._loaded, None
            if loaded is not None and len(loaded) == self._count:
                return loaded
            size = self._size
        with open(self.path, "rb") as fh:
            data = fh.read(size)
        out, prev = [], ZERO_HASH
        for raw in data.split(b"\n")[:-1]:
            rec = orjson.loads(raw)
            h = hashlib.sha256(raw).hexdigest()
            out.append(Event(rec["seq"], rec["ts"], rec["type"], rec["payload"], prev, h))
            prev = h
        return out

    @property
    def last(self) -> Event | None:
        return self._last

    def _load_and_recover(self) -> None:
        try:
            data = self.path.read_bytes()
        except OSError as exc:
            raise JournalError(f"{self.path}: cannot read: {_os_reason(exc, reading=True)}") from None
        body_end = data.rfind(b"\n") + 1
        lines = data[:body_end].split(b"\n")[:-1]
        prev, offset = ZERO_HASH, 0
        events: list[Event] = []
        torn_from = body_end if body_end < len(data) else None
        n_lines = len(lines)
        for i, raw in enumerate(lines, start=1):
            # Only bytes after the last newline are a torn line (one write() per
            # line, newline last): a complete line that does not read is damage,
            # wherever it is, and is never moved aside.
            fields = _tail_fields(raw) if i < n_lines else None
            if fields is not None:  # inside the chain: the next line's prev vouches for its bytes
                seq, line_prev, ts, type_ = fields
                why = ""
            else:  # the last line (nothing after it vouches for it) or an odd one: read it whole
                rec, why = _parse(raw)
                if rec is not None:
                    seq, line_prev, ts, type_ = rec["seq"], rec["prev"], rec["ts"], rec["type"]
            if why or seq != i or line_prev != prev:
                if not why:
                    why = (f"seq {seq}, expected {i}" if seq != i
                           else "prev does not match the line before (edited, removed or reordered lines)")
                raise JournalError(f"{self.path}, line {i}: {why}; the journal is damaged "
                                   f"and cannot be appended to: run `probelog verify {self.root}`")
            h = hashlib.sha256(raw).hexdigest()
            events.append(cast(Event, _LazyEvent(seq, ts, type_, prev, h, raw)))  # read like an Event
            prev = h
            offset += len(raw) + 1
        self._size = offset
        self._loaded = events
        self._count = len(events)
        self._last = events[-1] if events else None
        try:
            self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | _OPEN_FLAGS)
        except OSError as exc:
            raise JournalError(f"{self.path}: cannot open for appending: {_os_reason(exc)}") from None
        self._recover(data, torn_from)

    def _recover(self, data: bytes, torn_from: int | None) -> None:
        torn_name = None
        try:
            if torn_from is not None:
                torn_name = self._move_torn_tail(data[torn_from:])
                os.ftruncate(self._fd, torn_from)
                os.fsync(self._fd)
            referenced = _referenced_paths(data[:self._size])
            files, temps = _data_files(self.root)
        except OSError as exc:
            raise JournalError(f"{self.root}: cannot recover the session: {_os_reason(exc)}") from None
        orphans = [p for p in files if p not in referenced]
        # Temporary files stay (nothing is deleted); report each one only once.
        known = {t for ev in self._loaded or () if ev.type == "recovered"
                 for t in ev.payload.get("leftover_temp", []) if isinstance(t, str)}
        temps = [t for t in temps if t not in known]
        if torn_name is None and not orphans and not temps:
            return
        adopted = [FileRef(p, _sha256_file(self.root / p)).to_json() for p in orphans]
        parts = []
        if torn_name:
            parts.append(f"moved a torn last line ({len(data) - torn_from} bytes) to {torn_name}")
        if adopted:
            parts.append(f"adopted {len(adopted)} data file(s) no event named")
        if temps:
            parts.append(f"left {len(temps)} unfinished temporary file(s) in place")
        self.recovered = self.append("recovered", {
            "torn_line": torn_name,
            "torn_bytes": 0 if torn_from is None else len(data) - torn_from,
            "adopted": adopted,
            "leftover_temp": temps,
            "message": "; ".join(parts) + "; nothing was deleted",
        })

    def _move_torn_tail(self, tail: bytes) -> str:
        existing = [int(m.group(1)) for p in self.root.iterdir()
                    if (m := re.fullmatch(re.escape(TORN_PREFIX) + r"(\d+)", p.name))]
        name = f"{TORN_PREFIX}{max(existing, default=0) + 1}"
        self._atomic_write([(self.root / name, tail)])
        return name

    # ------------------------------------------------------------ writing

    def _usable(self) -> int:
        if self._broken is not None or self._fd is None:
            raise JournalError(f"{self.path}: {self._broken or 'the journal is closed'}")
        return self._fd

    def append(self, type: str, payload: dict[str, Any]) -> Event:
        """Write one event and fsync it; the returned Event is acknowledged."""
        if not isinstance(type, str) or not type:
            raise JournalError("an event needs a non-empty type")
        if not isinstance(payload, dict):
            raise JournalError(f"the payload of a {type!r} event must be a dict, got {payload.__class__.__name__}")
        with self._mutex:
            fd = self._usable()
            seq = self._count + 1
            prev = self._last.hash if self._last is not None else ZERO_HASH
            record = {"seq": seq, "ts": _utc_now(), "type": type, "payload": payload, "prev": prev}
            try:
                line = canonical_json(record)
            except (TypeError, ValueError, RecursionError) as exc:
                raise JournalError(f"the payload of a {type!r} event cannot be written as JSON: {exc}") from None
            try:
                _write_all(fd, line + b"\n")
            except OSError as exc:
                self._undo(exc, "write")
            try:
                os.fsync(fd)
            except OSError as exc:
                # After a failed fsync the kernel's view of the file is unknown
                # (the error may be reported once only): stop writing.
                self._undo(exc, "fsync", stop=True)
            self._size += len(line) + 1
            # Keep what a reader of the file gets back (NaN as None, numpy as
            # lists), decoupled from the caller's dict.
            stored = orjson.loads(line)["payload"]
            event = Event(seq, record["ts"], type, stored, prev, hashlib.sha256(line).hexdigest())
            self._count += 1
            self._last = event
            if self._loaded is not None:  # not handed over by events() yet
                self._loaded.append(event)
            return event

    def _undo(self, exc: OSError, step: str, stop: bool = False) -> None:
        """Cut the journal back to its last acknowledged line, then raise."""
        try:
            os.ftruncate(self._fd, self._size)  # type: ignore[arg-type]
            os.fsync(self._fd)  # type: ignore[arg-type]
        except OSError:
            stop = True  # the torn line stays; reopening moves it aside
        where = f"{self.path}: event {self._count + 1} was not written ({step} failed: {_os_reason(exc)})"
        if stop:
            self._broken = "stopped after a failed write; reopen the session to continue"
            raise JournalError(f"{where}; the journal is intact up to event {self._count}; "
                               "reopen the session once the disk is fixed") from None
        raise JournalError(f"{where}; the journal is intact up to event {self._count}; "
                           "free space or fix the folder and retry") from None

    def write_file(self, relpath: str, data: bytes) -> FileRef:
        """Store ``data`` at ``relpath`` (under ``data/``) atomically and durably.

        Never overwrites: data files are immutable once written.
        """
        return self.write_files([(relpath, data)])[0]

    def write_files(self, items: list[tuple[str, bytes]]) -> list[FileRef]:
        """Store several files as :meth:`write_file` does, sharing one fsync per
        folder (a landing's raw and corrected sweeps land in one folder)."""
        targets = []
        for relpath, data in items:
            rel = _safe_rel(relpath)
            if rel is None or rel.parts[0] != DATA_DIR or len(rel.parts) < 2 or any(p.startswith(".") for p in rel.parts):
                raise JournalError(f"{relpath!r}: expected a relative path under {DATA_DIR}/ without '..' or hidden parts")
            target = self.root / rel
            if os.path.lexists(target) or target in (t for _, t, _ in targets):
                raise JournalError(f"{target}: exists already; data files are never overwritten")
            targets.append((rel, target, data))
        with self._mutex:
            self._usable()
        try:
            for _, target, _ in targets:
                self._make_dirs(target.parent)
            self._atomic_write([(target, data) for _, target, data in targets])
        except OSError as exc:
            raise JournalError(f"{exc.filename or targets[0][1]}: not written: {_os_reason(exc)}") from None
        return [FileRef(rel.as_posix(), hashlib.sha256(data).hexdigest()) for rel, _, data in targets]

    def _make_dirs(self, folder: Path) -> None:
        missing = []
        p = folder
        while not p.exists():
            missing.append(p)
            p = p.parent
        for d in reversed(missing):
            d.mkdir()
            _fsync_dir(d.parent)  # the new folder's name is durable too

    def _atomic_write(self, files: list[tuple[Path, bytes]]) -> None:
        """Temp name, write, fsync; then rename each into place and fsync each
        folder once. A crash leaves either the old state or the whole file."""
        temps: list[Path] = []
        try:
            for target, data in files:
                self._temp_n += 1
                temp = target.with_name(f".{target.name}.tmp-{os.getpid()}-{self._temp_n}")
                fd = os.open(temp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | _OPEN_FLAGS, 0o644)
                temps.append(temp)
                try:
                    _write_all(fd, data)
                    os.fsync(fd)
                finally:
                    os.close(fd)
            for temp, (target, _) in zip(temps, files, strict=False):
                os.replace(temp, target)
        except BaseException:
            for temp in temps:  # our own unfinished temporary files, never a data file
                try:
                    os.unlink(temp)
                except OSError:
                    pass
            raise
        for folder in dict.fromkeys(target.parent for target, _ in files):
            _fsync_dir(folder)


# --------------------------------------------------------------------------- verify


def verify(folder: str | Path, anchor: tuple[int, str] | None = None) -> VerifyReport:
    """Re-walk the hash chain and every file hash of a session, read-only.

    ``anchor`` (seq, sha256 of that line) is a hash kept off the machine: a chain
    alone cannot tell a rewritten or cut-off end, the anchor can.
    Raises NotASessionError if ``folder`` holds no journal, SessionInUseError
    while another process has it open for writing.
    """
    root = Path(folder)
    path = root / JOURNAL_NAME
    if not path.is_file():
        raise NotASessionError(f"{root}: not a session folder (no {JOURNAL_NAME})")
    pid = writer_pid(root)
    if pid is not None:  # its newest files have no event yet: a walk now would list them as damage
        raise SessionInUseError(f"{root}: the session is in use (open for writing by pid {pid}); "
                                "verify it once that run has ended")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise JournalError(f"{path}: cannot read: {_os_reason(exc, reading=True)}") from None
    problems: list[Problem] = []
    body_end = data.rfind(b"\n") + 1
    lines = data[:body_end].split(b"\n")[:-1]
    prev, last_seq = ZERO_HASH, 0
    refs: list[tuple[int, str, str]] = []
    adopted: list[tuple[int, str, str]] = []
    hashes: dict[int, str] = {}
    for i, raw in enumerate(lines, start=1):
        h = hashlib.sha256(raw).hexdigest()
        hashes[i] = h
        rec, why = _parse(raw)
        if rec is None:
            problems.append(Problem(i, JOURNAL_NAME, "an event (canonical JSON)", _snippet(raw), why))
        else:
            if rec["seq"] != last_seq + 1:
                problems.append(Problem(i, JOURNAL_NAME, f"seq {last_seq + 1}", f"seq {rec['seq']}",
                                        "events out of order or missing"))
            if rec["prev"] != prev:
                problems.append(Problem(i, JOURNAL_NAME, f"prev {prev}", f"prev {rec['prev']}",
                                        f"line {i - 1} was edited, or lines were removed or reordered"
                                        if i > 1 else "the first event must have a prev of 64 zeros"))
            last_seq = rec["seq"]
            if rec["type"] == "recovered":  # adopted files: present, but nothing vouches for them
                others = {k: v for k, v in rec["payload"].items() if k != "adopted"}
                adopted.extend((i, p, s) for p, s in _refs({"adopted": rec["payload"].get("adopted")}))
                refs.extend((i, p, s) for p, s in _refs(others))
            else:
                refs.extend((i, p, s) for p, s in _refs(rec["payload"]))
        prev = h
    if body_end < len(data):
        problems.append(Problem(len(lines) + 1, JOURNAL_NAME, "a line ending in a newline",
                                f"{len(data) - body_end} bytes without one",
                                "torn last line (a crash while writing); opening the session moves it aside"))
    if anchor is not None:
        # The anchor says "the journal ended here": line SEQ has this hash and
        # there are SEQ lines. Events after it were appended since it was taken
        # (a resume: take a new anchor) or forged.
        seq, want = anchor
        got = hashes.get(seq)
        if got != want:
            problems.append(Problem(seq, JOURNAL_NAME, f"sha256 {want}", f"sha256 {got or 'no such line'}",
                                    "the anchored line differs from the hash kept off the machine"))
        if len(lines) > seq:
            problems.append(Problem(seq + 1, JOURNAL_NAME, f"{seq} events (the anchored count)",
                                    f"{len(lines)} events",
                                    f"{len(lines) - seq} event(s) after the anchored last one: appended since "
                                    "the anchor was taken (after a resume, take a new anchor) or forged"))
    file_problems, warnings = _check_files(root, refs, adopted)
    problems.extend(file_problems)
    return VerifyReport(ok=not problems, events=len(lines), problems=problems,
                        last_seq=last_seq, last_hash=prev, warnings=warnings)


def _snippet(raw: bytes) -> str:
    text = raw[:60].decode("utf-8", "replace")
    return repr(text + ("..." if len(raw) > 60 else ""))


def _check_files(root: Path, refs: list[tuple[int, str, str]],
                 adopted: list[tuple[int, str, str]] = ()) -> tuple[list[Problem], list[Problem]]:
    """(problems, warnings) of the data files: every reference checked against
    the file on disk; an adopted file (listed by a ``recovered`` event) is
    checked too, and is a warning unless its hash is one an event recorded."""
    problems: list[Problem] = []
    warnings: list[Problem] = []
    digests: dict[str, str | None] = {}
    vouched = {want for _, _, want in refs}
    for line, rel, want in adopted:
        if want not in vouched:
            warnings.append(Problem(line, rel, "a file whose content an event recorded",
                                    f"adopted on resume, sha256 {want[:12]}... recorded by no event",
                                    "no event vouches for this file (a crash before its event, "
                                    "or a file dropped into data/ by hand)"))
    for line, rel, want in [*refs, *adopted]:  # an adopted file must still hash as recorded
        safe = _safe_rel(rel)
        if safe is None:
            problems.append(Problem(line, rel, "a path inside the session folder", repr(rel), "unsafe file path"))
            continue
        key = safe.as_posix()
        if key not in digests:
            try:
                digests[key] = _sha256_file(root / safe)
            except FileNotFoundError:
                digests[key] = None
            except OSError as exc:
                digests[key] = f"unreadable ({_os_reason(exc, reading=True)})"
        got = digests[key]
        if got is None:
            problems.append(Problem(line, key, f"sha256 {want}", "missing", "data file named by the event is missing"))
        elif got != want:
            problems.append(Problem(line, key, f"sha256 {want}", f"sha256 {got}" if _HEX64.match(got) else got,
                                    "data file differs from what the event recorded"))
    try:
        files, _ = _data_files(root)
    except OSError:
        files = []
    for rel in files:
        if rel not in digests:
            problems.append(Problem(None, rel, "a file named by an event", "no event names it",
                                    "unreferenced data file (a crash before its event); opening the session adopts it"))
    return problems, warnings
