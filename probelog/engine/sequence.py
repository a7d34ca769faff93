"""The walk's (die, site) pairs in visiting order, computed on demand.

A plan of a 1000 x 1000 ``dies = "all"`` grid with a few sites is millions of
pairs; held as a list of tuples that is gigabytes and seconds before the first
landing. :class:`SiteSequence` keeps only the rows' die counts and answers
"the i-th pair" and "where does this die start" by arithmetic, in the same order
as ``Plan.iter_dies()`` (serpentine flips direction on every row that has dies).
"""

from __future__ import annotations

import bisect
from collections.abc import Iterator
from probelog.bench import Die
from probelog.plan_types import Plan, Site


class SiteSequence:
    """A read-only sequence of (die, site) over a loaded plan."""

    def __init__(self, plan: Plan) -> None:
        self._plan = plan
        self._sites: tuple[Site, ...] = plan.sequence_sites
        w = plan.wafer
        self._listed: list[Die] | None = None
        self._listed_at: dict[Die, int] | None = None
        if w.dies is not None:  # an explicit list: as long as the plan file, kept as it is
            self._listed = plan.dies_in_order()
            n_dies = len(self._listed)
        else:
            self._cols = w.cols
            self._skip = set(w.skip)
            skipped = [0] * w.rows
            for _, r in self._skip:
                skipped[r] += 1
            self._rows = [r for r in range(w.rows) if skipped[r] < self._cols]
            self._row_index = {r: j for j, r in enumerate(self._rows)}
            self._first: list[int] = []  # die index of each row's first die
            n_dies = 0
            for r in self._rows:
                self._first.append(n_dies)
                n_dies += self._cols - skipped[r]
            self._serpentine = w.order == "serpentine"
            self._cached: tuple[int, list[int]] = (-1, [])
        self._n_dies = n_dies

    # ------------------------------------------------------------ sequence protocol

    def __len__(self) -> int:
        return self._n_dies * len(self._sites)

    def __getitem__(self, i: int) -> tuple[Die, Site]:
        n = len(self)
        if i < 0:
            i += n
        if not 0 <= i < n:
            raise IndexError(f"step {i} outside the plan's {n} steps")
        k, s = divmod(i, len(self._sites))
        return self._die_at(k), self._sites[s]

    def __iter__(self) -> Iterator[tuple[Die, Site]]:
        for die in self._plan.iter_dies():
            for site in self._sites:
                yield die, site

    # ------------------------------------------------------------ questions

    def die_start(self, die: Die) -> int | None:
        """Index of the die's first (die, site) pair, or None if the plan does not visit it."""
        die = (int(die[0]), int(die[1]))
        if self._listed is not None:
            if self._listed_at is None:
                self._listed_at = {d: k for k, d in enumerate(self._listed)}
            k = self._listed_at.get(die)
            return None if k is None else k * len(self._sites)
        c, r = die
        j = self._row_index.get(r)
        if j is None or not 0 <= c < self._cols or die in self._skip:
            return None
        pos = self._row_cols(j).index(c)  # one row: at most a thousand columns
        return (self._first[j] + pos) * len(self._sites)

    def die_items(self, die: Die) -> list[tuple[Die, Site]]:
        """The (die, site) pairs of one die, in sequence order ([] if not visited)."""
        return [] if self.die_start(die) is None else [((int(die[0]), int(die[1])), s) for s in self._sites]

    # ------------------------------------------------------------ grid arithmetic

    def _die_at(self, k: int) -> Die:
        if self._listed is not None:
            return self._listed[k]
        j = bisect.bisect_right(self._first, k) - 1
        return self._row_cols(j)[k - self._first[j]], self._rows[j]

    def _row_cols(self, j: int) -> list[int]:
        """Columns of the j-th row that has dies, in visiting order (the last row asked is kept)."""
        if self._cached[0] != j:
            r = self._rows[j]
            cols = [c for c in range(self._cols) if (c, r) not in self._skip]
            if self._serpentine and j % 2 == 1:
                cols.reverse()
            self._cached = (j, cols)
        return self._cached[1]
