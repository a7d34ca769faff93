"""``probelog export SESSION [--out DIR] [--metric NAME]``: the analyst bundle."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

HELP = "write the analyst bundle of a session: manifest, Touchstone tree, journal, HTML report"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("session", metavar="SESSION", help="session folder (holds journal.jsonl)")
    parser.add_argument("--out", metavar="DIR", default=None,
                        help="bundle folder, new or empty (default: SESSION-bundle beside the session)")
    parser.add_argument("--metric", metavar="NAME", default=None,
                        help="manifest column for the wafer map (default: a line Z0, else retries)")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")


def run(args: argparse.Namespace) -> int:
    from tui.cli import UsageError

    session = Path(args.session)
    if not session.exists():
        raise UsageError(f"{session}: no such folder")
    if not session.is_dir():
        raise UsageError(f"{session}: not a folder (give the session folder that holds journal.jsonl)")
    from probelog.export import BundleError, export_bundle
    from probelog.manifest import SessionFormatError

    try:
        out = export_bundle(session, args.out, progress=not args.quiet, metric=args.metric)
    except (SessionFormatError, BundleError) as exc:
        raise UsageError(str(exc)) from None
    except OSError as exc:
        raise UsageError(f"{exc.filename or session}: {exc.strerror or exc}") from None
    print(f"bundle written: {out}", file=sys.stdout)
    print(f"report: {out / 'report.html'}", file=sys.stdout)
    return 0
