"""``probelog export SESSION [--out DIR] [--metric NAME] [--allow-damaged]``: the analyst bundle."""

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
    parser.add_argument("--allow-damaged", action="store_true",
                        help="write the bundle even when the session fails its integrity checks "
                             "(the bundle says BROKEN; the command still exits 1)")


def run(args: argparse.Namespace) -> int:
    from probelog.tui.cli import UsageError

    session = Path(args.session)
    if not session.exists():
        raise UsageError(f"{session}: no such folder")
    if not session.is_dir():
        raise UsageError(f"{session}: not a folder (give the session folder that holds journal.jsonl)")
    from probelog.export import BundleError, DamagedSessionError, export_bundle
    from probelog.manifest import SessionFormatError

    damage: list[str] = []
    try:
        out = export_bundle(session, args.out, progress=not args.quiet, metric=args.metric,
                            allow_damaged=args.allow_damaged, damage=damage)
    except DamagedSessionError as exc:
        print(f"probelog export: {exc}", file=sys.stderr)
        return 1
    except (SessionFormatError, BundleError) as exc:
        raise UsageError(str(exc)) from None
    except OSError as exc:
        raise UsageError(f"{exc.filename or session}: {exc.strerror or exc}") from None
    if damage:
        more = f" (and {len(damage) - 1} more, listed in its report)" if len(damage) > 1 else ""
        print(f"probelog export: DAMAGED session exported because of --allow-damaged: {damage[0]}{more}; "
              f"bundle {out}", file=sys.stderr)
        return 1
    print(f"bundle written: {out}", file=sys.stdout)
    print(f"report: {out / 'report.html'}", file=sys.stdout)
    return 0
