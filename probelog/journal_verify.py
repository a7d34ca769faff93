"""``verify``: re-walk a session's hash chain and every data file's SHA-256, read-only."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from collections.abc import Sequence
from pathlib import Path

from probelog.journal_files import data_files, os_reason, safe_rel, sha256_file, writer_pid
from probelog.journal_format import (HEX64, JOURNAL_NAME, ZERO_HASH, JournalError, NotASessionError,
                                     SessionInUseError, file_refs_in, parse_line)


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
        raise JournalError(f"{path}: cannot read: {os_reason(exc, reading=True)}") from None
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
        rec, why = parse_line(raw)
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
                adopted.extend((i, p, s) for p, s in file_refs_in({"adopted": rec["payload"].get("adopted")}))
                refs.extend((i, p, s) for p, s in file_refs_in(others))
            else:
                refs.extend((i, p, s) for p, s in file_refs_in(rec["payload"]))
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
                 adopted: Sequence[tuple[int, str, str]] = ()) -> tuple[list[Problem], list[Problem]]:
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
        safe = safe_rel(rel)
        if safe is None:
            problems.append(Problem(line, rel, "a path inside the session folder", repr(rel), "unsafe file path"))
            continue
        key = safe.as_posix()
        if key not in digests:
            try:
                digests[key] = sha256_file(root / safe)
            except FileNotFoundError:
                digests[key] = None
            except OSError as exc:
                digests[key] = f"unreadable ({os_reason(exc, reading=True)})"
        got = digests[key]
        if got is None:
            problems.append(Problem(line, key, f"sha256 {want}", "missing", "data file named by the event is missing"))
        elif got != want:
            problems.append(Problem(line, key, f"sha256 {want}", f"sha256 {got}" if HEX64.match(got) else got,
                                    "data file differs from what the event recorded"))
    try:
        files, _ = data_files(root)
    except OSError:
        files = []
    for rel in files:
        if rel not in digests:
            problems.append(Problem(None, rel, "a file named by an event", "no event names it",
                                    "unreferenced data file (a crash before its event); opening the session adopts it"))
    return problems, warnings
