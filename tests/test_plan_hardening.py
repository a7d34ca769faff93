"""Plans that would break later are refused when they load (issue 13, item 5):
names Windows cannot store, ids too long for a file name, TOML nested past
Python's recursion limit; and a 1000 x 1000 grid is walked lazily."""

from __future__ import annotations

import itertools
import random
import tracemalloc

import pytest

from probelog.names import name_problem
from probelog.plan import PlanError, load_plan, load_plan_text
from test_plan import SMALL


def _plan(order: str = "serpentine", dies: str = '"all"') -> str:
    return SMALL.format(order=order, dies=dies)


def _one_line_error(text: str, source: str = "p.toml") -> str:
    with pytest.raises(PlanError) as info:
        load_plan_text(text, source)
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith(source)
    return msg


# Microsoft, "Naming Files, Paths, and Namespaces" (from memory): CON, PRN, AUX,
# NUL, COM1-9, LPT1-9 in any case and with any extension; no trailing dot or space.
@pytest.mark.parametrize("name", ["con", "NUL", "Aux", "prn", "com1", "COM9", "lpt1", "lpt9.x", "nul.s2p", "t."])
def test_windows_device_names_and_trailing_dot_are_refused(name):
    text = _plan().replace('name = "t"', f'name = "{name}"').replace('sites = ["t"]', f'sites = ["{name}"]')
    text = text.replace('standards = ["o", "s", "l", "t"]', f'standards = ["o", "s", "l", "{name}"]')
    msg = _one_line_error(text)
    line = text.splitlines().index(f'name = "{name}"') + 1
    assert f"line {line}: site[1].name" in msg and ("device name" in msg or "dot" in msg)


@pytest.mark.parametrize("name", ["con1", "console", "com10", "lpt", "nulls", "t.1", "com0"])
def test_names_that_only_look_like_devices_load(name):
    text = _plan().replace('name = "t"', f'name = "{name}"').replace('sites = ["t"]', f'sites = ["{name}"]')
    text = text.replace('standards = ["o", "s", "l", "t"]', f'standards = ["o", "s", "l", "{name}"]')
    assert load_plan_text(text, "p.toml").sites[0].name == name
    assert name_problem(name) is None


def test_wafer_id_too_long_for_a_file_name_is_refused():
    long_id = "QF2611-" + "W" * 200
    msg = _one_line_error(_plan().replace('id = "W"', f'id = "{long_id}"'))
    assert "wafer.id" in msg and "207 characters" in msg and "line 3" in msg
    assert load_plan_text(_plan().replace('id = "W"', f'id = "{long_id[:100]}"'), "p.toml").wafer.id == long_id[:100]


@pytest.mark.parametrize("opening, closing", [("[", "]"), ("{a=", "}")])
def test_plan_nested_5000_levels_is_one_line(tmp_path, opening, closing):
    text = _plan() + "\n[limits]\nx = " + opening * 5000 + "1" * (opening == "{a=") + closing * 5000 + "\n"
    path = tmp_path / "deep.toml"
    path.write_text(text)
    with pytest.raises(PlanError) as info:
        load_plan(path)
    msg = str(info.value)
    assert "\n" not in msg and msg.startswith(str(path)) and "nested" in msg
    assert f"line {len(_plan().splitlines()) + 3}: " in msg  # the "x = [[[..." line
    # 50 levels is still TOML the loader reads to the end (and refuses for its type)
    shallow = _plan() + "\n[limits]\nx = " + "[" * 50 + "]" * 50 + "\n"
    assert "limits.x: expected a finite number" in _one_line_error(shallow)


def _reference_order(plan) -> list:
    """The visiting order as the plan module computed it before it went lazy
    (a whole list, sorted per row), kept here as the reference."""
    w = plan.wafer
    if w.dies is None:
        dies = [(c, r) for r in range(w.rows) for c in range(w.cols) if (c, r) not in set(w.skip)]
    else:
        dies = list(w.dies)
    if w.order == "listed":
        return dies
    by_row: dict[int, list[int]] = {}
    for c, r in dies:
        by_row.setdefault(r, []).append(c)
    out = []
    for i, r in enumerate(sorted(by_row)):
        out.extend((c, r) for c in sorted(by_row[r], reverse=(w.order == "serpentine" and i % 2 == 1)))
    return out


def test_lazy_walk_matches_the_whole_list_order():
    rng = random.Random(13)
    for _ in range(60):
        cols, rows = rng.randint(1, 7), rng.randint(1, 7)
        grid = [(c, r) for r in range(rows) for c in range(cols)]
        skip = rng.sample(grid, rng.randint(0, len(grid) - 1))
        order = rng.choice(["serpentine", "rows", "listed"])
        free = [d for d in grid if d not in skip]
        listed = rng.sample(free, rng.randint(1, len(free)))
        dies = '"all"' if order != "listed" and rng.random() < 0.5 else str([list(d) for d in listed])
        text = (_plan(order, dies).replace("cols = 3", f"cols = {cols}").replace("rows = 3", f"rows = {rows}")
                .replace("skip = [[0, 0]]", f"skip = {[list(d) for d in skip]}")
                .replace("die = [1, 1]", f"die = {list(free[0])}"))
        plan = load_plan_text(text, "p.toml")
        assert list(plan.iter_dies()) == _reference_order(plan) == plan.dies_in_order()
        assert plan.die_count() == len(_reference_order(plan))


def test_million_die_grid_loads_and_starts_without_a_million_element_list():
    text = (_plan().replace("cols = 3", "cols = 1000").replace("rows = 3", "rows = 1000")
            .replace("die_pitch_um = [1000.0, 1000.0]", "die_pitch_um = [100.0, 100.0]"))
    tracemalloc.start()
    try:
        plan = load_plan_text(text, "big.toml")
        first = list(itertools.islice(plan.iter_dies(), 1002))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert plan.die_count() == 1_000_000 - 1
    assert first[:2] == [(1, 0), (2, 0)] and first[998] == (999, 0) and first[999:] == [(999, 1), (998, 1), (997, 1)]
    # a list of a million (col, row) tuples alone is ~70 MB (64-byte tuples plus the
    # list's pointers, CPython); the lazy walk holds one row of columns
    assert peak < 5_000_000, f"peak {peak / 1e6:.1f} MB while loading and taking the first dies"
