"""The fault matrix on the simulated bench (shared by tests/test_fault_matrix.py
and bench/fault_matrix.py).

One headless run per contact fault kind, the demo plan cut to its first dies,
``--retries 0 --fault-rate 0``: lifted tips (port 1, port 2, both) on every
sequence site of the FIRST die (no history: physics must catch them), high
contact resistance and a skating ground on every sequence site of the SECOND
die (one accepted landing of each site before it: the population catches them).
Clean runs over several seeds count every FAIL verdict (each one is false).
"""

from __future__ import annotations

import io
import re
import tempfile
from contextlib import redirect_stdout
from dataclasses import dataclass, field
from pathlib import Path

from probelog.journal import Journal

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "probelog" / "plans" / "demo.toml"
KIT = ROOT / "probelog" / "kits" / "plx7.toml"
FIRST_DIE_FAULTS = ("lifted-1", "lifted-2", "lifted")
SECOND_DIE_FAULTS = ("high-rc", "skate")


def plan_text(n_dies: int) -> tuple[str, list[tuple[int, int]], list[str]]:
    """The demo plan with its first ``n_dies`` dies, the kit path made absolute."""
    text = DEMO.read_text(encoding="utf-8")
    m = re.search(r"^dies = \[(.*?)\]\n(?=order)", text, re.S | re.M)
    assert m, "demo plan layout changed: dies = [...] not found"
    dies = [tuple(int(x) for x in d.split(",")) for d in re.findall(r"\[(\d+,\s*\d+)\]", m.group(1))][:n_dies]
    text = text[:m.start()] + "dies = [" + ", ".join(f"[{c}, {r}]" for c, r in dies) + "]\n" + text[m.end():]
    text = text.replace('kit = "../kits/plx7.toml"', f'kit = "{KIT.as_posix()}"')
    seq = re.search(r"^sites = \[(.*?)\]", text, re.S | re.M)
    assert seq
    sites = re.findall(r'"([^"]+)"', seq.group(1))
    return text, [(int(c), int(r)) for c, r in dies], sites


@dataclass
class RunResult:
    landings: list[dict] = field(default_factory=list)   # first landing of each (die, site)
    cal_accepted: bool = False
    exit_code: int = 0


def run(seed: int, n_dies: int, faults: list[str], root: Path) -> RunResult:
    from probelog.tui.cli import main

    text, _, _ = plan_text(n_dies)
    plan = root / f"plan-{seed}-{len(faults)}.toml"
    plan.write_text(text, encoding="utf-8")
    out_dir = root / f"s-{seed}-{abs(hash(tuple(faults)))}"
    argv = ["run", str(plan), "--headless", "--dir", str(out_dir), "--seed", str(seed),
            "--fault-rate", "0", "--retries", "0"]
    for f in faults:
        argv += ["--fault", f]
    with redirect_stdout(io.StringIO()):
        code = main(argv)
    folder = next(out_dir.iterdir())
    res = RunResult(exit_code=code)
    for e in Journal.open(folder).events():
        if e.type in ("landing", "precheck") and e.payload.get("landing") == 1:  # a failed pre-check too
            res.landings.append(e.payload)
        if e.type == "cal-accepted":
            res.cal_accepted = True
    return res


@dataclass
class Matrix:
    caught: dict[tuple[str, str], bool] = field(default_factory=dict)   # (fault, site) -> FAIL
    messages: dict[tuple[str, str], str] = field(default_factory=dict)
    clean_landings: int = 0
    clean_fails: list[str] = field(default_factory=list)
    clean_cals: int = 0
    clean_cals_accepted: int = 0


def _why(p: dict) -> str:
    bad = [c for c in p.get("checks", []) if c.get("verdict") == "fail"]
    return "; ".join(f"{c['name']}: {c['message']}" for c in bad)[:300]


def fault_matrix(seed: int = 3, fault_kinds: tuple[str, ...] = FIRST_DIE_FAULTS + SECOND_DIE_FAULTS,
                 clean_seeds: tuple[int, ...] = (), clean_dies: int = 3) -> Matrix:
    out = Matrix()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        _, dies, sites = plan_text(2)
        for kind in fault_kinds:
            die = dies[0] if kind in FIRST_DIE_FAULTS else dies[1]
            specs = [f"{kind}@{die[0]},{die[1]}:{s}#all" for s in sites]
            res = run(seed, 2, specs, root)
            for p in res.landings:
                if tuple(p["die"]) == die:
                    out.caught[(kind, p["site"])] = p["verdict"] == "fail"
                    out.messages[(kind, p["site"])] = _why(p)
        for s in clean_seeds:
            res = run(s, clean_dies, [], root)
            out.clean_cals += 1
            out.clean_cals_accepted += int(res.cal_accepted)
            for p in res.landings:
                out.clean_landings += 1
                if p["verdict"] == "fail":
                    out.clean_fails.append(f"seed {s} die {p['die']} {p['site']}: {_why(p)}")
    return out
