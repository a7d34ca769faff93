"""State snapshots: resume takes the journal's first lines on one hash and folds
only the events after them.

A snapshot (``state.snapshot`` beside the journal, msgpack through msgspec)
holds the journal prefix it was folded from (:class:`probelog.journal.Prefix`:
byte length, one SHA-256 over those bytes, where each line starts, the data
files they name), the state folded from it, and the SHA-256 of that state's
bytes. What a landing carries beyond its place in the walk (checks, metrics,
files: most of a long session's bytes) is not copied in: the state keeps the
line number and reads the line back when asked for
(:class:`probelog.state_records.Bulk`), from the prefix the hash vouched for.

Resume (:func:`open_session`): when the journal's first ``size`` bytes still hash
to the prefix's SHA-256, those lines are neither parsed nor chain-walked again
(they were when the live journal wrote them); only the lines after them are,
and only their events are folded onto the state. The snapshot is taken only
when one of those later events is the ``checkpoint`` event the engine journaled
right after writing it, naming its seq and the SHA-256 of the snapshot file: a
snapshot rewritten afterwards (its own hashes recomputed) or written by anything
but the engine is not vouched for by the hash-chained journal and is ignored. A
prefix that differs (an edited line), a snapshot that does not decode, whose
state bytes do not hash as recorded, or of another version: the whole chain is
walked and every event folded, so tampering is caught as before. The journal
stays the record: deleting the snapshot changes nothing but speed.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path
from typing import Any

import msgspec

from probelog import events as ev
from probelog import state as st
from probelog.journal import JOURNAL_NAME, Journal, Prefix
from probelog.journal_read import LineSource, read_prefix
from probelog.state_records import Bulk, Measured

SNAPSHOT_NAME = "state.snapshot"
# The engine writes a snapshot every EVERY events (and when it closes): resume then
# folds at most EVERY - 1 events (about 60 us each). Writing one grows with the
# session (a 100,000-event state: 4.7 MB, about 0.1 s with its fsync), so not after
# every event.
EVERY = 2_000
_VERSION = 3  # 2: the state holds line figures; 3: the journal prefix and the state's hash,
# landings' bulk left in the journal


class _Snapshot(msgspec.Struct, frozen=True):
    version: int
    prefix: Prefix
    state_sha256: str
    state: msgspec.Raw


def _enc_hook(obj: Any) -> Any:
    if isinstance(obj, Bulk):
        return obj.seq  # the journal line it reads back from
    raise TypeError(f"{type(obj).__name__} has no snapshot form")


_ENCODER = msgspec.msgpack.Encoder(enc_hook=_enc_hook)
_HEAD = msgspec.msgpack.Decoder(_Snapshot)


def save_state(session_dir: Path, state: st.SessionState, prefix: Prefix | None = None) -> str:
    """Write the snapshot of ``state`` atomically (temp file, fsync, rename);
    returns the SHA-256 (hex) of the file's bytes, for the ``checkpoint`` event
    that vouches for it (resume ignores a snapshot no such event names).

    ``prefix``: the journal as the state was folded from it (``Journal.prefix()``,
    kept by the live journal); read from the file when not given."""
    folder = Path(session_dir)
    prefix = prefix if prefix is not None else read_prefix(folder, state.seq)
    if prefix.seq != state.seq or prefix.last_hash != (state.hash or prefix.last_hash):
        raise ValueError(f"{folder}: the state is at event {state.seq}, the journal prefix at {prefix.seq}")
    body = _ENCODER.encode(state)
    data = _ENCODER.encode(_Snapshot(_VERSION, prefix, hashlib.sha256(body).hexdigest(), msgspec.Raw(body)))
    path = folder / SNAPSHOT_NAME
    tmp = path.with_name(f".{SNAPSHOT_NAME}.tmp-{os.getpid()}")
    with open(tmp, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)
    return hashlib.sha256(data).hexdigest()


def _read(folder: Path) -> tuple[_Snapshot, str] | None:
    """The snapshot and the SHA-256 of its file's bytes, or None."""
    try:
        data = (folder / SNAPSHOT_NAME).read_bytes()
        snap = _HEAD.decode(data)
    except (OSError, msgspec.DecodeError, msgspec.ValidationError):
        return None
    return (snap, hashlib.sha256(data).hexdigest()) if snap.version == _VERSION else None


def snapshot_prefix(session_dir: Path | str) -> Prefix | None:
    """The journal prefix ``session_dir``'s snapshot was folded from, or None."""
    read = _read(Path(session_dir))
    return read[0].prefix if read is not None else None


class _Lines:
    """Reads a landing's event back from the journal for a restored state."""

    def __init__(self, folder: Path, prefix: Prefix) -> None:
        path = folder / JOURNAL_NAME
        self._lines = LineSource(path, prefix)
        self.decoder = ev.Decoder(str(path))

    def load(self, seq: int) -> tuple[str, Measured]:
        e = self.decoder.line(self._lines.line(seq))
        if e.seq != seq or not isinstance(e.data, (ev.Landing, ev.Drift, ev.CalVerification, ev.Precheck)):
            raise ev.EventError(f"{self.decoder.source}, line {seq}: not the measurement the snapshot names")
        return e.ts, e.data

    def dec_hook(self, type_: type, obj: Any) -> Any:
        if type_ is Bulk and isinstance(obj, int):
            return Bulk(obj, load=self.load)
        # msgspec turns a TypeError here into a ValidationError, which _restore
        # takes as "the snapshot does not decode": every event is folded instead
        raise TypeError(f"{type_.__name__} has no snapshot form")


def _restore(folder: Path, snap: _Snapshot) -> st.SessionState | None:
    """The snapshot's state, or None when its bytes do not hash as recorded or do not decode."""
    if hashlib.sha256(snap.state).hexdigest() != snap.state_sha256:
        return None
    try:
        lines = _Lines(folder, snap.prefix)
        state = msgspec.msgpack.decode(snap.state, type=st.SessionState, dec_hook=lines.dec_hook)
    except (msgspec.DecodeError, msgspec.ValidationError, ev.EventError, ValueError):
        return None
    if state.seq != snap.prefix.seq:
        return None
    lines.decoder.schema = max(1, state.opened.schema) if state.opened else 1
    return state


def open_session(session_dir: Path | str) -> tuple[Journal, st.SessionState]:
    """Open ``session_dir``'s journal for writing (its crash recovery included)
    and the state after its last event: the snapshot's, when the journal's prefix
    still hashes as it says and a later event vouches for it, plus the events
    after it; else every event folded."""
    folder = Path(session_dir)
    read = _read(folder)
    journal = Journal.open(folder, read[0].prefix if read is not None else None)
    try:
        return journal, load_state(folder, journal, read)
    except BaseException:
        journal.close()
        raise


def load_state(session_dir: Path, journal: Journal, read: tuple[_Snapshot, str] | None = None) -> st.SessionState:
    """The state after every event of the open ``journal``."""
    folder = Path(session_dir)
    dec = ev.Decoder(str(folder / JOURNAL_NAME))
    if read is not None and journal.trusted_seq == read[0].prefix.seq > 0:
        snap, file_sha = read
        base = _restore(folder, snap)
        if base is not None:
            dec.schema = max(1, base.opened.schema) if base.opened else 1
            tail = [dec.event(r.seq, r.ts, r.type, r.payload, r.hash) for r in journal.events(after=base.seq)]
            if any(isinstance(e.data, ev.Checkpoint) and e.data.seq == base.seq and e.data.sha256 == file_sha
                   for e in tail):
                return st.fold(tail, base)
        dec = ev.Decoder(str(folder / JOURNAL_NAME))
    return st.fold(dec.event(r.seq, r.ts, r.type, r.payload, r.hash) for r in journal.events())
