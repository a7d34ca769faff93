"""Typed readers for one value of a plan table, each failing with one line.

Every reader takes the error context, the table, the key and the key's full path
(``site[2].length_um``, used in the message), and returns the value in its
Python type or raises :class:`~probelog.plan_toml.PlanError` saying what was
expected and what was found. A ``default`` of :data:`MISSING` makes the key
required; a default of None makes it optional (the reader then returns None).

Why not msgspec's TOML-to-Struct conversion: its errors ("Expected `int`, got
`str` - at `$.wafer.cols`") name neither the line nor the nearest known key,
and cross-field rules (a die inside the grid, an ordered window) need these
readers anyway; the plan's one-line messages are part of its contract (tests).
"""

from __future__ import annotations

import difflib
import enum
import math
from collections.abc import Mapping, Sequence
from typing import Any, Literal, TypeGuard, overload

from probelog.bench import Die
from probelog.plan_toml import Ctx

Table = Mapping[str, Any]
"""A TOML table as tomllib returns it (values are TOML types)."""


class _Missing(enum.Enum):
    MISSING = enum.auto()


MISSING: Literal[_Missing.MISSING] = _Missing.MISSING
"""The default that makes a key required (an enum member, so type checkers can narrow it)."""


def describe(value: object) -> str:
    """What a value is, in words for an error message ("the text 'x'", "a list of 3")."""
    if isinstance(value, bool):
        return f"the boolean {str(value).lower()}"
    if isinstance(value, str):
        return f"the text {value!r}"
    if isinstance(value, (int, float)):
        return f"the number {value!r}"
    if isinstance(value, list):
        return f"a list of {len(value)}"
    if isinstance(value, dict):
        return "a table"
    return f"a {type(value).__name__}"


def is_num(v: object) -> TypeGuard[int | float]:
    """True for a TOML integer or float (booleans are not numbers here)."""
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def table(ctx: Ctx, parent: Table, key: str, path: str, allowed: tuple[str, ...],
          required: tuple[str, ...] = ()) -> dict[str, Any]:
    """The required sub-table ``parent[key]``, its keys checked (see :func:`check_keys`)."""
    value = parent.get(key, MISSING)
    if value is MISSING:
        raise ctx.error(path, f"missing table; expected a [{path}] section")
    if not isinstance(value, dict):
        raise ctx.error(path, f"expected a table, found {describe(value)}")
    check_keys(ctx, value, path, allowed, required)
    return value


def check_keys(ctx: Ctx, t: Table, path: str, allowed: tuple[str, ...], required: tuple[str, ...]) -> None:
    """Refuse an unknown key (naming the nearest known one) or a missing required one."""
    for k in t:
        if k not in allowed:
            near = difflib.get_close_matches(k, allowed, n=1)
            hint = f"; did you mean {near[0]!r}?" if near else f"; known keys: {', '.join(allowed)}"
            raise ctx.error(f"{path}.{k}" if path else k, f"unknown key{hint}")
    for k in required:
        if k not in t:
            raise ctx.error(f"{path}.{k}" if path else k, f"missing key in [{path}]")


@overload
def text(ctx: Ctx, t: Table, key: str, path: str, default: str | _Missing = MISSING,
         choices: Sequence[str] | None = None) -> str: ...
@overload
def text(ctx: Ctx, t: Table, key: str, path: str, default: None,
         choices: Sequence[str] | None = None) -> str | None: ...
def text(ctx: Ctx, t: Table, key: str, path: str, default: str | None | _Missing = MISSING,
         choices: Sequence[str] | None = None) -> str | None:
    """Non-empty text, one of ``choices`` when given."""
    v = t.get(key, default)
    if v is MISSING:
        raise ctx.error(path, "missing key")
    if v is None:
        return None
    if not isinstance(v, str) or not v.strip():
        raise ctx.error(path, f"expected non-empty text, found {describe(v)}")
    if choices is not None and v not in choices:
        raise ctx.error(path, f"expected one of {', '.join(choices)}; found {v!r}")
    return v


@overload
def num(ctx: Ctx, t: Table, key: str, path: str, default: float | _Missing = MISSING,
        positive: bool = False, allow_zero: bool = True) -> float: ...
@overload
def num(ctx: Ctx, t: Table, key: str, path: str, default: None,
        positive: bool = False, allow_zero: bool = True) -> float | None: ...
def num(ctx: Ctx, t: Table, key: str, path: str, default: float | None | _Missing = MISSING,
        positive: bool = False, allow_zero: bool = True) -> float | None:
    """A finite number as float; ``positive``: >= 0 (> 0 unless ``allow_zero``)."""
    v = t.get(key, default)
    if v is MISSING:
        raise ctx.error(path, "missing key")
    if v is None:
        return None
    if not is_num(v) or not math.isfinite(v):
        raise ctx.error(path, f"expected a finite number, found {describe(v)}")
    if positive and (v < 0 or (v == 0 and not allow_zero)):
        raise ctx.error(path, f"expected a number {'>= 0' if allow_zero else '> 0'}, found {v!r}")
    return float(v)


def integer(ctx: Ctx, t: Table, key: str, path: str, default: int | _Missing = MISSING,
            lo: int | None = None, hi: int | None = None) -> int:
    """A whole number in ``lo``..``hi`` (either bound optional)."""
    v = t.get(key, default)
    if v is MISSING:
        raise ctx.error(path, "missing key")
    if not isinstance(v, int) or isinstance(v, bool):
        raise ctx.error(path, f"expected a whole number, found {describe(v)}")
    if (lo is not None and v < lo) or (hi is not None and v > hi):
        rng = f"{lo} to {hi}" if hi is not None else f">= {lo}"
        raise ctx.error(path, f"expected a whole number {rng}, found {v}")
    return v


def boolean(ctx: Ctx, t: Table, key: str, path: str, default: bool | _Missing = MISSING) -> bool:
    """true or false."""
    v = t.get(key, default)
    if v is MISSING:
        raise ctx.error(path, "missing key")
    if not isinstance(v, bool):
        raise ctx.error(path, f"expected true or false, found {describe(v)}")
    return v


@overload
def pair(ctx: Ctx, t: Table, key: str, path: str, what: str, default: _Missing = MISSING,
         ordered: bool = False, positive: bool = False) -> tuple[float, float]: ...
@overload
def pair(ctx: Ctx, t: Table, key: str, path: str, what: str, default: None,
         ordered: bool = False, positive: bool = False) -> tuple[float, float] | None: ...
def pair(ctx: Ctx, t: Table, key: str, path: str, what: str, default: None | _Missing = MISSING,
         ordered: bool = False, positive: bool = False) -> tuple[float, float] | None:
    """Two finite numbers [a, b] (``what`` says what they mean in the message);
    ``ordered``: a < b; ``positive``: neither is negative."""
    v = t.get(key, default)
    if v is MISSING:
        raise ctx.error(path, f"missing key; expected {what}")
    if v is None:
        return None
    if not (isinstance(v, list) and len(v) == 2 and all(is_num(x) and math.isfinite(x) for x in v)):
        raise ctx.error(path, f"expected {what}, found {describe(v)}")
    a, b = float(v[0]), float(v[1])
    if positive and (a < 0 or b < 0):
        raise ctx.error(path, f"expected {what} with no negative value, found [{a:g}, {b:g}]")
    if ordered and not a < b:
        raise ctx.error(path, f"expected {what} with low < high, found [{a:g}, {b:g}]")
    return (a, b)


def die(ctx: Ctx, v: object, path: str, wafer_cols: int, wafer_rows: int) -> Die:
    """A die [col, row] inside the ``wafer_cols`` x ``wafer_rows`` grid (counted from 0)."""
    if not (isinstance(v, list) and len(v) == 2 and all(isinstance(x, int) and not isinstance(x, bool) for x in v)):
        raise ctx.error(path, f"expected a die [col, row] of two whole numbers, found {describe(v)}")
    c, r = int(v[0]), int(v[1])
    if not (0 <= c < wafer_cols and 0 <= r < wafer_rows):
        raise ctx.error(path, f"die [{c}, {r}] is outside the {wafer_cols} x {wafer_rows} grid "
                              f"(col 0..{wafer_cols - 1}, row 0..{wafer_rows - 1})")
    return (c, r)


def name_list(ctx: Ctx, t: Table, key: str, path: str,
              default: list[str] | _Missing = MISSING) -> tuple[str, ...]:
    """A list of site names (each checked against the sites by the caller)."""
    v = t.get(key, default)
    if v is MISSING:
        raise ctx.error(path, "missing key; expected a list of site names")
    if not (isinstance(v, list) and all(isinstance(x, str) for x in v)):
        raise ctx.error(path, f"expected a list of site names, found {describe(v)}")
    return tuple(v)


def note(ctx: Ctx, t: Table, path: str) -> str:
    """The optional free-text ``note`` of a table ("" when absent)."""
    v = t.get("note", "")
    if not isinstance(v, str):
        raise ctx.error(path, f"expected text, found {describe(v)}")
    return v
