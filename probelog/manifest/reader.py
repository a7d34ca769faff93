"""Reading a session journal for a bundle: decode every line with
:mod:`probelog.events`, fold it into a :class:`probelog.state.SessionState`,
leave a torn last line aside, and re-walk the SHA-256 hash chain."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

from probelog import events as ev
from probelog import state as st

JOURNAL_NAME = "journal.jsonl"
ZERO_HASH = "0" * 64


class SessionFormatError(ValueError):
    """The folder or its journal does not follow docs/journal-events.md."""


@dataclass
class Journal:
    """The events of one session journal, their state, and what the reader noticed.

    ``lines`` are the raw bytes of each event line (without newline), kept for
    the hash chain; ``torn_tail`` is True when an unterminated, unparsable last
    line was left aside (a crash while appending).
    """

    path: Path
    events: list[ev.Event]
    lines: list[bytes]
    torn_tail: bool = False
    state: st.SessionState = field(default_factory=st.SessionState)


@dataclass
class ChainStatus:
    """Result of re-walking the hash chain: ``ok``, the SHA-256 of the last line
    (what makes the chain tamper-evident once copied elsewhere), ``events`` the
    lines intact from the start, ``total`` the lines read and, when broken, one
    sentence saying where."""

    ok: bool
    last_hash: str
    events: int
    problem: str = ""
    checked_by: str = "probelog.manifest"
    total: int = 0


def read_journal(session_dir: Path) -> Journal:
    """Read and decode ``journal.jsonl`` of a session folder.

    Raises SessionFormatError naming the file and line for anything that is not
    an event; an unparsable *last* line without a newline is treated as torn.
    """
    path = Path(session_dir) / JOURNAL_NAME
    if not Path(session_dir).is_dir():
        raise SessionFormatError(f"{session_dir}: not a folder")
    if not path.is_file():
        raise SessionFormatError(f"{session_dir}: not a probelog session (no {JOURNAL_NAME})")
    blob = path.read_bytes()
    raw_lines = blob.split(b"\n")
    ends_with_newline = blob.endswith(b"\n")
    if ends_with_newline:
        raw_lines = raw_lines[:-1]
    decoder = ev.Decoder(str(path))
    events: list[ev.Event] = []
    lines: list[bytes] = []
    torn = False
    for i, line in enumerate(raw_lines, start=1):
        try:
            events.append(decoder.line(line))
        except ev.EventError as exc:
            if i == len(raw_lines) and not ends_with_newline:
                torn = True
                break
            why = str(exc).split(": ", 1)[-1] if "not a journal line" not in str(exc) else "not a JSON event"
            raise SessionFormatError(f"{path}:{i}: {why}") from None
        lines.append(line)
    if not events:
        raise SessionFormatError(f"{path}: journal has no events")
    if not isinstance(events[0].data, ev.SessionOpened):
        raise SessionFormatError(f"{path}:1: first event is '{events[0].type}', expected 'session-opened'")
    return Journal(path=path, events=events, lines=lines, torn_tail=torn, state=st.fold(events))


def walk_chain(lines: list[bytes]) -> ChainStatus:
    """Re-walk the hash chain: each event's ``prev`` is the SHA-256 hex of the
    previous line's bytes (64 zeros for the first), and ``seq`` counts 1, 2, ...
    (lines decoded by probelog.events)."""
    prev = ZERO_HASH
    problem = ""
    intact = 0
    decoder = ev.Decoder()
    for i, line in enumerate(lines, start=1):
        try:
            e = decoder.line(line)
            seq, line_prev = e.seq, e.prev
        except ev.EventError:
            seq, line_prev = -1, ""
        if not problem and seq != i:
            problem = f"line {i}: seq is {seq}, expected {i}"
        elif not problem and line_prev != prev:
            problem = f"line {i}: 'prev' is not the SHA-256 of line {i - 1} (line {i - 1} edited, or lines removed)"
        if not problem:
            intact = i
        prev = hashlib.sha256(line).hexdigest()
    return ChainStatus(not problem, prev, intact, problem, total=len(lines))


def chain_status(session_dir: Path, journal: Journal) -> ChainStatus:
    """Chain status from ``probelog.journal.verify``, with the intact count and
    the last line's SHA-256 from :func:`walk_chain` over the lines this bundle
    copies (a torn tail left aside by the reader is not part of them)."""
    from probelog.journal import verify

    own = walk_chain(journal.lines)
    try:
        report = verify(Path(session_dir))
    except Exception as exc:  # a verifier crash must not stop the bundle
        own.problem = (own.problem + "; " if own.problem else "") + f"journal.verify failed: {exc}"
        return own
    # Data-file problems are reported by the export against the copies; here
    # only the journal's own chain counts.
    chain_problems = [p for p in getattr(report, "problems", [])
                      if str(getattr(p, "file", "")).endswith(JOURNAL_NAME)]
    text = "; ".join(f"line {p.line}: {p.message}" if p.line else str(p.message) for p in chain_problems)
    ok = own.ok and not chain_problems
    return ChainStatus(ok, own.last_hash, own.events, text or own.problem, total=own.total,
                       checked_by="probelog.journal.verify")
