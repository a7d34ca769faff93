"""The session journal: append-only, hash-chained, crash-safe; and its data store.

A session is a folder ``<root>/<session_id>/`` holding ``journal.jsonl`` (one
event a line, canonical JSON, see docs/journal-events.md) and ``data/`` (the
Touchstone files and cal sets the events reference by path and SHA-256).

Durability (POSIX): a data file is written under a temporary name in its own
folder, fsync'ed, renamed into place and the folder fsync'ed; an event line is
written with one ``write`` on an O_APPEND descriptor and fsync'ed. An event is
acknowledged (``append`` returns) only after its fsync returned, so a crash
loses at most the event being written: its torn line is moved aside on reopen.

The line format lives in :mod:`probelog.journal_format`, the file-system side in
:mod:`probelog.journal_files`, reading back in :mod:`probelog.journal_read` and
``verify`` in :mod:`probelog.journal_verify`; their public names are importable
from here. Besides the standard library only orjson is used.
"""

from __future__ import annotations

import hashlib
import os
import re
import threading
from array import array
from pathlib import Path
from typing import IO, Any

import orjson

from probelog.journal_files import (OPEN_FLAGS, atomic_write, data_files, fsync_dir, lock_session, make_dirs,
                                    make_session_folder, os_reason, safe_rel, sha256_file, write_all, writer_pid)
from probelog.journal_format import (DATA_DIR, JOURNAL_NAME, LOCK_NAME, STAGING_PREFIX, TORN_PREFIX, ZERO_HASH,
                                     Event, FileRef, JournalError, NotASessionError, SessionInUseError,
                                     canonical_json, new_session_id, referenced_paths, utc_now)
from probelog.journal_read import (Prefix, PrefixHash, head_event, pack_offsets, parse_events, reported_temps,
                                   walk_chain)
from probelog.journal_verify import Problem, VerifyReport, verify

__all__ = ["DATA_DIR", "JOURNAL_NAME", "LOCK_NAME", "STAGING_PREFIX", "TORN_PREFIX", "ZERO_HASH", "Event",
           "FileRef", "Journal", "JournalError", "NotASessionError", "Prefix", "Problem", "SessionInUseError",
           "VerifyReport", "canonical_json", "new_session_id", "verify", "writer_pid"]

_write_all = write_all  # a name of this module's own: the full-disk tests replace it here

class Journal:
    """The one writer of a session folder (an exclusive flock on ``.lock``).

    Use :meth:`create` or :meth:`open`; close it (or use ``with``).
    """

    def __init__(self, root: Path, lock_fd: int) -> None:
        self.root = root
        self.session_id = root.name
        self.path = root / JOURNAL_NAME
        self._lock_fd: int | None = lock_fd
        self._fd: int | None = None
        # Only the last event stays in memory, so a long session's journal costs
        # nothing per event but where its line starts; events() reads the file
        # (or hands over what open() parsed, once).
        self._count = 0
        self._last: Event | None = None
        self._loaded: list[Event] | None = None
        self._loaded_after = 0  # the events open() parsed are those after this seq
        self._size = 0
        self._starts = array("Q")  # byte where each line starts
        self._referenced: set[str] = set()  # data-file paths the lines name
        self._temps_reported: set[str] = set()  # leftover temp files a recovered event named
        self._hasher: PrefixHash | None = None  # of the first _size bytes, made when first asked for
        self._broken: str | None = None
        self._mutex = threading.Lock()
        self._temp_n = 0
        self.recovered: Event | None = None
        self.trusted_seq = 0  # lines open() took on a snapshot's word (one hash) instead of walking them

    # ------------------------------------------------------------ lifecycle

    @classmethod
    def create(cls, root: str | Path, session_id: str, unique: bool = False) -> Journal:
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
            raise JournalError(f"{root}: cannot create the folder for sessions: {os_reason(exc)}") from None
        folder, fd, lock = make_session_folder(root, session_id, unique)
        journal = cls(folder, lock)
        journal._fd = fd
        journal._hasher = PrefixHash()
        try:
            fsync_dir(root)
        except OSError as exc:
            journal.close()
            raise JournalError(f"{folder}: cannot create the journal: {os_reason(exc)}") from None
        return journal

    @classmethod
    def open(cls, folder: str | Path, prefix: Prefix | None = None) -> Journal:
        """Reopen a session for writing, recovering from a crash if needed.

        ``prefix`` (from a state snapshot): when the file's first ``prefix.size``
        bytes hash to ``prefix.sha256``, those lines are taken as checked and only
        the lines after them are walked (:attr:`trusted_seq` says so); otherwise
        the whole chain is walked.
        """
        folder = Path(folder)
        if not (folder / JOURNAL_NAME).is_file():
            raise NotASessionError(f"{folder}: not a session folder (no {JOURNAL_NAME})")
        journal = cls(folder, lock_session(folder))
        try:
            journal._load_and_recover(prefix)
        except BaseException:
            journal.close()
            raise
        return journal

    def close(self) -> None:
        with self._mutex:
            for fd in (self._fd, self._lock_fd):
                if fd is not None:
                    try:
                        os.close(fd)
                    except OSError:
                        pass
            self._fd = self._lock_fd = None
            self._broken = self._broken or "the journal is closed"

    def __enter__(self) -> Journal:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------ reading

    def events(self, after: int = 0) -> list[Event]:
        """Every event after seq ``after``, in order. Right after :meth:`open`
        this hands over the events parsed there (once); otherwise it reads the
        file back."""
        with self._mutex:
            loaded, self._loaded = self._loaded, None
            if loaded is not None and self._loaded_after == after and after + len(loaded) == self._count:
                return loaded
            if after >= self._count:
                return []
            start, size = self._starts[after], self._size
            head = self._starts[after - 1] if after else 0
        with self.path.open("rb") as fh:
            fh.seek(head)
            data = fh.read(size - head)
        prev = hashlib.sha256(data[:start - head - 1]).hexdigest() if after else ZERO_HASH
        return parse_events(data[start - head:], after, prev)

    @property
    def last(self) -> Event | None:
        return self._last

    def prefix(self) -> Prefix:
        """The journal as it is now, as a :class:`Prefix` a state snapshot keeps."""
        with self._mutex:
            if self._hasher is None:  # opened by walking the chain: hash what was there once
                self._hasher = PrefixHash.of_file(self.path, self._size)
                if self._hasher is None:
                    raise JournalError(f"{self.path}: shorter than the {self._size} bytes written")
            return Prefix(size=self._size, sha256=self._hasher.hexdigest(), seq=self._count,
                          last_hash=self._last.hash if self._last else ZERO_HASH,
                          offsets=pack_offsets(self._starts, self._size), referenced=tuple(sorted(self._referenced)),
                          reported_temps=tuple(sorted(self._temps_reported)))

    def _load_and_recover(self, prefix: Prefix | None) -> None:
        try:
            with self.path.open("rb") as fh:
                base = self._trust(fh, prefix) if prefix is not None else 0
                if not base:
                    fh.seek(0)
                data = fh.read()
        except OSError as exc:
            raise JournalError(f"{self.path}: cannot read: {os_reason(exc, reading=True)}") from None
        body_end = data.rfind(b"\n") + 1
        lines = data[:body_end].split(b"\n")[:-1]
        # Only bytes after the last newline are a torn line (one write() per line,
        # newline last): a complete line that does not read is damage, wherever
        # it is, and is never moved aside.
        events = walk_chain(lines, self._count, self._last.hash if self._last else ZERO_HASH, str(self.path))
        offset = base
        for raw in lines:
            self._starts.append(offset)
            offset += len(raw) + 1
        self._size = offset
        self._loaded, self._loaded_after = events, self._count
        self._count += len(events)
        self._last = events[-1] if events else self._last
        if self._hasher is not None:
            self._hasher.update(memoryview(data)[:body_end])
        self._referenced |= referenced_paths(data[:body_end])
        self._temps_reported |= reported_temps(e.payload for e in events if e.type == "recovered")
        try:
            self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | OPEN_FLAGS)
        except OSError as exc:
            raise JournalError(f"{self.path}: cannot open for appending: {os_reason(exc)}") from None
        self._recover(data[body_end:], body_end < len(data))

    def _trust(self, fh: IO[bytes], prefix: Prefix) -> int:
        """Take the first ``prefix.size`` bytes on the prefix's word when they hash
        to it: returns that size (the file is positioned after it), else 0."""
        starts = prefix.line_starts()
        if starts is None or not 0 < prefix.size <= os.fstat(fh.fileno()).st_size:
            return 0
        hasher = PrefixHash.of_file(self.path, prefix.size)
        if hasher is None or hasher.hexdigest() != prefix.sha256:
            return 0
        fh.seek(starts[-1])
        raw = fh.read(prefix.size - starts[-1])
        head = head_event(raw[:-1], prefix) if raw.endswith(b"\n") else None
        if head is None:
            return 0
        fh.seek(prefix.size)
        self._hasher, self._starts, self._count, self._last = hasher, starts, prefix.seq, head
        self._referenced, self._temps_reported = set(prefix.referenced), set(prefix.reported_temps)
        self.trusted_seq = prefix.seq
        return prefix.size

    def _recover(self, torn: bytes, is_torn: bool) -> None:
        torn_name = None
        try:
            if is_torn:
                torn_name = self._move_torn_tail(torn)
                os.ftruncate(self._usable(), self._size)
                os.fsync(self._usable())
            files, temps = data_files(self.root)
        except OSError as exc:
            raise JournalError(f"{self.root}: cannot recover the session: {os_reason(exc)}") from None
        orphans = [p for p in files if p not in self._referenced]
        # Temporary files stay (nothing is deleted); report each one only once.
        temps = [t for t in temps if t not in self._temps_reported]
        if torn_name is None and not orphans and not temps:
            return
        adopted = [FileRef(p, sha256_file(self.root / p)).to_json() for p in orphans]
        parts = []
        if torn_name:
            parts.append(f"moved a torn last line ({len(torn)} bytes) to {torn_name}")
        if adopted:
            parts.append(f"adopted {len(adopted)} data file(s) no event named")
        if temps:
            parts.append(f"left {len(temps)} unfinished temporary file(s) in place")
        self.recovered = self.append("recovered", {
            "torn_line": torn_name,
            "torn_bytes": len(torn) if is_torn else 0,
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
            record = {"seq": seq, "ts": utc_now(), "type": type, "payload": payload, "prev": prev}
            try:
                line = canonical_json(record)
            except (TypeError, ValueError, RecursionError) as exc:
                raise JournalError(f"the payload of a {type!r} event cannot be written as JSON: {exc}") from None
            try:
                _write_all(fd, line + b"\n")
            except OSError as exc:
                self._undo(fd, exc, "write")
            try:
                os.fsync(fd)
            except OSError as exc:
                # After a failed fsync the kernel's view of the file is unknown
                # (the error may be reported once only): stop writing.
                self._undo(fd, exc, "fsync", stop=True)
            self._starts.append(self._size)
            self._size += len(line) + 1
            if self._hasher is not None:
                self._hasher.update(line + b"\n")
            self._referenced |= referenced_paths(line)
            # Keep what a reader of the file gets back (NaN as None, numpy as
            # lists), decoupled from the caller's dict.
            stored = orjson.loads(line)["payload"]
            if type == "recovered":
                self._temps_reported |= reported_temps([stored])
            event = Event(seq, str(record["ts"]), type, stored, prev, hashlib.sha256(line).hexdigest())
            self._count += 1
            self._last = event
            if self._loaded is not None:  # not handed over by events() yet
                self._loaded.append(event)
            return event

    def _undo(self, fd: int, exc: OSError, step: str, stop: bool = False) -> None:
        """Cut the journal back to its last acknowledged line, then raise."""
        try:
            os.ftruncate(fd, self._size)
            os.fsync(fd)
        except OSError:
            stop = True  # the torn line stays; reopening moves it aside
        where = f"{self.path}: event {self._count + 1} was not written ({step} failed: {os_reason(exc)})"
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
        targets: list[tuple[str, Path, bytes]] = []
        for relpath, data in items:
            rel = safe_rel(relpath)
            if rel is None or rel.parts[0] != DATA_DIR or len(rel.parts) < 2 or any(p.startswith(".") for p in rel.parts):
                raise JournalError(f"{relpath!r}: expected a relative path under {DATA_DIR}/ without '..' or hidden parts")
            target = self.root / rel
            if os.path.lexists(target) or target in (t for _, t, _ in targets):
                raise JournalError(f"{target}: exists already; data files are never overwritten")
            targets.append((rel.as_posix(), target, data))
        with self._mutex:
            self._usable()
        try:
            for _, target, _ in targets:
                make_dirs(target.parent)
            self._atomic_write([(target, data) for _, target, data in targets])
        except OSError as exc:
            raise JournalError(f"{exc.filename or targets[0][1]}: not written: {os_reason(exc)}") from None
        return [FileRef(rel, hashlib.sha256(data).hexdigest()) for rel, _, data in targets]

    def _atomic_write(self, files: list[tuple[Path, bytes]]) -> None:
        atomic_write(files, self._temp_tag)

    def _temp_tag(self) -> str:
        self._temp_n += 1
        return f"{os.getpid()}-{self._temp_n}"

