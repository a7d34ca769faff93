"""``probelog catalog``: every session of every station in one database.

    probelog catalog add SESSION...        probelog catalog scan DIR
    probelog catalog list                  probelog catalog trend QUANTITY --site SITE [--at-hz F]
    probelog catalog yield                 probelog catalog wear
    probelog catalog export --parquet DIR  probelog catalog report [--lot L] [--since DATE]

The database: --db URL (a SQLite path or postgresql://...), else $PROBELOG_CATALOG,
else sessions/catalog.sqlite.
"""

from __future__ import annotations

import argparse
import sys
from datetime import datetime
from pathlib import Path

HELP = "the lab's catalog of sessions: add, scan, list, trend, yield, wear, export, report"


def _common(p: argparse.ArgumentParser, filters: bool = False) -> None:
    p.add_argument("--db", metavar="URL", help="catalog database: a SQLite file or postgresql://... "
                   "(default: $PROBELOG_CATALOG, else sessions/catalog.sqlite)")
    if filters:
        p.add_argument("--lot", metavar="LOT", help="only this lot")
        p.add_argument("--since", metavar="DATE", help="only sessions opened on or after DATE (YYYY-MM-DD, UTC)")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    sub = parser.add_subparsers(dest="catalog_command", metavar="ACTION", required=True)
    p = sub.add_parser("add", help="add (or update) session folders")
    p.add_argument("sessions", nargs="+", metavar="SESSION")
    _common(p)
    p = sub.add_parser("scan", help="add every session folder under DIR (again: updates)")
    p.add_argument("dir", metavar="DIR")
    _common(p)
    p = sub.add_parser("list", help="sessions: wafer, lot, chip, operator, station, dates, outcomes")
    _common(p, filters=True)
    p = sub.add_parser("trend", help="a quantity of one site per wafer and lot (table, and a plot with --plot)")
    p.add_argument("quantity", metavar="QUANTITY",
                   help="line metric (z0_re, alpha_db_per_mm, eps_eff, q, ...), padfree.<metric>, or a check name")
    p.add_argument("--site", required=True, metavar="SITE", help="site name (for padfree.*: either line of the pair)")
    p.add_argument("--at-hz", type=float, metavar="F", help="frequency in Hz (nearest journaled one; default: middle)")
    p.add_argument("--plot", metavar="FILE", help="write the plot to FILE (.png or .svg)")
    _common(p, filters=True)
    p = sub.add_parser("yield", help="pass / warn / fail / accepted-despite-fail per site per wafer")
    p.add_argument("--site", metavar="SITE", help="only this site")
    _common(p, filters=True)
    p = sub.add_parser("wear", help="touchdowns per probe id across sessions, against the plan's wear limit")
    _common(p, filters=True)
    p = sub.add_parser("export", help="the kept landings as Parquet (partitioned by lot and wafer)")
    p.add_argument("--parquet", required=True, metavar="DIR", help="new or empty folder to write")
    _common(p)
    p = sub.add_parser("report", help="one self-contained HTML page across sessions")
    p.add_argument("--out", metavar="FILE", default="catalog-report.html", help="default catalog-report.html")
    _common(p, filters=True)


def _since(text: str | None) -> datetime | None:
    from probelog.tui.cli import UsageError

    if not text:
        return None
    try:
        return datetime.fromisoformat(text)
    except ValueError:
        raise UsageError(f"--since {text}: not a date (YYYY-MM-DD)") from None


def _open(args):
    from probelog.tui.cli import UsageError

    try:
        from probelog.catalog.db import CatalogError, open_catalog
    except ImportError as exc:
        raise UsageError(f"the catalog needs {exc.name}: pip install 'probelog[catalog]'") from None
    try:
        return open_catalog(args.db)
    except CatalogError as exc:
        raise UsageError(str(exc)) from None


def _table(title: str, headings: list[str], rows: list[list], right: frozenset[int] | set[int] = frozenset()) -> None:
    from rich.console import Console
    from rich.table import Table

    t = Table(title=title, title_justify="left")
    for i, h in enumerate(headings):
        t.add_column(h, justify="right" if i in right else "left")
    for r in rows:
        t.add_row(*("-" if v is None else str(v) for v in r))
    Console(highlight=False, width=None if sys.stdout.isatty() else 250).print(t)


def _g(x, fmt=".4g"):
    return None if x is None else format(x, fmt)


def _day(t) -> str:
    return t.strftime("%Y-%m-%d %H:%M") if t else "-"


def run(args: argparse.Namespace) -> int:
    from probelog.tui.cli import UsageError

    from sqlalchemy.exc import SQLAlchemyError

    from probelog.catalog.db import CatalogError, _first_line

    cat = _open(args)
    try:
        return _ACTIONS[args.catalog_command](cat, args)
    except CatalogError as exc:
        raise UsageError(str(exc)) from None
    except SQLAlchemyError as exc:  # e.g. the server went away mid-command
        raise UsageError(f"{cat.url}: {_first_line(exc)}") from None
    finally:
        cat.close()


def _add(cat, paths) -> int:
    from probelog.catalog.ingest import Added, add_many

    def say(x) -> None:
        if isinstance(x, Added):
            extra = f": {x.problem}" if x.problem else ""
            print(f"{x.action:<8} {x.session_id} ({x.kept} kept landings){extra}")
        else:
            print(f"skipped  {x}", file=sys.stderr)

    done, problems = add_many(cat, paths, say)
    print(f"{len(done)} session(s) in {cat.url}" + (f"; {len(problems)} not a session" if problems else ""))
    return 1 if problems or any(a.action == "damaged" for a in done) else 0


def _cmd_add(cat, args) -> int:
    return _add(cat, args.sessions)


def _cmd_scan(cat, args) -> int:
    from probelog.catalog.ingest import find_sessions
    from probelog.tui.cli import UsageError

    if not Path(args.dir).is_dir():
        raise UsageError(f"{args.dir}: not a folder")
    found = find_sessions(args.dir)
    if not found:
        print(f"no session folders under {args.dir}")
        return 0
    return _add(cat, found)


def _cmd_list(cat, args) -> int:
    from probelog.catalog.queries import list_sessions

    rows = list_sessions(cat, args.lot, _since(args.since))
    _table(f"{len(rows)} session(s) in {cat.url}",
           ["session", "lot", "wafer", "chip", "operator", "station", "opened", "closed", "status",
            "pass", "warn", "fail", "acc-fail", "skip", "open"],
           [[r["session_id"], r["lot"], r["wafer"], r["chip"], r["operator"], r["station"][:28],
             _day(r["opened_at"]), _day(r["closed_at"]) if r["completed"] or r["closed_at"] else "open",
             r["status"] if not r["problem"] else f"{r['status']}: {r['problem'][:60]}",
             r["pass"], r["warn"], r["fail"], r["accepted_fail"], r["skipped"], r["open"]] for r in rows],
           right=set(range(9, 15)))
    return 0


def _cmd_trend(cat, args) -> int:
    from probelog.catalog.queries import trend

    t = trend(cat, args.quantity, args.site, args.at_hz, args.lot, _since(args.since))
    at = f" at {t.f_hz / 1e9:.4g} GHz" if t.f_hz else ""
    unit = f" ({t.unit})" if t.unit else ""
    _table(f"{t.quantity}{unit} of {t.site}{at}: {len(t.points)} kept landings",
           ["lot", "wafer", "session", "opened", "dies", "median", "min", "max"],
           [[w["lot"], w["wafer"], w["session_id"], _day(w["opened_at"]), w["n"], _g(w["median"]),
             _g(w["min"]), _g(w["max"])] for w in t.per_wafer], right={4, 5, 6, 7})
    if args.plot:
        from probelog.catalog.plots import to_bytes, trend_figure
        from probelog.tui.cli import UsageError

        fmt = Path(args.plot).suffix.lower().lstrip(".")
        if fmt not in ("png", "svg"):
            raise UsageError(f"--plot {args.plot}: use a .png or .svg file name")
        try:
            Path(args.plot).write_bytes(to_bytes(trend_figure(t), fmt))
        except OSError as exc:
            raise UsageError(f"--plot {args.plot}: cannot write ({exc.strerror})") from None
        print(f"plot: {args.plot}")
    return 0


def _cmd_yield(cat, args) -> int:
    from probelog.catalog.queries import yield_table

    rows = yield_table(cat, args.lot, _since(args.since), args.site)
    _table("yield per site and wafer (fail: given up; acc-fail: accepted despite a FAIL)",
           ["lot", "wafer", "site", "pass", "warn", "fail", "acc-fail", "skip", "yield"],
           [[r["lot"], r["wafer"], r["site"], r["pass"], r["warn"], r["fail"], r["accepted_fail"], r["skipped"],
             None if r["yield"] is None else f"{100 * r['yield']:.0f} %"] for r in rows], right=set(range(3, 9)))
    return 0


def _cmd_wear(cat, args) -> int:
    from probelog.catalog.queries import wear

    rows = wear(cat, args.lot, _since(args.since))
    _table("probe wear across sessions", ["probe", "sessions", "touchdowns", "wear limit", "used", "first", "last"],
           [[w["probe_id"], w["sessions"], w["touchdowns"], w["wear_limit"],
             None if w["used"] is None else f"{100 * w['used']:.1f} %" + (" OVER" if w["used"] >= 1 else ""),
             _day(w["first"]), _day(w["last"])] for w in rows], right={1, 2, 3, 4})
    return 0


def _cmd_export(cat, args) -> int:
    from probelog.catalog.parquet import export_parquet

    n = export_parquet(cat, args.parquet)
    print(f"{args.parquet}: {n['landings']} kept landings in landings/, {n['line_figures']} pad-free "
          f"line figure rows in line_figures/ (partitioned lot=/wafer=)")
    return 0


def _cmd_report(cat, args) -> int:
    from probelog.catalog.report import write_report

    path = write_report(cat, args.out, args.lot, _since(args.since))
    print(f"report: {path}")
    return 0


def with_catalog(url: str, engine_factory, on_open: bool = False):
    """``probelog run --catalog URL``: check the catalog answers now (one line
    and exit 2 if not), then wrap ``engine_factory`` so that each engine's
    session is added to the catalog when the engine closes (and, with
    ``on_open``, also as soon as a resumed session opens). A failed add is said
    on stderr and never stops or fails the run: the session folder is the record."""
    from probelog.tui.cli import UsageError

    try:
        from probelog.catalog.db import CatalogError, open_catalog
    except ImportError as exc:
        raise UsageError(f"--catalog needs {exc.name}: pip install 'probelog[catalog]'") from None
    try:
        open_catalog(url).close()
    except CatalogError as exc:
        raise UsageError(f"--catalog: {exc}") from None

    def add(folder) -> None:
        from sqlalchemy.exc import SQLAlchemyError

        from probelog.catalog.ingest import add_session

        try:
            cat = open_catalog(url)
            try:
                a = add_session(cat, folder)
            finally:
                cat.close()
        except (CatalogError, SQLAlchemyError, ValueError, OSError) as exc:
            print(f"probelog run: session not added to the catalog ({' '.join(str(exc).split())}); "
                  f"later: probelog catalog add {folder} --db ...", file=sys.stderr)
            return
        print(f"catalog: {a.action} {a.session_id} ({a.kept} kept landings) in {cat.url}", file=sys.stderr)

    def factory(*request, **kw):
        engine = engine_factory(*request, **kw)
        close = engine.close

        def close_and_add(*a, **k):
            result = close(*a, **k)
            add(engine.session_dir)
            return result

        engine.close = close_and_add
        if on_open:
            add(engine.session_dir)
        return engine

    return factory


_ACTIONS = {"add": _cmd_add, "scan": _cmd_scan, "list": _cmd_list, "trend": _cmd_trend, "yield": _cmd_yield,
            "wear": _cmd_wear, "export": _cmd_export, "report": _cmd_report}
