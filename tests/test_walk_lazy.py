"""The walk over a 1000 x 1000 ``dies = "all"`` grid is computed on demand
(issue 13, item 5): no list of a million dies before the first landing, and the
same order as the plan's own ``iter_dies`` (the reference the plan tests check
against the whole-list algorithm it replaced)."""

from __future__ import annotations

import random
import re
import tracemalloc

import probelog.session as S
from probelog.engine.sequence import SiteSequence
from probelog.journal import Journal
from probelog.plan import load_plan_text
from tests._engine_fakes import fake_bench, plan_text
from test_plan_hardening import _plan


def grid_plan(cols: int, rows: int, skip: str = "[]", order: str = "serpentine") -> str:
    text = plan_text(sites=("ln-a", "ln-b"))
    text = text.replace("cols = 4", f"cols = {cols}").replace("rows = 4", f"rows = {rows}")
    text = text.replace("die_pitch_um = [4000.0, 4000.0]", "die_pitch_um = [4000.0, 4000.0]\nskip = " + skip)
    text = re.sub(r"dies = \[.*\]", 'dies = "all"', text).replace('order = "listed"', f'order = "{order}"')
    return text


def test_site_sequence_is_the_plan_order_by_index_and_by_die():
    rng = random.Random(1313)
    for _ in range(40):
        cols, rows = rng.randint(1, 6), rng.randint(1, 6)
        grid = [(c, r) for r in range(rows) for c in range(cols)]
        skip = rng.sample(grid, rng.randint(0, len(grid) - 1))
        free = [d for d in grid if d not in skip]
        order = rng.choice(["serpentine", "rows", "listed"])
        dies = str([list(d) for d in rng.sample(free, rng.randint(1, len(free)))]) \
            if order == "listed" or rng.random() < 0.3 else '"all"'
        text = (_plan(order, dies).replace("cols = 3", f"cols = {cols}").replace("rows = 3", f"rows = {rows}")
                .replace("skip = [[0, 0]]", f"skip = {[list(d) for d in skip]}")
                .replace("die = [1, 1]", f"die = {list(free[0])}")
                .replace('sites = ["t"]', 'sites = ["t", "o"]'))
        plan = load_plan_text(text, "p.toml")
        seq = SiteSequence(plan)
        want = [(d, s) for d in plan.iter_dies() for s in plan.sequence_sites]
        assert len(seq) == len(want) and list(seq) == want
        assert [seq[i] for i in range(len(seq))] == want
        for i, (die, _) in enumerate(want):
            if i % 2 == 0:
                assert seq.die_start(die) == i and [s.name for _, s in seq.die_items(die)] == ["t", "o"]
        assert all(seq.die_start(d) is None and seq.die_items(d) == [] for d in grid if d not in set(plan.iter_dies()))


def test_million_die_walk_reaches_its_first_landing_without_a_million_list(tmp_path):
    plan = load_plan_text(grid_plan(1000, 1000, "[[0, 0], [999, 999]]"), "big.toml")
    tracemalloc.start()
    try:
        engine = S.Engine(plan, fake_bench(), Journal.create(tmp_path, "big"), operator="t")
        while engine.next_step is not None:
            engine.measure()
        _, opening_peak = tracemalloc.get_traced_memory()
        engine.compute_calibration()  # solving and comparing two cal methods: not the walk's memory
        engine.accept_calibration()
        tracemalloc.reset_peak()
        first = engine.next_step
        out = engine.measure()
        engine.accept()
        second = engine.next_step
        _, landing_peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    # a list of 2 million (die, site) pairs alone is well over 100 MB (CPython
    # tuples); opening the session and measuring the standards, or one landing
    # on the fake bench, need a few MB
    assert opening_peak < 30_000_000, f"peak {opening_peak / 1e6:.0f} MB from opening to the cal standards"
    assert landing_peak < 30_000_000, f"peak {landing_peak / 1e6:.0f} MB for the first landing"
    assert engine.progress == (1, 2 * (1_000_000 - 2))
    assert (first.die, first.site, out.step.die) == ((1, 0), "ln-a", (1, 0)) and (second.die, second.site) == ((1, 0), "ln-b")
    engine.goto((998, 999))  # the last row runs right to left (serpentine, row 999 is odd)
    assert (engine.next_step.die, engine.next_step.site) == ((998, 999), "ln-a")
    engine.close()
