"""The virtual wafer: the PLX-7 chip description (chip.toml), the die map and
which site lies under the probes at a given offset.

Units: offsets and sizes in um as in the file, wafer positions in mm.
Die addresses are (col, row), counted from 0 at the wafer map's top-left.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

CHIP_FILE = Path(__file__).with_name("chip.toml")
SITE_TOLERANCE_UM = 15.0
"""The prober finds a site when the probe offset is within this distance (um)."""

KINDS = ("open", "short", "load", "thru", "line", "open-stub", "short-stub", "device")
LINE_TYPES = ("cpw", "gcpw", "swl")
REFLECT_KINDS = ("open", "short", "load", "open-stub", "short-stub")
"""Kinds laid out as a pair: each port lands on its own copy."""


class ChipFileError(ValueError):
    """chip.toml is missing a field or has a bad value; the message names it."""


@dataclass(frozen=True)
class Site:
    """One structure on every die; lengths in um."""

    name: str
    kind: str
    offset_um: tuple[float, float]
    ports: int = 2
    length_um: float | None = None
    line_type: str | None = None
    metal: str | None = None
    width_um: float | None = None
    gap_um: float | None = None
    symmetric: bool = False
    model: dict[str, Any] = field(default_factory=dict)
    # False for the probe-tip standards block: its definitions (the cal kit) are
    # referenced to the tips, so the simulator gives it no extra pad parasitics.
    pads: bool = True


@dataclass(frozen=True)
class Chip:
    name: str
    die_width_um: float
    die_height_um: float
    pad_pitch_um: float
    lot: str
    wafer_id: str
    diameter_mm: float
    cols: int
    rows: int
    edge_exclusion_mm: float
    process: dict[str, float]
    metals: dict[str, dict[str, float]]
    sites: tuple[Site, ...]

    def site(self, name: str) -> Site:
        for s in self.sites:
            if s.name == name:
                return s
        raise KeyError(f"no site named {name!r} on chip {self.name}")

    def die_centre_mm(self, die: tuple[int, int]) -> tuple[float, float]:
        """Die centre relative to the wafer centre in mm (x right, y up)."""
        col, row = die
        x = (col - (self.cols - 1) / 2) * self.die_width_um / 1000.0
        y = ((self.rows - 1) / 2 - row) * self.die_height_um / 1000.0
        return x, y

    @property
    def usable_radius_mm(self) -> float:
        return self.diameter_mm / 2 - self.edge_exclusion_mm

    def on_map(self, die: tuple[int, int]) -> bool:
        """True when the die exists on the grid and its centre is inside the usable circle."""
        col, row = die
        if not (0 <= col < self.cols and 0 <= row < self.rows):
            return False
        x, y = self.die_centre_mm(die)
        return math.hypot(x, y) <= self.usable_radius_mm

    def dies(self) -> list[tuple[int, int]]:
        """Every die on the map, row by row."""
        return [(c, r) for r in range(self.rows) for c in range(self.cols) if self.on_map((c, r))]

    def site_at(self, offset_um: tuple[float, float]) -> Site | None:
        """The site whose offset is within SITE_TOLERANCE_UM of ``offset_um``, else None
        (bare passivation)."""
        x, y = offset_um
        for s in self.sites:
            if math.hypot(x - s.offset_um[0], y - s.offset_um[1]) <= SITE_TOLERANCE_UM:
                return s
        return None


# Any: TOML values; isinstance(value, typ) below is what makes them safe to use
def _get(table: dict[str, Any], key: str, where: str, typ: type | tuple[type, ...] = (int, float)) -> Any:
    if key not in table:
        raise ChipFileError(f"{where}: missing field {key!r}")
    value = table[key]
    if not isinstance(value, typ) or isinstance(value, bool) and typ is not bool:
        raise ChipFileError(f"{where}: field {key!r} has a bad value {value!r}")
    return value


def _site(t: dict[str, Any], i: int, path: Path, metals: dict[str, Any]) -> Site:
    where = f"{path.name} [[site]] #{i + 1}"
    name = _get(t, "name", where, str)
    where = f"{path.name} site {name!r}"
    kind = _get(t, "kind", where, str)
    if kind not in KINDS:
        raise ChipFileError(f"{where}: kind {kind!r} is not one of {', '.join(KINDS)}")
    off = t.get("offset_um")
    if not (isinstance(off, list) and len(off) == 2 and all(isinstance(v, (int, float)) for v in off)):
        raise ChipFileError(f"{where}: offset_um must be [x, y] in um, got {off!r}")
    line_type = t.get("line_type")
    if kind in ("thru", "line", "open-stub", "short-stub"):
        _get(t, "length_um", where)
        _get(t, "width_um", where)
        _get(t, "gap_um", where)
        if line_type not in LINE_TYPES:
            raise ChipFileError(f"{where}: line_type {line_type!r} is not one of {', '.join(LINE_TYPES)}")
        if t.get("metal") not in metals:
            raise ChipFileError(f"{where}: metal {t.get('metal')!r} has no [metal.*] table")
    if kind == "device" and t.get("model") not in ("spiral", "mim"):
        raise ChipFileError(f"{where}: a device needs model = \"spiral\" or \"mim\"")
    model = {k: v for k, v in t.items() if k in ("model", "l_ph", "r_ohm", "c_ff", "cp_ff")}
    return Site(
        name=name,
        kind=kind,
        offset_um=(float(off[0]), float(off[1])),
        ports=int(t.get("ports", 2)),
        length_um=t.get("length_um"),
        line_type=line_type,
        metal=t.get("metal"),
        width_um=t.get("width_um"),
        gap_um=t.get("gap_um"),
        symmetric=bool(t.get("symmetric", False)),
        model=model,
        pads=bool(t.get("pads", True)),
    )


def load_chip(path: Path | str = CHIP_FILE) -> Chip:
    """Read and validate a chip file; errors name the file and the field."""
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise ChipFileError(f"{path}: cannot read ({exc.strerror})") from None
    except tomllib.TOMLDecodeError as exc:
        raise ChipFileError(f"{path}: not valid TOML: {exc}") from None
    for table in ("chip", "wafer", "process", "metal"):
        if not isinstance(data.get(table), dict):
            raise ChipFileError(f"{path.name}: missing table [{table}]")
    chip, wafer, process, metals = data["chip"], data["wafer"], data["process"], data["metal"]
    for m, t in metals.items():
        for key in ("thickness_um", "conductivity_s_per_m", "ground_height_um", "shield_height_um"):
            _get(t, key, f"{path.name} [metal.{m}]")
    sites = tuple(_site(t, i, path, metals) for i, t in enumerate(data.get("site", [])))
    names = [s.name for s in sites]
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise ChipFileError(f"{path.name}: site names used twice: {', '.join(sorted(dup))}")
    return Chip(
        name=_get(chip, "name", f"{path.name} [chip]", str),
        die_width_um=float(_get(chip, "die_width_um", f"{path.name} [chip]")),
        die_height_um=float(_get(chip, "die_height_um", f"{path.name} [chip]")),
        pad_pitch_um=float(_get(chip, "pad_pitch_um", f"{path.name} [chip]")),
        lot=_get(wafer, "lot", f"{path.name} [wafer]", str),
        wafer_id=_get(wafer, "id", f"{path.name} [wafer]", str),
        diameter_mm=float(_get(wafer, "diameter_mm", f"{path.name} [wafer]")),
        cols=int(_get(wafer, "cols", f"{path.name} [wafer]", int)),
        rows=int(_get(wafer, "rows", f"{path.name} [wafer]", int)),
        edge_exclusion_mm=float(wafer.get("edge_exclusion_mm", 0.0)),
        process={k: float(v) for k, v in process.items()},
        metals={k: {kk: float(vv) for kk, vv in v.items()} for k, v in metals.items()},
        sites=sites,
    )
