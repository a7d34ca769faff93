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
    parser.add_argument("--kind", default=None, metavar="KIND",
                        help=f"site kind: {KIND_WORDS} (default: the kind= in probelog's file header, else device)")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    length = parser.add_mutually_exclusive_group()
    length.add_argument("--length-mm", type=float, metavar="MM", help="line or stub length in mm")
    length.add_argument("--length-um", type=float, metavar="UM", help="line or stub length in um")
    parser.add_argument("--window-band", type=float, nargs=2, metavar=("LO_HZ", "HI_HZ"),
                        help="band (Hz) where the line window is judged (default: the whole sweep)")
    parser.add_argument("--cal-open", metavar="FILE", help="the calibration's raw open: FILE is then raw data and "
                        "contact is judged from physics (needs --cal-short)")
    parser.add_argument("--cal-short", metavar="FILE", help="the calibration's raw short (with --cal-open)")
    parser.add_argument("--z0-window", type=float, nargs=2, metavar=("LO", "HI"), help="Re Z0 window in ohm")
    parser.add_argument("--eps-eff-window", type=float, nargs=2, metavar=("LO", "HI"), help="eps_eff window")
    parser.add_argument("--alpha-max", type=float, metavar="DB_PER_MM", help="largest loss in dB/mm")
    parser.add_argument("--golden", metavar="FILE.s2p", help="golden Touchstone file: every port pair of FILE must "
                        "stay within --golden-tol-db and --golden-tol-deg of it (docs/checks.md)")
    parser.add_argument("--golden-tol-db", type=float, metavar="DB", help="golden tolerance on |S| in dB (default 0.5)")
    parser.add_argument("--golden-tol-deg", type=float, metavar="DEG", help="golden tolerance on phase in degrees (default 5)")
    parser.add_argument("--previous", metavar="FILE", help="previous landing on the same site (repeatability)")
    parser.add_argument("--reference", metavar="FILE", help="sweep of this site right after calibration (drift)")


def _window(name: str, pair: list[float] | None) -> list[float] | None:
    import math

    from probelog.tui.cli import UsageError

    if pair is None:
        return None
    lo, hi = pair
    if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
        raise UsageError(f"{name} needs LO < HI, got {lo:g} {hi:g}")
    return [lo, hi]


def expectation_from_args(args: argparse.Namespace) -> dict:
    """The site expectation (plan keys) from the command-line options."""
    import math

    from probelog.tui.cli import UsageError

    exp: dict = {}
    for name, value, scale in (("--length-mm", args.length_mm, 1000.0), ("--length-um", args.length_um, 1.0)):
        if value is None:
            continue
        if not (math.isfinite(value) and value > 0):
            raise UsageError(f"{name} must be positive and finite, got {value:g}")
        exp["length_um"] = value * scale
    if args.window_band is not None:
        lo, hi = args.window_band
        if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
            raise UsageError(f"--window-band needs 0 < LO_HZ < HI_HZ (finite, in Hz), got {lo:g} {hi:g}")
        exp["window_band_hz"] = [lo, hi]
    if (w := _window("--z0-window", args.z0_window)) is not None:
        exp["z0_window_ohm"] = w
    if (w := _window("--eps-eff-window", args.eps_eff_window)) is not None:
        exp["eps_eff_window"] = w
    for name, value in (("--golden-tol-db", args.golden_tol_db), ("--golden-tol-deg", args.golden_tol_deg)):
        if value is not None and not (math.isfinite(value) and value > 0):
            raise UsageError(f"{name} must be positive and finite, got {value:g}")
        if value is not None and args.golden is None:
            raise UsageError(f"{name} needs --golden")
    if args.alpha_max is not None:
        if not (math.isfinite(args.alpha_max) and args.alpha_max > 0):
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


def header_kind(path: str) -> str | None:
    """The ``kind=`` of probelog's own Touchstone header, or None."""
    from probelog.touchstone_out import read_header

    try:
        with open(path, "rb") as fh:
            head = fh.read(8192)  # the header is the first comment lines
    except OSError:
        return None
    kind = read_header(head).get("kind")
    return kind if isinstance(kind, str) else None


def _window_table(figures: dict) -> None:
    from rich.console import Console
    from rich.table import Table

    table = Table(title="line window", title_justify="left")
    for col in ("quantity", "value", "low", "high", "unit", "at", "inside"):
        table.add_column(col)
    for q, d in figures.items():
        table.add_row(q, _fmt(d["value"], ""), _fmt(d["lo"], ""), _fmt(d["hi"], ""), d["unit"] or "-",
                      "-" if d["at_hz"] is None else f"{d['at_hz'] / 1e9:.4g} GHz",
                      "yes" if d["inside"] else "[bold red]no[/]")
    Console().print(table)


def _golden(args: argparse.Namespace) -> dict:
    """``--golden`` read as the plan's ``golden_file`` is (probelog.golden), with the tolerances."""
    from pathlib import Path

    from probelog import golden
    from probelog.tui.cli import UsageError

    try:
        data = golden.read_golden(Path(args.golden))
    except golden.GoldenFileError as exc:
        raise UsageError(str(exc)) from None
    return {"file": str(data.path), "sha256": data.sha256, "f_hz": data.f_hz, "s": data.s, "z0_ohm": data.z0_ohm,
            "tol_db": args.golden_tol_db or golden.TOL_DB, "tol_deg": args.golden_tol_deg or golden.TOL_DEG,
            "floor_db": golden.FLOOR_DB}


def run(args: argparse.Namespace) -> int:
    from probelog.checks import KINDS, Limits, line_window_figures, run_checks
    from probelog.touchstone_input import TouchstoneInputError, load_touchstone, require_ports
    from probelog.verdicts import Verdict, overall
    from probelog.tui.cli import UsageError

    if args.kind is not None and args.kind not in KINDS:
        raise UsageError(f"unknown kind '{args.kind}' (known: {', '.join(KINDS)})")
    if (args.cal_open is None) != (args.cal_short is None):
        raise UsageError("--cal-open and --cal-short go together")
    exp = expectation_from_args(args)
    try:
        ntwk = load_touchstone(args.file)  # first: it refuses a FIFO before anything reads it
        kind = args.kind or header_kind(args.file) or "device"
        if kind not in KINDS:
            raise UsageError(f"{args.file}: header kind '{kind}' is unknown (known: {', '.join(KINDS)}); give --kind")
        require_ports(ntwk, kind, args.file)
        previous = load_touchstone(args.previous) if args.previous else None
        reference = load_touchstone(args.reference) if args.reference else None
        cal_open = load_touchstone(args.cal_open) if args.cal_open else None
        cal_short = load_touchstone(args.cal_short) if args.cal_short else None
        if args.golden:
            exp["golden"] = _golden(args)
    except TouchstoneInputError as exc:
        raise UsageError(str(exc)) from None
    try:
        results = run_checks(ntwk, kind, Limits(), exp, previous=previous, reference=reference,
                             raw=ntwk if cal_open is not None else None, raw_open=cal_open, raw_short=cal_short)
        figures = line_window_figures(ntwk.f, ntwk.s, exp, Limits()) if kind in ("line", "thru") else None
    except Exception as exc:  # bad data we did not foresee: one line, never a traceback
        raise UsageError(f"{args.file}: could not check ({' '.join(str(exc).split()) or type(exc).__name__})") from None
    verdict = overall(results).value
    if args.json:
        out = {"file": args.file, "kind": kind, "verdict": verdict, "checks": [r.to_json() for r in results]}
        if figures:
            out["line_window"] = figures
        sys.stdout.write(json.dumps(out, allow_nan=False) + "\n")
    else:
        _table(args.file, kind, verdict, results)
        if figures:
            _window_table(figures)
    return 1 if any(r.verdict is Verdict.FAIL for r in results) else 0
