"""The probing plan: a TOML file that says what to probe, where, how and against
which expectations.

Units: offsets, pitches, lengths and widths in um; frequencies in Hz; power in
dBm; impedances in ohm; attenuation in dB/mm (dB = 20 log10 |S|). Dies are
addressed (column, row), counted from 0 at the wafer map's top-left.

Every mistake in a plan raises :class:`PlanError` with one line that names the
file, the key path (``site[3].offset_um``; array tables are counted from 1 as a
reader counts them in the file), the line when it can be found, and what was
expected. See ``probelog/plans/demo.toml`` for a complete, commented example.

This module loads a plan and re-exports the plan's public names; the pieces:
probelog.plan_toml (text to TOML, errors pointing at lines), probelog.plan_fields
(one typed value), probelog.plan_layout (wafer, sites, pre-check),
probelog.plan_procedure (sequence, calibration, stimulus, probes, limits),
probelog.plan_types (the dataclasses) and probelog.plan_walk (the die order).
"""

from __future__ import annotations

import hashlib
from importlib import resources
from pathlib import Path

from probelog.plan_fields import Table, check_keys, describe
from probelog.plan_fields import text as text_field
from probelog.plan_layout import check_golden_span, read_precheck, read_sites, read_wafer
from probelog.plan_procedure import read_calibration, read_limits, read_probes, read_sequence, read_vna
from probelog.plan_toml import Ctx, PlanError, parse_toml, read_plan_file
from probelog.plan_types import (
    KINDS,
    METHODS,
    ORDERS,
    CalibrationPlan,
    Plan,
    Precheck,
    Probes,
    Sequence,
    Site,
    VnaSettings,
    Wafer,
)

__all__ = [
    "KINDS", "METHODS", "ORDERS", "CalibrationPlan", "Plan", "PlanError", "Precheck", "Probes", "Sequence",
    "Site", "VnaSettings", "Wafer", "load_plan", "load_plan_text",
]

_TOP = ("plan", "wafer", "site", "sequence", "calibration", "vna", "probes", "limits", "precheck")


def load_plan(path: str | Path) -> Plan:
    """Load a plan file; the word ``demo`` loads the built-in demo plan."""
    if str(path) == "demo":
        ref = resources.files("probelog") / "plans" / "demo.toml"
        demo = ref.read_text(encoding="utf-8")
        return load_plan_text(demo, "demo.toml (built-in)", base_dir=Path(str(ref)).parent)
    p = Path(path)
    return load_plan_text(read_plan_file(p), str(p), base_dir=p.resolve().parent)


def load_plan_text(text: str, source: str = "<plan>", base_dir: Path | None = None) -> Plan:
    """Parse and validate plan text; ``source`` names it in error messages and
    ``base_dir`` resolves a relative kit path (default: the current folder)."""
    raw = parse_toml(text, source)
    return _build(Ctx(source, text), raw, text, base_dir or Path.cwd())


def _build(ctx: Ctx, raw: Table, text: str, base_dir: Path) -> Plan:
    """The Plan of TOML table ``raw``, its tables read in the order a person reads the file."""
    check_keys(ctx, raw, "", _TOP, ())
    head = raw.get("plan", {})
    if not isinstance(head, dict):
        raise ctx.error("plan", f"expected a table, found {describe(head)}")
    check_keys(ctx, head, "plan", ("name", "description"), ())
    default_name = Path(ctx.source.split(" ")[0]).stem or "plan"
    name = text_field(ctx, head, "name", "plan.name", default_name)
    description = head.get("description", "")
    if not isinstance(description, str):
        raise ctx.error("plan.description", f"expected text, found {describe(description)}")

    wafer = read_wafer(ctx, raw)
    sites = read_sites(ctx, raw, wafer, base_dir)
    by_name = {s.name: s for s in sites}
    sequence = read_sequence(ctx, raw, wafer, by_name)
    calibration = read_calibration(ctx, raw, wafer, by_name, base_dir)
    vna = read_vna(ctx, raw)
    check_golden_span(ctx, sites, vna)
    probes = read_probes(ctx, raw)
    limits = read_limits(ctx, raw)
    precheck = read_precheck(ctx, raw, "precheck", Precheck()) or Precheck()  # the plan's default
    return Plan(
        name=name,
        description=description,
        source=ctx.source,
        text=text,
        sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
        wafer=wafer,
        sites=sites,
        sequence=sequence,
        calibration=calibration,
        vna=vna,
        probes=probes,
        limits=limits,
        precheck=precheck,
    )
