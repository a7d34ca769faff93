"""``probelog run``: walk a plan on a bench, in the UI or headless; or resume."""

from __future__ import annotations

import argparse
import os
import sys
from typing import TextIO, cast

HELP = "run a probing session from a plan (or --resume one), in the UI or --headless"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from probelog.tui.benches import add_bench_arguments

    parser.add_argument("plan", nargs="?", metavar="PLAN", help="plan file (.toml) or the word demo")
    parser.add_argument("--resume", metavar="SESSION", help="session folder to continue")
    parser.add_argument("--dir", metavar="DIR", default="sessions", help="where session folders go (default sessions/)")
    parser.add_argument("--operator", default="",
                        help="operator name for the journal (default: your login name)")
    parser.add_argument("--retries", type=int, default=2, metavar="N",
                        help="headless: re-landings of a failing site before giving up (default 2)")
    parser.add_argument("--headless", action="store_true", help="no UI: accept passes, re-land failures, go on")
    parser.add_argument("--catalog", metavar="URL", help="add the session to this catalog (SQLite path or "
                        "postgresql://...) as it closes, and when a --resume opens it")
    add_bench_arguments(parser)


def run(args: argparse.Namespace) -> int:
    from probelog.tui.cli import UsageError

    if bool(args.plan) == bool(args.resume):
        raise UsageError("give a PLAN (file or 'demo') or --resume SESSION, not both")
    if args.retries < 0:
        raise UsageError(f"--retries must be 0 or more, got {args.retries}")
    from probelog.plan import PlanError, load_plan
    from probelog.session import Engine, EngineError

    from probelog.journal import JournalError

    if args.resume:
        plan = None
        probe_ids = _probe_ids_of(args.resume)
    else:
        from probelog.engine.planview import validate

        try:
            plan = load_plan(args.plan)
            validate(plan)  # kit, limits, power: refused before any instrument or folder is opened
        except (PlanError, EngineError) as exc:
            raise UsageError(str(exc)) from None
        probe_ids = plan.probes.ids

    def engine_factory(*_request, confirm=None):
        bench = build(confirm)
        try:
            if args.resume:
                return Engine.resume(args.resume, bench)
            return Engine.new(plan, bench, args.dir, operator=_operator(args.operator))
        except BaseException:
            bench.close()
            raise

    def build(confirm=None):
        from probelog.tui.benches import build_bench

        return build_bench(args, probe_ids, confirm)

    if args.catalog:  # checked before any probing; the session is added as it closes
        from probelog.tui.commands.catalog import with_catalog

        engine_factory = with_catalog(args.catalog, engine_factory, on_open=bool(args.resume))
    if not args.headless:
        from probelog.tui.app import run_app

        return run_app(engine_factory)

    from probelog.headless import run_headless
    from probelog.tui.interrupts import GuardedOutput, StopRequest, report, stop_on_signals, stopped_line

    # SIGINT, SIGTERM, SIGHUP and a closed stdout stop the run between two steps,
    # with the probes separated and the cause journaled (probelog.tui.interrupts).
    stop = StopRequest()
    with stop_on_signals(stop):
        try:
            engine = engine_factory()
        except (EngineError, JournalError) as exc:
            raise UsageError(str(exc)) from None
        if os.environ.get(TRACE_ACKS_ENV) == "1":
            _trace_acks(engine)
        try:
            out = cast(TextIO, GuardedOutput(sys.stdout, stop))  # a text stream in all but name
            summary = run_headless(engine, retries=args.retries, out=out, stop=stop)
        except EngineError as exc:  # e.g. a cal standard that cannot be measured
            report(f"probelog run: stopped: {exc}; resume with --resume {engine.session_dir}")
            engine.close(False, cause=stop.cause)
            return 1
        except JournalError as exc:  # e.g. a full disk: what was journaled stays, the rest is redone
            report(f"probelog run: stopped: {exc}; resume with --resume {engine.session_dir}")
            try:
                engine.close(False, cause=stop.cause)
            except JournalError:  # still no space for session-closed; resume does without it
                pass
            return 1
        finally:
            separated = not _in_contact(engine.bench)
            engine.bench.close()
    if stop.cause is not None and not summary.completed:
        report(stopped_line(stop, engine.session_dir, separated))
        return stop.exit_code
    return summary.exit_code


def _in_contact(bench) -> bool:
    """The prober driver's own record of the probes being down (True if it cannot tell)."""
    try:
        return bool(bench.prober.in_contact)
    except Exception:  # a prober that broke mid-run: assume the worst, say so
        return True


# Opt-in, for the crash trials (tests/test_crash_resume.py): with this set to 1
# a headless run writes "ack SEQ SHA256" to stderr for the journal's last event
# each time the engine notifies, which it does only after that event's fsync.
TRACE_ACKS_ENV = "PROBELOG_TRACE_ACKS"


def _trace_acks(engine) -> None:
    def ack(_event=None) -> None:
        last = engine.journal.last
        if last is not None:
            print(f"ack {last.seq} {last.hash}", file=sys.stderr, flush=True)

    ack()  # session-opened (or the recovery note) was fsynced before the engine existed
    engine.subscribe(ack)


def _operator(given: str) -> str:
    """Who probes: the name given, else the login name (a journal always says who)."""
    import getpass

    if given.strip():
        return given.strip()
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no user name in this environment
        return "unknown operator"


def _probe_ids_of(session: str) -> tuple[str, ...]:
    """Probe ids from the session-opened line, read without opening for writing."""
    from pathlib import Path

    from probelog import events as ev
    from probelog.tui.cli import UsageError

    path = Path(session) / "journal.jsonl"
    try:
        with path.open("rb") as fh:
            first = ev.Decoder(str(path)).line(fh.readline().rstrip(b"\n"))
    except (OSError, ev.EventError) as exc:
        raise UsageError(f"{path}: cannot read the session's first event ({exc})") from None
    if not isinstance(first.data, ev.SessionOpened):
        raise UsageError(f"{path}: the first event is {first.type!r}, expected 'session-opened'")
    return tuple(first.data.probes)
