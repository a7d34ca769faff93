"""The order in which a plan's dies are visited.

Dies are (column, row), counted from 0 at the wafer map's top-left. ``order``
``serpentine``: rows alternate direction (the stage never travels back across
the wafer between rows); ``rows``: every row left to right; ``listed``: as
written in ``wafer.dies``. Rows are visited top to bottom.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from typing import TYPE_CHECKING

from probelog.bench import Die

if TYPE_CHECKING:  # plan_types imports this module for Plan.iter_dies
    from probelog.plan_types import Wafer


def iter_dies(w: Wafer) -> Iterator[Die]:
    """Dies to probe as (col, row) in visiting order, one at a time: a
    1000 x 1000 ``dies = "all"`` grid never becomes a list of a million dies
    (the skip set and one row of columns are all that is held)."""
    if w.dies is not None and w.order == "listed":
        yield from w.dies
        return
    rows: Iterable[tuple[int, list[int]]]
    if w.dies is None:
        skip = set(w.skip)
        rows = ((r, [c for c in range(w.cols) if (c, r) not in skip]) for r in range(w.rows))
    else:
        by_row: dict[int, list[int]] = {}
        for c, r in w.dies:
            by_row.setdefault(r, []).append(c)
        rows = ((r, sorted(by_row[r])) for r in sorted(by_row))
    # Serpentine flips direction on every row that has dies, so the stage
    # never travels back across the wafer between rows.
    i = 0
    for r, cols in rows:
        if not cols:
            continue
        if w.order == "serpentine" and i % 2 == 1:
            cols = cols[::-1]
        yield from ((c, r) for c in cols)
        i += 1


def die_count(w: Wafer) -> int:
    """How many dies :func:`iter_dies` yields, without walking them."""
    if w.dies is not None:
        return len(w.dies)
    return w.cols * w.rows - len(set(w.skip))
