"""``probelog verify SESSION``: re-walk a session's hash chain and file hashes."""

from __future__ import annotations

import argparse
import re
import sys

HELP = ("check a session folder: hash chain, every data file; "
        "exit 0 intact, 1 damaged or unreadable, 2 not a session, 3 in use by a running session")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("session", help="session folder (holds journal.jsonl and data/)")
    parser.add_argument(
        "--anchor",
        metavar="SEQ:SHA256",
        help="the last line's seq and hash kept off the machine (as printed by an earlier verify); "
             "catches a rewritten or cut-off end and events appended after it, which a chain alone cannot",
    )


def run(args: argparse.Namespace) -> int:
    from probelog.tui.cli import UsageError
    from probelog.journal import JournalError, NotASessionError, SessionInUseError, verify

    anchor = None
    if args.anchor is not None:
        m = re.fullmatch(r"(\d+):([0-9a-f]{64})", args.anchor.strip())
        if not m:
            raise UsageError(f"--anchor {args.anchor!r}: expected SEQ:SHA256, e.g. 12:3f5a... (64 hex digits)")
        anchor = (int(m.group(1)), m.group(2))
    try:
        report = verify(args.session, anchor=anchor)
    except NotASessionError as exc:
        print(f"probelog verify: {exc}", file=sys.stderr)
        return 2
    except SessionInUseError as exc:
        print(f"probelog verify: {exc}", file=sys.stderr)
        return 3
    except JournalError as exc:
        print(f"probelog verify: {exc}", file=sys.stderr)
        return 1
    for w in report.warnings:
        print(f"  warning: line {w.line}, {w.file}: {w.message}; found {w.found}")
    print(_session_line(args.session))
    if report.ok:
        note = f", {len(report.warnings)} warning(s) above" if report.warnings else ""
        print(f"{args.session}: intact, {report.events} events, every data file matches{note}")
        print(f"anchor {report.last_seq}:{report.last_hash} (keep this line elsewhere and pass it as "
              "--anchor to detect a later rewrite, cut or appended event)")
        return 0
    print(f"{args.session}: damaged, {len(report.problems)} problem(s) in {report.events} events")
    for p in report.problems:
        where = f"line {p.line}" if p.line is not None else "no line"
        print(f"  {where}, {p.file}: {p.message}; expected {p.expected}, found {p.found}")
    return 1


def _session_line(session: str) -> str:
    """What the session holds, from the folded state (probelog.state)."""
    from probelog import events as ev
    from probelog import state as st

    try:
        s = st.fold(ev.read_session(session))
    except (OSError, ev.EventError) as exc:
        return f"{session}: events cannot be read as a session ({exc})"
    wafer = s.opened.wafer if s.opened else "?"
    closed = "not closed" if s.closed is None else ("completed" if s.closed.completed else "closed early")
    return (f"{session}: wafer {wafer}, {closed}; {s.n_accepted} accepted, "
            f"{s.n_accepted_despite_fail} accepted despite FAIL, {s.n_skipped} skipped, {s.n_given_up} given up; "
            f"{s.n_landings} landings, {len(s.resumes)} resume(s)")
