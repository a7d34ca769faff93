"""The probing plan: a TOML file that says what to probe, where, how and against
which expectations.

Units: offsets, pitches, lengths and widths in um; frequencies in Hz; power in
dBm; impedances in ohm; attenuation in dB/mm (dB = 20 log10 |S|). Dies are
addressed (column, row), counted from 0 at the wafer map's top-left.

Every mistake in a plan raises :class:`PlanError` with one line that names the
file, the key path (``site[3].offset_um``; array tables are counted from 1 as a
reader counts them in the file), the line when it can be found, and what was
expected. See ``probelog/plans/demo.toml`` for a complete, commented example.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import re
import tomllib
from dataclasses import dataclass
from dataclasses import replace as _replace
from importlib import resources
from pathlib import Path
from types import MappingProxyType
from typing import Any, Iterable, Iterator, Mapping

from probelog.bench import PRECHECK_IFBW_HZ, PRECHECK_POINTS, Die, SweepSettings
from probelog.names import MAX_ID_CHARS, name_problem

KINDS = ("open", "short", "load", "thru", "line", "open-stub", "short-stub", "device")
ORDERS = ("serpentine", "rows", "listed")
METHODS = ("solt", "lrrm", "mtrl")
# Standards each method needs, by site kind (multiline TRL: a thru and >= 1 line).
_METHOD_NEEDS = {
    "solt": ("open", "short", "load", "thru"),
    "lrrm": ("open", "short", "load", "thru"),
    "mtrl": ("thru", "line"),
}
# Site names become folder names under data/: keep them portable.
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")


class PlanError(ValueError):
    """A plan that cannot be used; the message is one line a person can act on."""


@dataclass(frozen=True)
class Wafer:
    """The wafer and its die grid.

    ``dies`` is None for "all dies on the grid but the skipped ones"; ``order``
    is how the dies are visited (``serpentine``: rows alternate direction,
    ``rows``: every row left to right, ``listed``: as written in the plan).
    """

    id: str
    lot: str
    chip: str
    cols: int
    rows: int
    die_pitch_um: tuple[float, float]
    skip: tuple[Die, ...]
    dies: tuple[Die, ...] | None
    order: str


@dataclass(frozen=True)
class Site:
    """A structure on every die, at ``offset_um`` (x, y in um) from the die origin.

    Expectations are None when the plan does not give them: ``z0_window_ohm``
    (lo, hi) in ohm, ``alpha_db_per_mm_max`` in dB/mm, ``eps_eff_window`` (lo, hi),
    ``window_band_hz`` (lo, hi) in Hz: where the windows are judged (default: the
    whole sweep). ``c_ref_pf_per_mm`` (pF/mm) or ``z0_ref_ohm`` (ohm): a line's
    capacitance per length or impedance, known from elsewhere, that turns the
    pad-free two-line gamma into Z0 and RLGC (probelog.line_pairs).
    """

    name: str
    kind: str
    offset_um: tuple[float, float]
    ports: int = 2
    symmetric: bool = False
    length_um: float | None = None
    z0_window_ohm: tuple[float, float] | None = None
    alpha_db_per_mm_max: float | None = None
    eps_eff_window: tuple[float, float] | None = None
    window_band_hz: tuple[float, float] | None = None
    line_type: str | None = None
    width_um: float | None = None
    gap_um: float | None = None
    metal: str | None = None
    note: str = ""
    precheck: "Precheck | None" = None  # None: the plan's [precheck]
    s21_db_window: tuple[float, float] | None = None  # device: |S21| (dB) it must stay in over s21_band_hz
    s21_band_hz: tuple[float, float] | None = None
    c_ref_pf_per_mm: float | None = None
    z0_ref_ohm: float | None = None


@dataclass(frozen=True)
class Precheck:
    """The contact pre-check before a site's sweep (``[precheck]``, or ``precheck``
    in a ``[[site]]``: false, or a table overriding the plan's keys): ``points``
    spread over the plan's band at ``ifbw_hz`` Hz; skipped when not ``enabled``."""

    enabled: bool = True
    points: int = PRECHECK_POINTS
    ifbw_hz: float = PRECHECK_IFBW_HZ


@dataclass(frozen=True)
class Sequence:
    """What to probe on each die, the drift reference and the recalibration cadence.

    ``drift_every_landings`` 0 means no drift re-measurement;
    ``recal_every_hours`` None means never recalibrate on a timer.
    """

    sites: tuple[str, ...]
    drift_site: str | None
    drift_die: Die | None
    drift_every_landings: int
    recal_every_hours: float | None


@dataclass(frozen=True)
class CalibrationPlan:
    """How to calibrate at the probe tips.

    ``kit_path`` is the cal-kit file resolved against the plan's folder, or None
    when the kit is written inline (``kit_inline``). ``standards`` are site names
    measured on ``die``; ``verification`` sites are measured after solving.
    """

    method: str
    compare_with: str | None
    kit_path: Path | None
    kit_inline: Mapping[str, Any] | None
    die: Die
    standards: tuple[str, ...]
    verification: tuple[str, ...]
    source: str = ""

    def load_kit(self) -> dict[str, Any]:
        """The cal kit as a TOML table; PlanError naming the plan key if unreadable."""
        if self.kit_inline is not None:
            return dict(self.kit_inline)
        assert self.kit_path is not None
        where = f"{self.source}: calibration.kit"
        try:
            text = self.kit_path.read_text(encoding="utf-8")
        except OSError as exc:
            raise PlanError(f"{where}: cannot read the kit file {self.kit_path} ({exc.strerror})") from None
        try:
            return tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise PlanError(f"{where}: the kit file {self.kit_path} is not valid TOML: {exc}") from None
        except RecursionError:
            raise PlanError(f"{where}: the kit file {self.kit_path}: {_too_deep(text)}") from None


@dataclass(frozen=True)
class VnaSettings:
    """Stimulus: start_hz, stop_hz, ifbw_hz in Hz; power_dbm and its limit in dBm."""

    start_hz: float
    stop_hz: float
    points: int
    ifbw_hz: float
    power_dbm: float
    power_limit_dbm: float

    def sweep_settings(self) -> SweepSettings:
        return SweepSettings(
            start_hz=self.start_hz,
            stop_hz=self.stop_hz,
            points=self.points,
            ifbw_hz=self.ifbw_hz,
            power_dbm=self.power_dbm,
        )


@dataclass(frozen=True)
class Probes:
    """The mounted probes: ids (port 1 first), GSG pitch in um, wear warning."""

    ids: tuple[str, ...]
    pitch_um: float
    wear_warn_touchdowns: int


@dataclass(frozen=True)
class Plan:
    """A loaded, validated plan. ``text`` is the file as read, ``sha256`` its hash."""

    name: str
    description: str
    source: str
    text: str
    sha256: str
    wafer: Wafer
    sites: tuple[Site, ...]
    sequence: Sequence
    calibration: CalibrationPlan
    vna: VnaSettings
    probes: Probes
    limits: Mapping[str, float]
    precheck: Precheck = Precheck()

    def site(self, name: str) -> Site:
        for s in self.sites:
            if s.name == name:
                return s
        raise KeyError(name)

    @property
    def settings(self) -> SweepSettings:
        """The stimulus as the bench's SweepSettings."""
        return self.vna.sweep_settings()

    def precheck_for(self, name: str) -> Precheck:
        """The contact pre-check of site ``name``: its own, else the plan's."""
        own = self.site(name).precheck
        return own if own is not None else self.precheck

    @property
    def power_limit_dbm(self) -> float:
        return self.vna.power_limit_dbm

    @property
    def sequence_sites(self) -> tuple[Site, ...]:
        """The sites of ``sequence.sites`` in probing order."""
        return tuple(self.site(n) for n in self.sequence.sites)

    def dies_in_order(self) -> list[Die]:
        """Dies to probe as (col, row) in visiting order (a list; see iter_dies)."""
        return list(self.iter_dies())

    def iter_dies(self) -> Iterator[Die]:
        """Dies to probe as (col, row) in visiting order, one at a time: a
        1000 x 1000 ``dies = "all"`` grid never becomes a list of a million dies
        (the skip set and one row of columns are all that is held)."""
        w = self.wafer
        if w.dies is not None and w.order == "listed":
            yield from w.dies
            return
        if w.dies is None:
            skip = set(w.skip)
            rows: Iterable[tuple[int, list[int]]] = (
                (r, [c for c in range(w.cols) if (c, r) not in skip]) for r in range(w.rows))
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

    def die_count(self) -> int:
        """How many dies :meth:`iter_dies` yields, without walking them."""
        w = self.wafer
        if w.dies is not None:
            return len(w.dies)
        return w.cols * w.rows - len(set(w.skip))


# --------------------------------------------------------------------------- loading


def load_plan(path: str | Path) -> Plan:
    """Load a plan file; the word ``demo`` loads the built-in demo plan."""
    if str(path) == "demo":
        ref = resources.files("probelog") / "plans" / "demo.toml"
        text = ref.read_text(encoding="utf-8")
        return load_plan_text(text, "demo.toml (built-in)", base_dir=Path(str(ref)).parent)
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise PlanError(f"{p}: no such plan file") from None
    except IsADirectoryError:
        raise PlanError(f"{p}: is a folder, expected a plan file (.toml)") from None
    except OSError as exc:
        raise PlanError(f"{p}: cannot read the plan ({exc.strerror})") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise PlanError(f"{p}, line {line}: not UTF-8 text (byte {exc.start})") from None
    return load_plan_text(text, str(p), base_dir=p.resolve().parent)


def load_plan_text(text: str, source: str = "<plan>", base_dir: Path | None = None) -> Plan:
    """Parse and validate plan text; ``source`` names it in error messages and
    ``base_dir`` resolves a relative kit path (default: the current folder)."""
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        # tomllib ends its message with "(at line L, column C)"; lead with the line.
        msg = str(exc)
        m = re.search(r"\s*\(at line (\d+), column (\d+)\)$", msg)
        if m:
            msg = f"line {m.group(1)}: not valid TOML: {msg[: m.start()]} (column {m.group(2)})"
        else:
            msg = f"not valid TOML: {msg}"
        raise PlanError(f"{source}, {msg}" if m else f"{source}: {msg}") from None
    except RecursionError:  # tomllib parses nested arrays and tables recursively
        raise PlanError(f"{source}: {_too_deep(text)}") from None
    ctx = _Ctx(source, text)
    return _build(ctx, raw, text, base_dir or Path.cwd())


def _too_deep(text: str) -> str:
    """The message for TOML nested past Python's recursion limit, naming the
    first line where the nesting passes 100 levels (no plan needs 10)."""
    depth = 0
    for n, line in enumerate(text.splitlines(), start=1):
        for ch in re.sub(r'"[^"]*"|\'[^\']*\'', "", line.split("#", 1)[0]):
            depth += (ch in "[{") - (ch in "]}")
            if depth > 100:
                return f"line {n}: arrays or tables nested more than 100 levels deep; expected a plain plan"
    return "arrays or tables nested too deep; expected a plain plan"


# --------------------------------------------------------------------------- validation


class _Ctx:
    """Error reporting: maps key paths to line numbers by scanning the text."""

    def __init__(self, source: str, text: str) -> None:
        self.source = source
        self.lines = _index_lines(text)

    def error(self, path: str, message: str) -> PlanError:
        line = self._line_of(path)
        where = f"{self.source}, line {line}" if line else self.source
        return PlanError(f"{where}: {path}: {message}")

    def _line_of(self, path: str) -> int | None:
        # Walk up the path until something in the text matches.
        p = path
        while p:
            if p in self.lines:
                return self.lines[p]
            m = re.search(r"(\.[^.\[\]]+|\[\d+\])$", p)
            p = p[: m.start()] if m else ""
        return None


_HEADER_RE = re.compile(r"^\s*(\[\[?)\s*([A-Za-z0-9_.\-]+)\s*\]\]?")
_KEY_RE = re.compile(r"^\s*([A-Za-z0-9_\-]+)\s*=")


def _index_lines(text: str) -> dict[str, int]:
    """Key path -> first line number, for the usual one-key-a-line TOML layout."""
    index: dict[str, int] = {}
    counts: dict[str, int] = {}
    table = ""
    depth = 0  # inside a multi-line array: no keys there
    for n, line in enumerate(text.splitlines(), start=1):
        code = line.split("#", 1)[0]
        if depth == 0:
            m = _HEADER_RE.match(code)
            if m:
                name = m.group(2)
                if m.group(1) == "[[":
                    counts[name] = counts.get(name, 0) + 1
                    table = f"{name}[{counts[name]}]"
                else:
                    table = name
                index.setdefault(table, n)
                if m.group(1) == "[[":
                    index.setdefault(name, n)
                continue
            m = _KEY_RE.match(code)
            if m:
                key = f"{table}.{m.group(1)}" if table else m.group(1)
                index.setdefault(key, n)
        # Track brackets outside strings to skip the inside of multi-line arrays.
        stripped = re.sub(r'"[^"]*"|\'[^\']*\'', "", code)
        if depth or _KEY_RE.match(code):
            depth = max(0, depth + stripped.count("[") - stripped.count("]"))
    return index


_MISSING = object()


def _describe(value: Any) -> str:
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


def _table(ctx: _Ctx, parent: Mapping, key: str, path: str, allowed: tuple[str, ...],
           required: tuple[str, ...] = ()) -> dict:
    value = parent.get(key, _MISSING)
    if value is _MISSING:
        raise ctx.error(path, f"missing table; expected a [{path}] section")
    if not isinstance(value, dict):
        raise ctx.error(path, f"expected a table, found {_describe(value)}")
    _check_keys(ctx, value, path, allowed, required)
    return value


def _check_keys(ctx: _Ctx, table: Mapping, path: str, allowed: tuple[str, ...],
                required: tuple[str, ...]) -> None:
    for k in table:
        if k not in allowed:
            near = difflib.get_close_matches(k, allowed, n=1)
            hint = f"; did you mean {near[0]!r}?" if near else f"; known keys: {', '.join(allowed)}"
            raise ctx.error(f"{path}.{k}" if path else k, f"unknown key{hint}")
    for k in required:
        if k not in table:
            raise ctx.error(f"{path}.{k}" if path else k, f"missing key in [{path}]")


def _is_num(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _str(ctx, t, key, path, default=_MISSING, choices=None):
    v = t.get(key, default)
    if v is _MISSING:
        raise ctx.error(path, "missing key")
    if v is None:
        return None
    if not isinstance(v, str) or not v.strip():
        raise ctx.error(path, f"expected non-empty text, found {_describe(v)}")
    if choices is not None and v not in choices:
        raise ctx.error(path, f"expected one of {', '.join(choices)}; found {v!r}")
    return v


def _num(ctx, t, key, path, default=_MISSING, positive=False, allow_zero=True):
    v = t.get(key, default)
    if v is _MISSING:
        raise ctx.error(path, "missing key")
    if v is None:
        return None
    if not _is_num(v) or not math.isfinite(v):
        raise ctx.error(path, f"expected a finite number, found {_describe(v)}")
    if positive and (v < 0 or (v == 0 and not allow_zero)):
        raise ctx.error(path, f"expected a number {'>= 0' if allow_zero else '> 0'}, found {v!r}")
    return float(v)


def _int(ctx, t, key, path, default=_MISSING, lo=None, hi=None):
    v = t.get(key, default)
    if v is _MISSING:
        raise ctx.error(path, "missing key")
    if not isinstance(v, int) or isinstance(v, bool):
        raise ctx.error(path, f"expected a whole number, found {_describe(v)}")
    if (lo is not None and v < lo) or (hi is not None and v > hi):
        rng = f"{lo} to {hi}" if hi is not None else f">= {lo}"
        raise ctx.error(path, f"expected a whole number {rng}, found {v}")
    return v


def _bool(ctx, t, key, path, default=_MISSING):
    v = t.get(key, default)
    if v is _MISSING:
        raise ctx.error(path, "missing key")
    if not isinstance(v, bool):
        raise ctx.error(path, f"expected true or false, found {_describe(v)}")
    return v


def _pair(ctx, t, key, path, what, default=_MISSING, ordered=False, positive=False):
    v = t.get(key, default)
    if v is _MISSING:
        raise ctx.error(path, f"missing key; expected {what}")
    if v is None:
        return None
    if not (isinstance(v, list) and len(v) == 2 and all(_is_num(x) and math.isfinite(x) for x in v)):
        raise ctx.error(path, f"expected {what}, found {_describe(v)}")
    a, b = float(v[0]), float(v[1])
    if positive and (a < 0 or b < 0):
        raise ctx.error(path, f"expected {what} with no negative value, found [{a:g}, {b:g}]")
    if ordered and not a < b:
        raise ctx.error(path, f"expected {what} with low < high, found [{a:g}, {b:g}]")
    return (a, b)


def _die(ctx, v, path, wafer_cols, wafer_rows) -> Die:
    if not (isinstance(v, list) and len(v) == 2 and all(isinstance(x, int) and not isinstance(x, bool) for x in v)):
        raise ctx.error(path, f"expected a die [col, row] of two whole numbers, found {_describe(v)}")
    c, r = v
    if not (0 <= c < wafer_cols and 0 <= r < wafer_rows):
        raise ctx.error(path, f"die [{c}, {r}] is outside the {wafer_cols} x {wafer_rows} grid "
                              f"(col 0..{wafer_cols - 1}, row 0..{wafer_rows - 1})")
    return (c, r)


def _name_list(ctx, t, key, path, default=_MISSING) -> tuple[str, ...]:
    v = t.get(key, default)
    if v is _MISSING:
        raise ctx.error(path, "missing key; expected a list of site names")
    if not (isinstance(v, list) and all(isinstance(x, str) for x in v)):
        raise ctx.error(path, f"expected a list of site names, found {_describe(v)}")
    return tuple(v)


_TOP = ("plan", "wafer", "site", "sequence", "calibration", "vna", "probes", "limits", "precheck")
_WAFER = ("id", "lot", "chip", "cols", "rows", "die_pitch_um", "skip", "dies", "order")
_SITE = ("name", "kind", "offset_um", "ports", "symmetric", "length_um", "z0_window_ohm",
         "alpha_db_per_mm_max", "eps_eff_window", "window_band_hz", "line_type", "width_um", "gap_um", "metal", "note",
         "precheck", "s21_db_window", "s21_band_hz", "c_ref_pf_per_mm", "z0_ref_ohm")
_SEQ = ("sites", "drift_site", "drift_die", "drift_every_landings", "recal_every_hours")
_CAL = ("method", "compare_with", "kit", "die", "standards", "verification")
_VNA = ("start_hz", "stop_hz", "points", "ifbw_hz", "power_dbm", "power_limit_dbm")
_PROBES = ("ids", "pitch_um", "wear_warn_touchdowns")


def _build(ctx: _Ctx, raw: dict, text: str, base_dir: Path) -> Plan:
    _check_keys(ctx, raw, "", _TOP, ())
    head = raw.get("plan", {})
    if not isinstance(head, dict):
        raise ctx.error("plan", f"expected a table, found {_describe(head)}")
    _check_keys(ctx, head, "plan", ("name", "description"), ())
    default_name = Path(ctx.source.split(" ")[0]).stem or "plan"
    name = _str(ctx, head, "name", "plan.name", default_name)
    description = head.get("description", "")
    if not isinstance(description, str):
        raise ctx.error("plan.description", f"expected text, found {_describe(description)}")

    wafer = _wafer(ctx, raw)
    sites = _sites(ctx, raw, wafer)
    by_name = {s.name: s for s in sites}
    sequence = _sequence(ctx, raw, wafer, by_name)
    calibration = _calibration(ctx, raw, wafer, by_name, base_dir)
    vna = _vna(ctx, raw)
    probes = _probes(ctx, raw)
    limits = _limits(ctx, raw)
    precheck = _precheck(ctx, raw, "precheck", Precheck()) or Precheck()  # the plan's default
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


def _wafer(ctx: _Ctx, raw: dict) -> Wafer:
    t = _table(ctx, raw, "wafer", "wafer", _WAFER, ("id", "lot", "chip", "cols", "rows", "die_pitch_um"))
    cols = _int(ctx, t, "cols", "wafer.cols", lo=1, hi=1000)
    rows = _int(ctx, t, "rows", "wafer.rows", lo=1, hi=1000)
    pitch = _pair(ctx, t, "die_pitch_um", "wafer.die_pitch_um", "two numbers [x, y] in um", positive=True)
    if pitch[0] <= 0 or pitch[1] <= 0:
        raise ctx.error("wafer.die_pitch_um", f"expected two numbers > 0 in um, found [{pitch[0]:g}, {pitch[1]:g}]")
    skip_raw = t.get("skip", [])
    if not isinstance(skip_raw, list):
        raise ctx.error("wafer.skip", f"expected a list of dies [[col, row], ...], found {_describe(skip_raw)}")
    skip = tuple(_die(ctx, d, f"wafer.skip[{i + 1}]", cols, rows) for i, d in enumerate(skip_raw))
    order = _str(ctx, t, "order", "wafer.order", "serpentine", ORDERS)
    dies_raw = t.get("dies", "all")
    dies: tuple[Die, ...] | None
    if dies_raw == "all":
        dies = None
        if order == "listed":
            raise ctx.error("wafer.order", 'order "listed" needs an explicit list in wafer.dies')
        if len(set(skip)) >= cols * rows:
            raise ctx.error("wafer.skip", "every die of the grid is skipped; nothing to probe")
    elif isinstance(dies_raw, list) and dies_raw:
        dies = tuple(_die(ctx, d, f"wafer.dies[{i + 1}]", cols, rows) for i, d in enumerate(dies_raw))
        seen: set[Die] = set()
        for i, d in enumerate(dies):
            if d in seen:
                raise ctx.error(f"wafer.dies[{i + 1}]", f"die [{d[0]}, {d[1]}] is listed twice")
            if d in skip:
                raise ctx.error(f"wafer.dies[{i + 1}]", f"die [{d[0]}, {d[1]}] is also in wafer.skip")
            seen.add(d)
    else:
        raise ctx.error("wafer.dies", f'expected "all" or a non-empty list of dies [[col, row], ...], '
                                      f"found {_describe(dies_raw)}")
    wafer_id = _str(ctx, t, "id", "wafer.id")
    if len(wafer_id) > MAX_ID_CHARS:
        raise ctx.error("wafer.id", f"{name_problem(wafer_id)} (it becomes part of the session folder name)")
    return Wafer(
        id=wafer_id,
        lot=_str(ctx, t, "lot", "wafer.lot"),
        chip=_str(ctx, t, "chip", "wafer.chip"),
        cols=cols,
        rows=rows,
        die_pitch_um=pitch,
        skip=skip,
        dies=dies,
        order=order,
    )


def _sites(ctx: _Ctx, raw: dict, wafer: Wafer) -> tuple[Site, ...]:
    arr = raw.get("site", _MISSING)
    if arr is _MISSING:
        raise ctx.error("site", "missing; expected one [[site]] table per structure on the die")
    if not (isinstance(arr, list) and arr and all(isinstance(x, dict) for x in arr)):
        raise ctx.error("site", f"expected [[site]] tables, found {_describe(arr)}")
    out: list[Site] = []
    names: dict[str, str] = {}
    for i, t in enumerate(arr, start=1):
        p = f"site[{i}]"
        _check_keys(ctx, t, p, _SITE, ("name", "kind", "offset_um"))
        name = _str(ctx, t, "name", f"{p}.name")
        if not _NAME_RE.match(name):
            raise ctx.error(f"{p}.name", f"{name!r} is not a usable site name; expected letters, digits, "
                                         "'.', '_' or '-' (it becomes a folder name)")
        if why := name_problem(name):
            raise ctx.error(f"{p}.name", f"{name!r} is not a usable site name: {why} (it becomes a folder name)")
        if name in names:
            raise ctx.error(f"{p}.name", f"duplicate site name {name!r} (first defined in {names[name]})")
        names[name] = p
        kind = _str(ctx, t, "kind", f"{p}.kind", choices=KINDS)
        off = _pair(ctx, t, "offset_um", f"{p}.offset_um", "two numbers [x, y] in um")
        if not (0 <= off[0] <= wafer.die_pitch_um[0] and 0 <= off[1] <= wafer.die_pitch_um[1]):
            raise ctx.error(f"{p}.offset_um", f"[{off[0]:g}, {off[1]:g}] um lies outside the die "
                                              f"(0..{wafer.die_pitch_um[0]:g} x 0..{wafer.die_pitch_um[1]:g} um)")
        ports = _int(ctx, t, "ports", f"{p}.ports", 2, lo=1, hi=2)
        if kind in ("thru", "line") and ports != 2:
            raise ctx.error(f"{p}.ports", f"a {kind} has 2 ports, found {ports}")
        alpha = _num(ctx, t, "alpha_db_per_mm_max", f"{p}.alpha_db_per_mm_max", None, positive=True, allow_zero=False)
        out.append(Site(
            name=name,
            kind=kind,
            offset_um=off,
            ports=ports,
            symmetric=_bool(ctx, t, "symmetric", f"{p}.symmetric", False),
            length_um=_num(ctx, t, "length_um", f"{p}.length_um", None, positive=True, allow_zero=False),
            z0_window_ohm=_pair(ctx, t, "z0_window_ohm", f"{p}.z0_window_ohm",
                                "a window [low, high] in ohm", None, ordered=True, positive=True),
            alpha_db_per_mm_max=alpha,
            eps_eff_window=_pair(ctx, t, "eps_eff_window", f"{p}.eps_eff_window",
                                 "a window [low, high]", None, ordered=True, positive=True),
            window_band_hz=_pair(ctx, t, "window_band_hz", f"{p}.window_band_hz",
                                 "a band [low, high] in Hz", None, ordered=True, positive=True),
            line_type=_str(ctx, t, "line_type", f"{p}.line_type", None),
            width_um=_num(ctx, t, "width_um", f"{p}.width_um", None, positive=True, allow_zero=False),
            gap_um=_num(ctx, t, "gap_um", f"{p}.gap_um", None, positive=True, allow_zero=False),
            metal=_str(ctx, t, "metal", f"{p}.metal", None),
            note=_note(ctx, t, f"{p}.note"),
            # a site's own table overrides only the keys it names, over [precheck]
            precheck=_precheck(ctx, t, f"{p}.precheck", None, _precheck(ctx, raw, "precheck", Precheck())),
            s21_db_window=_s21_window(ctx, t, p, kind),
            s21_band_hz=_pair(ctx, t, "s21_band_hz", f"{p}.s21_band_hz", "a band [low, high] in Hz", None,
                              ordered=True, positive=True),
            c_ref_pf_per_mm=_num(ctx, t, "c_ref_pf_per_mm", f"{p}.c_ref_pf_per_mm", None, positive=True,
                                 allow_zero=False),
            z0_ref_ohm=_num(ctx, t, "z0_ref_ohm", f"{p}.z0_ref_ohm", None, positive=True, allow_zero=False),
        ))
        if out[-1].s21_band_hz is not None and out[-1].s21_db_window is None:
            raise ctx.error(f"{p}.s21_band_hz", "needs s21_db_window (the |S21| window judged over that band)")
    return tuple(out)


def _s21_window(ctx: _Ctx, t: Mapping, p: str, kind: str) -> tuple[float, float] | None:
    """``s21_db_window``: what a device (or line) must transmit, [low, high] in dB
    (20 log10 |S21| of the corrected sweep, at most +1 dB: a passive site)."""
    w = _pair(ctx, t, "s21_db_window", f"{p}.s21_db_window", "a window [low, high] in dB", None, ordered=True)
    if w is None:
        return None
    if kind not in ("device", "thru", "line"):
        raise ctx.error(f"{p}.s21_db_window", f"a {kind} does not transmit; only device, thru and line sites take it")
    if w[1] > 1.0:
        raise ctx.error(f"{p}.s21_db_window", f"high end {w[1]:g} dB is above 0 dB: a passive site cannot gain")
    return w


_PRECHECK = ("enabled", "points", "ifbw_hz")


def _precheck(ctx: _Ctx, t: Mapping, path: str, missing: Precheck | None,
              base: Precheck | None = None) -> Precheck | None:
    """``precheck`` of ``t``: true / false, or a table of _PRECHECK keys over
    ``base`` (default: built-in values); ``missing`` when ``t`` has none."""
    key = path.rsplit(".", 1)[-1]
    v = t.get(key, _MISSING)
    if v is _MISSING:
        return missing
    b = base or Precheck()
    if isinstance(v, bool):
        return _replace(b, enabled=v)
    if not isinstance(v, dict):
        raise ctx.error(path, f"expected true, false or a table of {', '.join(_PRECHECK)}, found {_describe(v)}")
    _check_keys(ctx, v, path, _PRECHECK, ())
    return Precheck(enabled=_bool(ctx, v, "enabled", f"{path}.enabled", b.enabled),
                    points=_int(ctx, v, "points", f"{path}.points", b.points, lo=2, hi=201),
                    ifbw_hz=_num(ctx, v, "ifbw_hz", f"{path}.ifbw_hz", b.ifbw_hz, positive=True, allow_zero=False))


def _note(ctx: _Ctx, t: Mapping, path: str) -> str:
    v = t.get("note", "")
    if not isinstance(v, str):
        raise ctx.error(path, f"expected text, found {_describe(v)}")
    return v


def _known_site(ctx: _Ctx, name: str, path: str, by_name: Mapping[str, Site]) -> Site:
    if name not in by_name:
        near = difflib.get_close_matches(name, list(by_name), n=1)
        hint = f"; did you mean {near[0]!r}?" if near else "; expected the name of a [[site]]"
        raise ctx.error(path, f"unknown site {name!r}{hint}")
    return by_name[name]


def _usable_die(ctx: _Ctx, v: Any, path: str, wafer: Wafer) -> Die:
    d = _die(ctx, v, path, wafer.cols, wafer.rows)
    if d in wafer.skip:
        raise ctx.error(path, f"die [{d[0]}, {d[1]}] is in wafer.skip")
    return d


def _sequence(ctx: _Ctx, raw: dict, wafer: Wafer, by_name: Mapping[str, Site]) -> Sequence:
    t = _table(ctx, raw, "sequence", "sequence", _SEQ, ("sites",))
    sites = _name_list(ctx, t, "sites", "sequence.sites")
    if not sites:
        raise ctx.error("sequence.sites", "empty; expected at least one site to probe on each die")
    for i, s in enumerate(sites, start=1):
        _known_site(ctx, s, f"sequence.sites[{i}]", by_name)
    if len(set(sites)) != len(sites):
        dup = next(s for s in sites if sites.count(s) > 1)
        raise ctx.error("sequence.sites", f"site {dup!r} is listed twice")
    drift_site = _str(ctx, t, "drift_site", "sequence.drift_site", None)
    every = _int(ctx, t, "drift_every_landings", "sequence.drift_every_landings", 0, lo=0)
    drift_die = None
    if drift_site is not None:
        _known_site(ctx, drift_site, "sequence.drift_site", by_name)
        if "drift_die" not in t:
            raise ctx.error("sequence.drift_die", "missing; a drift_site needs the die [col, row] it sits on")
        drift_die = _usable_die(ctx, t["drift_die"], "sequence.drift_die", wafer)
        if every < 1:
            raise ctx.error("sequence.drift_every_landings",
                            "expected a whole number >= 1 (landings between drift checks) when drift_site is set")
    elif "drift_die" in t or every:
        raise ctx.error("sequence.drift_site", "missing; drift_die / drift_every_landings need a drift_site")
    recal = t.get("recal_every_hours", "never")
    if recal == "never":
        recal_h = None
    else:
        if not _is_num(recal) or not math.isfinite(recal) or recal <= 0:
            raise ctx.error("sequence.recal_every_hours",
                            f'expected a number of hours > 0 or "never", found {_describe(recal)}')
        recal_h = float(recal)
    return Sequence(sites=sites, drift_site=drift_site, drift_die=drift_die,
                    drift_every_landings=every, recal_every_hours=recal_h)


def _calibration(ctx: _Ctx, raw: dict, wafer: Wafer, by_name: Mapping[str, Site],
                 base_dir: Path) -> CalibrationPlan:
    t = _table(ctx, raw, "calibration", "calibration", _CAL, ("method", "kit", "die", "standards"))
    method = _str(ctx, t, "method", "calibration.method", choices=METHODS)
    compare = _str(ctx, t, "compare_with", "calibration.compare_with", "none", (*METHODS, "none"))
    compare_with = None if compare == "none" else compare
    if compare_with == method:
        raise ctx.error("calibration.compare_with", f"compares {method} with itself; expected another method or \"none\"")
    die = _usable_die(ctx, t["die"], "calibration.die", wafer)
    standards = _name_list(ctx, t, "standards", "calibration.standards")
    kinds = []
    for i, s in enumerate(standards, start=1):
        site = _known_site(ctx, s, f"calibration.standards[{i}]", by_name)
        if site.ports != 2:
            raise ctx.error(f"calibration.standards[{i}]", f"site {s!r} has {site.ports} port; standards are 2-port")
        kinds.append(site.kind)
    for m in (method, compare_with):
        if m is None:
            continue
        missing = [k for k in _METHOD_NEEDS[m] if k not in kinds]
        if missing:
            key = "calibration.method" if m == method else "calibration.compare_with"
            raise ctx.error(key, f"{m} needs standards of kind {', '.join(_METHOD_NEEDS[m])}; "
                                 f"calibration.standards has no {', '.join(missing)}")
    verification = _name_list(ctx, t, "verification", "calibration.verification", [])
    for i, s in enumerate(verification, start=1):
        _known_site(ctx, s, f"calibration.verification[{i}]", by_name)
    kit = t["kit"]
    kit_path = kit_inline = None
    if isinstance(kit, str) and kit.strip():
        try:
            kit_path = (base_dir / kit).resolve()
        except (OSError, ValueError) as exc:
            raise ctx.error("calibration.kit", f"not a usable file path ({exc})") from None
    elif isinstance(kit, dict):
        kit_inline = MappingProxyType(kit)
    else:
        raise ctx.error("calibration.kit", f"expected a kit file path (relative to the plan) or an inline table, "
                                           f"found {_describe(kit)}")
    return CalibrationPlan(method=method, compare_with=compare_with, kit_path=kit_path, kit_inline=kit_inline,
                           die=die, standards=standards, verification=verification, source=ctx.source)


def _vna(ctx: _Ctx, raw: dict) -> VnaSettings:
    t = _table(ctx, raw, "vna", "vna", _VNA, _VNA)
    start = _num(ctx, t, "start_hz", "vna.start_hz", positive=True, allow_zero=False)
    stop = _num(ctx, t, "stop_hz", "vna.stop_hz", positive=True, allow_zero=False)
    if not start < stop:
        raise ctx.error("vna.stop_hz", f"expected stop_hz > start_hz, found start {start:g} Hz, stop {stop:g} Hz")
    points = _int(ctx, t, "points", "vna.points", lo=2, hi=100001)
    ifbw = _num(ctx, t, "ifbw_hz", "vna.ifbw_hz", positive=True, allow_zero=False)
    power = _num(ctx, t, "power_dbm", "vna.power_dbm")
    limit = _num(ctx, t, "power_limit_dbm", "vna.power_limit_dbm")
    if power > limit:
        raise ctx.error("vna.power_dbm", f"{power:g} dBm is above power_limit_dbm {limit:g} dBm; "
                                         "lower the power or (if the DUT allows) raise the limit")
    return VnaSettings(start_hz=start, stop_hz=stop, points=points, ifbw_hz=ifbw,
                       power_dbm=power, power_limit_dbm=limit)


def _probes(ctx: _Ctx, raw: dict) -> Probes:
    t = _table(ctx, raw, "probes", "probes", _PROBES, ("ids",))
    ids = t["ids"]
    if not (isinstance(ids, list) and 1 <= len(ids) <= 2 and all(isinstance(x, str) and x.strip() for x in ids)):
        raise ctx.error("probes.ids", f"expected one or two probe ids (port 1 first), found {_describe(ids)}")
    if len(set(ids)) != len(ids):
        raise ctx.error("probes.ids", f"probe id {ids[0]!r} is listed twice")
    pitch = _num(ctx, t, "pitch_um", "probes.pitch_um", 100.0, positive=True, allow_zero=False)
    wear = _int(ctx, t, "wear_warn_touchdowns", "probes.wear_warn_touchdowns", 5000, lo=1)
    return Probes(ids=tuple(ids), pitch_um=pitch, wear_warn_touchdowns=wear)


def _limits(ctx: _Ctx, raw: dict) -> Mapping[str, float]:
    t = raw.get("limits", {})
    if not isinstance(t, dict):
        raise ctx.error("limits", f"expected a table of numbers, found {_describe(t)}")
    out: dict[str, float] = {}
    for k, v in t.items():
        if not _is_num(v) or not math.isfinite(v):
            raise ctx.error(f"limits.{k}", f"expected a finite number, found {_describe(v)}")
        out[k] = float(v)
    return MappingProxyType(out)
