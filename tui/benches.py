"""Build a probelog.bench.Bench from command-line options.

``--bench sim`` starts drivers.simbench.SimBench in this process on free loopback
ports and connects the real ScpiVna / ScpiProber to it through pyvisa-py, so the
whole instrument path is exercised; closing the bench stops the simulator.
``--bench visa`` connects to real instruments by VISA resource strings.
"""

from __future__ import annotations

import argparse
from typing import Callable, Sequence

SIM_TIMEOUT_MS = 2000  # the simulated bench answers in ms; a timeout there is a fault
DEMO_FAULT_RATE = 0.03  # the demo draws a fault on about 3 % of landings


def add_bench_arguments(parser: argparse.ArgumentParser) -> None:
    g = parser.add_argument_group("bench")
    g.add_argument("--bench", choices=("sim", "visa"), default="sim",
                   help="sim: the simulated bench in this process (default); visa: real instruments")
    g.add_argument("--vna", metavar="RESOURCE", help="VISA resource of the VNA (--bench visa)")
    g.add_argument("--vna-dialect", metavar="FILE", default="generic-vna", help="VNA dialect file or name")
    g.add_argument("--prober", metavar="manual|sim|RESOURCE", default=None,
                   help="manual (you are the prober), sim, or a VISA resource (default: sim with --bench sim)")
    g.add_argument("--prober-dialect", metavar="FILE", default="generic-prober", help="prober dialect file or name")
    g.add_argument("--watch-folder", metavar="DIR",
                   help="take sweeps from Touchstone files saved into DIR instead of a VISA VNA")
    g.add_argument("--seed", type=int, default=7, help="simulated bench seed (default 7)")
    g.add_argument("--fault", action="append", default=[], metavar="KIND@COL,ROW:SITE",
                   help="inject a fault on the simulated bench (repeatable)")
    g.add_argument("--fault-rate", type=float, default=None, metavar="P",
                   help=f"chance of a random fault per landing on the simulated bench (default {DEMO_FAULT_RATE})")


def build_bench(args: argparse.Namespace, probe_ids: Sequence[str],
                confirm: Callable[[str], bool] | None = None):
    """The Bench the options describe; raises tui.cli.UsageError with one line."""
    from probelog.bench import Bench
    from probelog.tui.cli import UsageError

    closers = []
    try:
        vna_res = args.vna
        prober_word = args.prober or ("sim" if args.bench == "sim" else None)
        desc = []
        if args.bench == "sim":
            from probelog.drivers.simbench import SimBench

            rate = DEMO_FAULT_RATE if args.fault_rate is None else args.fault_rate
            if not 0.0 <= rate <= 1.0:
                raise UsageError(f"--fault-rate must be between 0 and 1, got {rate:g}")
            try:
                # a "slow" fault outlasts the sim's 2 s I/O timeout by 1 s: the
                # operator sees a timeout without a real instrument's 10 s wait
                sim = SimBench(seed=args.seed, fault_rate=rate, faults=list(args.fault),
                               slow_reply_s=SIM_TIMEOUT_MS / 1000 + 1.0)
            except ValueError as exc:
                raise UsageError(f"--fault: {exc}") from None
            sim_vna, sim_prober = sim.start()
            closers.append(sim.stop)
            vna_res = vna_res or sim_vna
            if prober_word == "sim":
                prober_word = sim_prober
            desc.append(f"simulated bench (seed {args.seed}, fault rate {rate:g}, "
                        f"{len(args.fault)} injected faults)")
        elif prober_word == "sim":
            raise UsageError("--prober sim needs --bench sim")
        vna = _vna(args, vna_res, SIM_TIMEOUT_MS if args.bench == "sim" else None)
        closers.append(vna.close)
        prober = _prober(args, prober_word, probe_ids, confirm)
        desc.append(f"VNA {vna_res or args.watch_folder}, prober {prober_word}")
        bench = Bench(vna=vna, prober=prober, description="; ".join(desc))
        bench.on_close.extend(c for c in closers if c != vna.close)
        bench.kind = args.bench
        return bench
    except UsageError:
        _close_all(closers)
        raise
    except Exception as exc:  # a driver error while connecting: one line, no traceback
        _close_all(closers)
        raise UsageError(f"cannot set up the bench: {type(exc).__name__}: {exc}") from None


def _vna(args, resource, timeout_ms=None):
    from probelog.tui.cli import UsageError

    if args.watch_folder:
        from probelog.drivers.folder import FolderVna

        return FolderVna(args.watch_folder)
    if not resource:
        raise UsageError("--bench visa needs --vna RESOURCE (or --watch-folder DIR)")
    from probelog.drivers.vna import ScpiVna

    return ScpiVna(resource, dialect=args.vna_dialect, timeout_ms=timeout_ms)


def _prober(args, word, probe_ids, confirm):
    from probelog.tui.cli import UsageError

    if not word:
        raise UsageError("--bench visa needs --prober manual or --prober RESOURCE")
    if word == "manual":
        from probelog.drivers.prober import ManualProber

        if confirm is None:
            raise UsageError("--prober manual needs the interactive UI (drop --headless)")
        return ManualProber(confirm, probe_ids)
    from probelog.drivers.prober import ScpiProber

    return ScpiProber(word, probe_ids, dialect=args.prober_dialect)


def _close_all(closers) -> None:
    for c in reversed(closers):
        try:
            c()
        except Exception:  # closing must not hide the error being reported
            pass
