"""``probelog check``: the quick checks of a site kind on one Touchstone file."""

from __future__ import annotations

import argparse
import json
import sys

HELP = "run the quick checks of a site kind on one Touchstone file"

KIND_WORDS = "open, short, load, thru, line, open-stub, short-stub or device"
STYLE = {"pass": "green", "warn": "yellow", "fail": "bold red", "n/a": "dim"}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", metavar="FILE.sNp", help="Touchstone file (v1 .sNp or v2)")
    parser.add_argument("--kind", default="device", metavar="KIND", help=f"site kind: {KIND_WORDS} (default: device)")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    parser.add_argument("--length-mm", type=float, metavar="MM", help="line or stub length in mm")
    parser.add_argument("--z0-window", type=float, nargs=2, metavar=("LO", "HI"), help="Re Z0 window in ohm")
    parser.add_argument("--eps-eff-window", type=float, nargs=2, metavar=("LO", "HI"), help="eps_eff window")
    parser.add_argument("--alpha-max", type=float, metavar="DB_PER_MM", help="largest loss in dB/mm")
    parser.add_argument("--previous", metavar="FILE", help="previous landing on the same site (repeatability)")
    parser.add_argument("--reference", metavar="FILE", help="sweep of this site right after calibration (drift)")


def _window(name: str, pair: list[float] | None) -> list[float] | None:
    from probelog.tui.cli import UsageError

    if pair is None:
        return None
    lo, hi = pair
    if not lo < hi:
        raise UsageError(f"{name} needs LO < HI, got {lo:g} {hi:g}")
    return [lo, hi]


def expectation_from_args(args: argparse.Namespace) -> dict:
    """The site expectation (plan keys) from the command-line options."""
    from probelog.tui.cli import UsageError

    exp: dict = {}
    if args.length_mm is not None:
        if not args.length_mm > 0:
            raise UsageError(f"--length-mm must be positive, got {args.length_mm:g}")
        exp["length_um"] = args.length_mm * 1000.0
    if (w := _window("--z0-window", args.z0_window)) is not None:
        exp["z0_window_ohm"] = w
    if (w := _window("--eps-eff-window", args.eps_eff_window)) is not None:
        exp["eps_eff_window"] = w
    if args.alpha_max is not None:
        if not args.alpha_max > 0:
            raise UsageError(f"--alpha-max must be positive, got {args.alpha_max:g}")
        exp["alpha_db_per_mm_max"] = args.alpha_max
    return exp


def _fmt(x: float | None, unit: str) -> str:
    if x is None:
        return "-"
    return f"{x:.4g} {unit}".strip()


def _table(path: str, kind: str, verdict: str, results) -> None:
    from rich.console import Console
    from rich.table import Table

    table = Table(title=f"{path}  ({kind})  overall: [{STYLE[verdict]}]{verdict}[/]", title_justify="left")
    for col in ("check", "verdict", "value", "limit", "at", "what it means"):
        table.add_column(col, overflow="fold")
    for r in results:
        v = r.verdict.value
        at = "-" if r.at_hz is None else f"{r.at_hz / 1e9:.4g} GHz"
        table.add_row(r.name, f"[{STYLE[v]}]{v}[/]", _fmt(r.value, r.unit), _fmt(r.limit, r.unit), at, r.message)
    Console().print(table)


def run(args: argparse.Namespace) -> int:
    from probelog.checks import KINDS, Limits, run_checks
    from probelog.touchstone_input import TouchstoneInputError, load_touchstone, require_ports
    from probelog.verdicts import Verdict, overall
    from probelog.tui.cli import UsageError

    if args.kind not in KINDS:
        raise UsageError(f"unknown kind '{args.kind}' (known: {', '.join(KINDS)})")
    exp = expectation_from_args(args)
    try:
        ntwk = load_touchstone(args.file)
        require_ports(ntwk, args.kind, args.file)
        previous = load_touchstone(args.previous) if args.previous else None
        reference = load_touchstone(args.reference) if args.reference else None
    except TouchstoneInputError as exc:
        raise UsageError(str(exc)) from None
    try:
        results = run_checks(ntwk, args.kind, Limits(), exp, previous=previous, reference=reference)
    except Exception as exc:  # bad data we did not foresee: one line, never a traceback
        raise UsageError(f"{args.file}: could not check ({' '.join(str(exc).split()) or type(exc).__name__})") from None
    verdict = overall(results).value
    if args.json:
        out = {"file": args.file, "kind": args.kind, "verdict": verdict, "checks": [r.to_json() for r in results]}
        sys.stdout.write(json.dumps(out, allow_nan=False) + "\n")
    else:
        _table(args.file, args.kind, verdict, results)
    return 1 if any(r.verdict is Verdict.FAIL for r in results) else 0
