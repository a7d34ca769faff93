"""``probelog demo``: the bench UI on the simulated bench with the demo plan."""

from __future__ import annotations

import argparse

HELP = "open the bench UI on the simulated bench with the demo plan (PLX-7, wafer QF2611-W07)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--dir", metavar="DIR", default="sessions",
                        help="where session folders go (default sessions/)")
    parser.add_argument("--seed", type=int, default=7, help="simulated bench seed (default 7)")
    parser.add_argument("--fault-rate", type=float, default=None, metavar="X",
                        help="chance of a random fault per landing, 0..1 (default: the bench's demo rate)")
    parser.add_argument("--operator", default="", help="prefill the operator field")


def bench_args(request, seed: int, fault_rate: float | None) -> argparse.Namespace:
    """The tui.benches options for what the intake form asked for."""
    kind = request.bench
    return argparse.Namespace(
        bench="sim" if kind == "sim" else "visa",
        vna=request.vna_resource or None,
        vna_dialect="generic-vna",
        prober=("manual" if kind in ("manual", "folder") else (request.prober_resource or None)),
        prober_dialect="generic-prober",
        watch_folder=(request.folder or None) if kind == "folder" else None,
        seed=seed, fault=[], fault_rate=fault_rate,
    )


def with_overrides(plan, request):
    """The plan with the wafer id, lot and probe ids the operator typed."""
    from dataclasses import replace

    wafer = replace(plan.wafer, id=request.wafer or plan.wafer.id, lot=request.lot or plan.wafer.lot)
    probes = replace(plan.probes, ids=tuple(request.probes) or plan.probes.ids)
    return replace(plan, wafer=wafer, probes=probes)


def make_factory(args: argparse.Namespace):
    """engine_factory(request, confirm=None) for tui.app: new session or resume."""

    def engine_factory(request, confirm=None):
        from pathlib import Path

        from probelog.plan import load_plan
        from probelog.session import Engine
        from probelog.tui.benches import build_bench

        if request.resume is not None:
            from probelog.tui.commands.run import _probe_ids_of

            bench = build_bench(bench_args(request, args.seed, args.fault_rate),
                                _probe_ids_of(str(request.resume)), confirm)
            try:
                return Engine.resume(Path(request.resume), bench)
            except BaseException:
                bench.close()
                raise
        plan = with_overrides(load_plan(request.plan or "demo"), request)
        bench = build_bench(bench_args(request, args.seed, args.fault_rate), plan.probes.ids, confirm)
        try:
            return Engine.new(plan, bench, args.dir, operator=request.operator)
        except BaseException:
            bench.close()
            raise

    return engine_factory


def run(args: argparse.Namespace) -> int:
    from probelog.tui.cli import UsageError

    if args.fault_rate is not None and not 0.0 <= args.fault_rate <= 1.0:
        raise UsageError(f"--fault-rate must be between 0 and 1, got {args.fault_rate:g}")
    from probelog.plan import PlanError, load_plan
    from probelog.tui.app import run_app
    from probelog.tui.screens.intake import SessionRequest

    try:
        plan = load_plan("demo")
    except PlanError as exc:
        raise UsageError(str(exc)) from None
    defaults = SessionRequest(
        operator=args.operator, wafer=plan.wafer.id, lot=plan.wafer.lot, probes=tuple(plan.probes.ids),
        bench="sim", plan="demo", sessions_root=args.dir,
    )
    return run_app(make_factory(args), intake=defaults)
