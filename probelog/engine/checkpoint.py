"""State snapshots: resume folds only the events after the last snapshot.

A snapshot (``state.snapshot`` beside the journal, msgpack through msgspec) holds
the folded state after event ``seq`` and that line's SHA-256. It is used only
when the journal's line ``seq`` still has that hash (the chain is verified when
the journal opens, so everything up to ``seq`` is the same journal the snapshot
was folded from); otherwise, or when it does not decode, every event is folded.
The journal stays the record: deleting the snapshot changes nothing but speed.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any, Sequence

import msgspec

from probelog import events as ev
from probelog import state as st

SNAPSHOT_NAME = "state.snapshot"
# The engine writes a snapshot every EVERY events (and when it closes): resume then
# folds at most EVERY - 1 events. Writing one costs about as much as reading it
# (size grows with the session), so not after every event.
EVERY = 5_000


class _Snapshot(msgspec.Struct, frozen=True):
    version: int
    seq: int
    hash: str
    state: st.SessionState


_VERSION = 2  # 2: the state holds line figures (a version-1 snapshot would lack those before it)
_ENCODER = msgspec.msgpack.Encoder()
_DECODER = msgspec.msgpack.Decoder(_Snapshot)


def save_state(session_dir: Path, state: st.SessionState) -> Path:
    """Write the snapshot atomically (temp file, fsync, rename)."""
    path = Path(session_dir) / SNAPSHOT_NAME
    tmp = path.with_name(f".{SNAPSHOT_NAME}.tmp-{os.getpid()}")
    data = _ENCODER.encode(_Snapshot(_VERSION, state.seq, state.hash, state))
    with open(tmp, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)
    return path


def snapshot_of(session_dir: Path, records: Sequence[Any]) -> st.SessionState | None:
    """The snapshot's state when it matches ``records`` (journal.Event list), else None."""
    path = Path(session_dir) / SNAPSHOT_NAME
    try:
        snap = _DECODER.decode(path.read_bytes())
    except (OSError, msgspec.DecodeError, msgspec.ValidationError):
        return None
    if snap.version != _VERSION or not 0 < snap.seq <= len(records):
        return None
    if records[snap.seq - 1].hash != snap.hash or snap.state.seq != snap.seq:
        return None
    return snap.state


def load_state(session_dir: Path, records: Sequence[Any]) -> st.SessionState:
    """The state after every record: the snapshot, if valid, plus the events after it."""
    base = snapshot_of(session_dir, records)
    dec = ev.Decoder(str(Path(session_dir) / "journal.jsonl"))
    if base is None:
        return st.fold(dec.event(r.seq, r.ts, r.type, r.payload, r.hash) for r in records)
    dec.schema = max(1, base.opened.schema) if base.opened else 1
    return st.fold((dec.event(r.seq, r.ts, r.type, r.payload, r.hash) for r in records[base.seq:]), base)
