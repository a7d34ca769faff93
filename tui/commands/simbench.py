"""``probelog simbench``: run the simulated VNA and prober in the foreground."""

from __future__ import annotations

import argparse

HELP = "serve the simulated bench (VNA + prober on a virtual PLX-7 wafer) on 127.0.0.1"


def _port(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"port {text!r} is not a whole number") from None
    if not 0 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"port {value} is outside 0..65535")
    return value


def _fraction(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not 0.0 <= value <= 1.0:
        raise argparse.ArgumentTypeError(f"{value} is outside 0..1")
    return value


def _nonnegative(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{value} is negative")
    return value


def _sweep_time(text: str) -> float:
    from probelog.drivers.simbench.sweeptime import sweep_time_scale

    try:
        return sweep_time_scale(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--seed", type=int, default=0, help="seed of process variation, noise and chance faults")
    parser.add_argument("--vna-port", type=_port, default=0, help="TCP port of the VNA (0 = a free port)")
    parser.add_argument("--prober-port", type=_port, default=0, help="TCP port of the prober (0 = a free port)")
    parser.add_argument("--fault", action="append", default=[], metavar="SPEC",
                        help="KIND[@COL,ROW[:SITE]][#N], e.g. lifted-1@4,4:cal-thru; repeatable")
    parser.add_argument("--fault-rate", type=_fraction, default=0.0,
                        help="chance of a fault at each landing, 0..1 (demo)")
    parser.add_argument("--sweep-time-scale", type=_sweep_time, default=0.0, metavar="SCALE|off|realistic",
                        help="realistic (= 1): sweeps take their modelled time (points / IF bandwidth plus "
                             "overheads); off (= 0, default): instant; a number between scales it")
    parser.add_argument("--drift-acceleration", type=_nonnegative, default=60.0,
                        help="simulated seconds per real second for drift (60: a minute is an hour)")


def run(args: argparse.Namespace) -> int:
    import signal
    import threading

    from probelog.drivers.simbench import FaultSpecError, SimBench
    from probelog.drivers.simbench.chip import ChipFileError
    from probelog.tui.cli import UsageError

    try:
        bench = SimBench(seed=args.seed, sweep_time_scale=args.sweep_time_scale, fault_rate=args.fault_rate,
                         faults=list(args.fault), drift_acceleration=args.drift_acceleration,
                         vna_port=args.vna_port, prober_port=args.prober_port)
    except (FaultSpecError, ChipFileError) as exc:
        raise UsageError(str(exc)) from None
    try:
        vna, prober = bench.start()
    except OSError as exc:
        raise UsageError(f"cannot listen on 127.0.0.1: {exc.strerror or exc}") from None
    # Ctrl-C (and a supervisor's SIGTERM) stop the bench, even where the shell that
    # started us in the background left SIGINT ignored (Python then never raises
    # KeyboardInterrupt).
    stop = threading.Event()
    for sig in (signal.SIGINT, signal.SIGTERM):
        signal.signal(sig, lambda *_: stop.set())
    try:
        print(f"vna     {vna}")
        print(f"prober  {prober}")
        print(f"wafer   {bench.chip.wafer_id} (lot {bench.chip.lot}, chip {bench.chip.name}), "
              f"{len(bench.chip.dies())} dies, seed {args.seed}")
        print("Ctrl-C stops the bench.", flush=True)
        while not stop.wait(0.2):
            pass
    finally:
        bench.stop()
    print("simulated bench stopped")
    return 0
