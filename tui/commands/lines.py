"""``probelog lines``: Z0, gamma, eps_eff and RLGC of a measured line."""

from __future__ import annotations

import argparse
import json
import sys

# Largest |S21| that still is no line: a lifted tip or a reflect pair leaves -40 dB or lower
# (trade numbers); the lossiest on-wafer line of a sweep passes more than -30 dB somewhere
TRANSMIT_MIN = 10 ** (-30 / 20)

HELP = "line metrics (Z0, loss, eps_eff, RLGC) of a measured line, or pad-free gamma from two lines"

COLUMNS = (  # (JSON key, heading, scale, format)
    ("f_hz", "f GHz", 1e-9, ".4g"),
    ("z0_re", "Re Z0 ohm", 1.0, ".3f"),
    ("z0_im", "Im Z0 ohm", 1.0, ".3f"),
    ("alpha_db_per_mm", "alpha dB/mm", 1.0, ".5f"),
    ("beta_rad_per_mm", "beta rad/mm", 1.0, ".4f"),
    ("eps_eff", "eps_eff", 1.0, ".4f"),
    ("r_ohm_per_m", "R ohm/mm", 1e-3, ".4g"),
    ("l_h_per_m", "L nH/mm", 1e6, ".4g"),
    ("g_s_per_m", "G mS/mm", 1.0, ".4g"),
    ("c_f_per_m", "C pF/mm", 1e9, ".4g"),
    ("q", "Q", 1.0, ".4g"),
)


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", metavar="FILE.s2p", help="Touchstone 2-port of the line")
    parser.add_argument("--length", type=float, required=True, metavar="LENGTH_MM", help="line length in mm")
    parser.add_argument("--second", metavar="FILE2.s2p", help="a second line, same pads, other length")
    parser.add_argument("--second-length", type=float, metavar="MM", help="length of the second line in mm")
    parser.add_argument("--at", type=float, nargs="+", metavar="GHZ", help="frequencies to show (default: 5 across)")
    parser.add_argument("--eps-eff-guess", type=float, metavar="EPS", help="picks the phase branch when the sweep starts high")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of a table")


def _cell(x: float | None, scale: float, fmt: str) -> str:
    return "-" if x is None else format(x * scale, fmt)


def _table(title: str, small: dict, note: str | None) -> None:
    """One row per quantity, one column per frequency: fits 80 columns. A column
    outside the valid band is marked with '*' and explained in the caption."""
    from rich.console import Console
    from rich.table import Table

    if not all(small["valid"]):
        note = (note + "; " if note else "") + ("* outside the valid band (under 30 deg of electrical length "
                                                "or near a half-wavelength): figures not to be trusted")
    table = Table(title=title, title_justify="left", caption=note, caption_justify="left")
    table.add_column("")
    for f, ok in zip(small["f_hz"], small["valid"], strict=True):
        table.add_column(f"{f / 1e9:.4g} GHz" + ("" if ok else " *"), justify="right")
    for key, heading, scale, fmt in COLUMNS[1:]:
        table.add_row(heading, *(_cell(x, scale, fmt) for x in small[key]))
    Console().print(table)


def run(args: argparse.Namespace) -> int:
    import numpy as np

    import math

    from probelog.lines import (
        default_frequencies,
        gamma_two_lines,
        line_metrics,
        metrics_at,
        metrics_from_gamma,
        valid_points,
    )
    from probelog.touchstone_input import TouchstoneInputError, load_touchstone, require_ports
    from probelog.tui.cli import UsageError

    for name, value in (("--length", args.length), ("--second-length", args.second_length),
                        ("--eps-eff-guess", args.eps_eff_guess)):
        if value is not None and not math.isfinite(value):
            raise UsageError(f"{name} must be a finite number, got {value:g}")
    if not args.length > 0:
        raise UsageError(f"--length must be positive, got {args.length:g}")
    if (args.second is None) != (args.second_length is None):
        raise UsageError("--second and --second-length go together")
    if args.second_length is not None and not args.second_length > 0:
        raise UsageError(f"--second-length must be positive, got {args.second_length:g}")
    if args.second_length is not None and args.second_length == args.length:
        raise UsageError("the two lines must differ in length")
    if args.eps_eff_guess is not None and not args.eps_eff_guess >= 1:
        raise UsageError(f"--eps-eff-guess must be at least 1, got {args.eps_eff_guess:g}")
    try:
        first = load_touchstone(args.file)
        require_ports(first, "line", args.file)
        second = None
        if args.second:
            second = load_touchstone(args.second)
            require_ports(second, "line", args.second)
    except TouchstoneInputError as exc:
        raise UsageError(str(exc)) from None
    if second is not None and (len(first.f) != len(second.f) or not np.allclose(first.f, second.f, rtol=1e-9)):
        raise UsageError(f"{args.second}: frequency points differ from {args.file}")
    for path, ntwk in ((args.file, first), (args.second, second)):
        if ntwk is None:
            continue
        # a line transmits: a short or open pair (|S21| at the isolation floor) has no line metrics
        peak = float(np.max(np.abs(np.stack([ntwk.s[:, 1, 0], ntwk.s[:, 0, 1]]))))
        if not peak >= TRANSMIT_MIN:
            raise UsageError(f"{path}: does not transmit (|S21|, |S12| at most {20 * np.log10(max(peak, 1e-15)):.1f} dB, "
                             f"a line needs more than {20 * np.log10(TRANSMIT_MIN):.0f} dB): not a line")

    try:
        with np.errstate(all="ignore"):
            if second is None:
                metrics = line_metrics(first, args.length * 1e-3, args.eps_eff_guess)
                method, note = "single-line", "pads left in the measurement bias these figures"
            else:
                gamma = gamma_two_lines(first, args.length * 1e-3, second, args.second_length * 1e-3, args.eps_eff_guess)
                metrics = metrics_from_gamma(first.f, gamma)
                method, note = "two-line", "gamma is free of the pads; Z0 and RLGC need more (e.g. a known C per length)"
    except Exception as exc:  # bad data we did not foresee: one line, never a traceback
        raise UsageError(f"{args.file}: could not extract line metrics ({' '.join(str(exc).split())})") from None

    at = default_frequencies(metrics.f_hz) if args.at is None else np.asarray(args.at) * 1e9
    small = metrics_at(metrics, at)
    length_m = (args.length if second is None else abs(args.second_length - args.length)) * 1e-3
    valid = valid_points(metrics, length_m, min_sinh=0.1 if second is None else 0.0)
    idx = np.abs(metrics.f_hz[None, :] - np.atleast_1d(at)[:, None]).argmin(axis=1)
    small["valid"] = [bool(v) for v in valid[idx]]
    if args.json:
        out = {"file": args.file, "length_mm": args.length, "method": method,
               "second": args.second, "second_length_mm": args.second_length, **small}
        sys.stdout.write(json.dumps(out, allow_nan=False) + "\n")
    else:
        title = f"{args.file} ({args.length:g} mm)"
        if second is not None:
            title += f" with {args.second} ({args.second_length:g} mm)"
        _table(f"{title}: {method}", small, note)
    return 0
