"""On-wafer calibration kits: the TOML definition and the ideal standards.

A kit file names the models of the standards (our own keys, units in the names)
and the plan sites that hold them::

    name = "PLX-7 CPW probe-tip kit"
    reference_impedance_ohm = 50.0
    eps_eff = 6.5                       # estimate for the lines (TRL root choice, stubs)
    open_c_f = [6.0e-15, 0.0, 0.0]      # C(f) = c0 + c1 f + c2 f^2 in F, F/Hz, F/Hz^2
    short_l_h = [4.0e-12]               # L(f) = l0 + l1 f + ... in H, H/Hz, ...
    load_r_ohm = 50.0
    load_l_h = 3.0e-12
    thru_length_um = 100.0
    thru_delay_s = 0.85e-12             # optional; default length * sqrt(eps_eff) / c
    line_z0_ohm = 50.0                  # optional: renormalise multiline TRL to the reference
    mtrl_reflect = "short"              # which reflect multiline TRL uses: "short" | "open"

    [sites]                             # role -> plan site name
    open = "cal-open"
    short = "cal-short"
    load = "cal-load"
    thru = "cal-thru"

    [lines.line-a]                      # multiline TRL lines (name -> length and site)
    length_um = 450.0
    site = "cal-line-a"

    [verification]
    open_stub_site = "ver-ostub"
    open_stub_length_um = 800.0
    short_stub_site = "ver-sstub"
    short_stub_length_um = 800.0

Ideal standards follow the e^{+j omega t} convention: an open with fringing C is
Gamma = (1 - j w C Z0) / (1 + j w C Z0) (turns clockwise as f rises, Foster), a
short with L is (j w L - Z0) / (j w L + Z0), a load is R + j w L, and the thru
is a matched lossless line, S21 = exp(-j w tau). Reflect standards are measured
as 2-port "pairs" (probe 1 and probe 2 each on its own copy), so their ideals are
2-ports with S21 = S12 = 0.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import skrf

C0 = 299_792_458.0
"""Speed of light in vacuum, m/s."""

REFLECT_ROLES = ("open", "short", "load")


class CalibrationError(ValueError):
    """A calibration cannot be built or used; the message says what to fix."""


class KitError(CalibrationError):
    """A cal kit definition is wrong; the message names the file and the key."""


@dataclass(frozen=True)
class Line:
    """A multiline TRL line standard: length in um and the plan site holding it."""

    name: str
    length_um: float
    site: str


@dataclass(frozen=True)
class CalKit:
    """Models of the on-wafer standards and the sites where they sit.

    Polynomials are coefficient tuples in rising powers of frequency (Hz):
    C(f) = sum c_k f^k in F, L(f) = sum l_k f^k in H.
    """

    name: str
    reference_impedance_ohm: float
    eps_eff: float
    open_c_f: tuple[float, ...]
    short_l_h: tuple[float, ...]
    load_r_ohm: float
    load_l_h: float
    thru_length_um: float
    thru_delay_s: float
    sites: dict[str, str]
    lines: tuple[Line, ...] = ()
    line_z0_ohm: float | None = None
    mtrl_reflect: str = "short"
    verification: dict[str, Any] = field(default_factory=dict)
    reflect_offset_um: float = 0.0
    thru_loss_db: float = 0.0
    thru_loss_ref_hz: float = 1e9
    thru_z0_ohm: float | None = None
    source: str = "<mapping>"

    def site_of(self, role: str) -> str | None:
        """Plan site holding ``role`` ("open", "thru", "line:<name>", ...), or None."""
        if role.startswith("line:"):
            for line in self.lines:
                if "line:" + line.name == role:
                    return line.site
            return None
        return self.sites.get(role)


_TOP_KEYS: dict[str, tuple[type, ...]] = {
    "name": (str,),
    "reference_impedance_ohm": (int, float),
    "eps_eff": (int, float),
    "open_c_f": (int, float, list),
    "short_l_h": (int, float, list),
    "load_r_ohm": (int, float),
    "load_l_h": (int, float),
    "thru_length_um": (int, float),
    "thru_delay_s": (int, float),
    "line_z0_ohm": (int, float),
    "mtrl_reflect": (str,),
    "reflect_offset_um": (int, float),
    "thru_loss_db": (int, float),
    "thru_loss_ref_hz": (int, float),
    "thru_z0_ohm": (int, float),
    "sites": (dict,),
    "lines": (dict,),
    "verification": (dict,),
}
_REQUIRED = ("name", "reference_impedance_ohm", "eps_eff", "open_c_f", "short_l_h",
             "load_r_ohm", "load_l_h", "thru_length_um", "sites")
_SITE_ROLES = ("open", "short", "load", "thru")
_VERIFY_KEYS = {"open_stub_site": str, "open_stub_length_um": float,
                "short_stub_site": str, "short_stub_length_um": float}


def _type_name(types: tuple[type, ...]) -> str:
    names = {int: "number", float: "number", str: "string", list: "list of numbers",
             dict: "table"}
    return " or ".join(dict.fromkeys(names[t] for t in types))


def _check_type(value: Any, types: tuple[type, ...], where: str) -> None:
    # bool is an int in Python but never a valid number here
    if isinstance(value, bool) or not isinstance(value, types):
        raise KitError(f"{where}: expected {_type_name(types)}, found {type(value).__name__} "
                       f"{value!r}")


def _poly(value: Any, where: str) -> tuple[float, ...]:
    coeffs = value if isinstance(value, list) else [value]
    if not coeffs:
        raise KitError(f"{where}: expected at least one coefficient")
    for i, c in enumerate(coeffs):
        _check_type(c, (int, float), f"{where}[{i}]")
    return tuple(float(c) for c in coeffs)


def _positive(value: float, where: str, allow_zero: bool = False) -> float:
    value = float(value)
    if not math.isfinite(value) or value < 0 or (value == 0 and not allow_zero):
        need = "zero or more" if allow_zero else "more than zero"
        raise KitError(f"{where}: must be {need}, found {value!r}")
    return value


def kit_from_mapping(d: Mapping[str, Any], source: str = "<mapping>") -> CalKit:
    """Build a :class:`CalKit` from a parsed TOML mapping.

    ``source`` (a file name) prefixes every error message. Raises KitError on
    an unknown or missing key, a wrong type, or a non-physical value.
    """
    for key in d:
        if key not in _TOP_KEYS:
            raise KitError(f"{source}: unknown key '{key}' (known: {', '.join(_TOP_KEYS)})")
        _check_type(d[key], _TOP_KEYS[key], f"{source}: key '{key}'")
    for key in _REQUIRED:
        if key not in d:
            raise KitError(f"{source}: missing key '{key}'")

    def at(key: str) -> str:
        return f"{source}: key '{key}'"

    eps_eff = float(d["eps_eff"])
    if not eps_eff >= 1.0:
        raise KitError(f"{at('eps_eff')}: must be 1 or more (a quasi-TEM line), found {eps_eff!r}")
    thru_length_um = _positive(d["thru_length_um"], at("thru_length_um"), allow_zero=True)
    if "thru_delay_s" in d:
        thru_delay_s = _positive(d["thru_delay_s"], at("thru_delay_s"), allow_zero=True)
    else:
        thru_delay_s = thru_length_um * 1e-6 * math.sqrt(eps_eff) / C0

    sites = dict(d["sites"])
    for role, site in sites.items():
        if role not in _SITE_ROLES:
            raise KitError(f"{source}: unknown key 'sites.{role}' (known: {', '.join(_SITE_ROLES)})")
        _check_type(site, (str,), f"{source}: key 'sites.{role}'")

    lines = []
    for name, spec in dict(d.get("lines", {})).items():
        where = f"{source}: key 'lines.{name}'"
        _check_type(spec, (dict,), where)
        for key in spec:
            if key not in ("length_um", "site"):
                raise KitError(f"{source}: unknown key 'lines.{name}.{key}' (known: length_um, site)")
        for key, types in (("length_um", (int, float)), ("site", (str,))):
            if key not in spec:
                raise KitError(f"{source}: missing key 'lines.{name}.{key}'")
            _check_type(spec[key], types, f"{source}: key 'lines.{name}.{key}'")
        length = _positive(spec["length_um"], f"{source}: key 'lines.{name}.length_um'")
        if length <= thru_length_um:
            raise KitError(f"{source}: key 'lines.{name}.length_um': {length} um must be longer "
                           f"than the thru ({thru_length_um} um)")
        lines.append(Line(name, length, spec["site"]))

    verification = dict(d.get("verification", {}))
    for key, value in verification.items():
        if key not in _VERIFY_KEYS:
            raise KitError(f"{source}: unknown key 'verification.{key}' "
                           f"(known: {', '.join(_VERIFY_KEYS)})")
        types = (int, float) if _VERIFY_KEYS[key] is float else (str,)
        _check_type(value, types, f"{source}: key 'verification.{key}'")
        if key.endswith("_um"):
            verification[key] = _positive(value, f"{source}: key 'verification.{key}'")

    reflect = d.get("mtrl_reflect", "short")
    if reflect not in ("short", "open"):
        raise KitError(f"{at('mtrl_reflect')}: expected \"short\" or \"open\", found {reflect!r}")
    line_z0 = d.get("line_z0_ohm")
    offset = float(d.get("reflect_offset_um", 0.0))
    if not math.isfinite(offset):
        raise KitError(f"{at('reflect_offset_um')}: must be a finite number of um, found {offset!r}")
    thru_z0 = d.get("thru_z0_ohm")
    return CalKit(
        name=d["name"],
        reference_impedance_ohm=_positive(d["reference_impedance_ohm"], at("reference_impedance_ohm")),
        eps_eff=eps_eff,
        open_c_f=_poly(d["open_c_f"], at("open_c_f")),
        short_l_h=_poly(d["short_l_h"], at("short_l_h")),
        load_r_ohm=_positive(d["load_r_ohm"], at("load_r_ohm")),
        load_l_h=float(d["load_l_h"]),
        thru_length_um=thru_length_um,
        thru_delay_s=thru_delay_s,
        sites=sites,
        lines=tuple(lines),
        line_z0_ohm=None if line_z0 is None else _positive(line_z0, at("line_z0_ohm")),
        mtrl_reflect=reflect,
        verification=verification,
        reflect_offset_um=offset,
        thru_loss_db=_positive(d.get("thru_loss_db", 0.0), at("thru_loss_db"), allow_zero=True),
        thru_loss_ref_hz=_positive(d.get("thru_loss_ref_hz", 1e9), at("thru_loss_ref_hz")),
        thru_z0_ohm=None if thru_z0 is None else _positive(thru_z0, at("thru_z0_ohm")),
        source=source,
    )


def load_kit(path: str | Path) -> CalKit:
    """Read a cal kit TOML file. Raises KitError naming the file (and line for syntax)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise KitError(f"{path}: cannot read cal kit file ({exc.strerror})") from exc
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise KitError(f"{path}: not valid TOML: {exc}") from exc
    return kit_from_mapping(data, source=str(path))


def _polyval(coeffs: tuple[float, ...], f_hz: np.ndarray) -> np.ndarray:
    # coefficients in rising powers; np.polyval wants falling
    return np.polyval(coeffs[::-1], f_hz)


def _pair(gamma: np.ndarray, frequency: skrf.Frequency, z0: float, name: str) -> skrf.Network:
    """A 2-port 'pair' of identical one-port standards, S21 = S12 = 0."""
    s = np.zeros((len(gamma), 2, 2), dtype=complex)
    s[:, 0, 0] = gamma
    s[:, 1, 1] = gamma
    return skrf.Network(frequency=frequency, s=s, z0=z0, name=name)


def ideal_reflects(kit: CalKit, frequency: skrf.Frequency) -> dict[str, np.ndarray]:
    """Reflection coefficients of the ideal open, short and load, shape (n_freq,)."""
    f = frequency.f
    w = 2 * np.pi * f
    z0 = kit.reference_impedance_ohm
    zc = 1j * w * _polyval(kit.open_c_f, f) * z0
    zl = 1j * w * _polyval(kit.short_l_h, f)
    zload = kit.load_r_ohm + 1j * w * kit.load_l_h
    return {
        "open": (1 - zc) / (1 + zc),
        "short": (zl - z0) / (zl + z0),
        "load": (zload - z0) / (zload + z0),
    }


def ideal_thru(kit: CalKit, frequency: skrf.Frequency) -> skrf.Network:
    """The kit's thru: a line of delay ``thru_delay_s`` with loss ``thru_loss_db``
    at ``thru_loss_ref_hz`` growing as sqrt(f) (skin effect; Pozar 4th ed. sec. 2.7),
    and characteristic impedance ``thru_z0_ohm`` (default: the reference, i.e.
    matched) seen from ports at the reference impedance. With no loss and no
    thru_z0_ohm it is the matched lossless line S21 = exp(-j w tau)."""
    f = frequency.f
    z0 = kit.reference_impedance_ohm
    alpha_np = kit.thru_loss_db / 8.685889638 * np.sqrt(f / kit.thru_loss_ref_hz)  # nepers, whole thru
    theta = 2 * np.pi * f * kit.thru_delay_s
    zc = kit.thru_z0_ohm or z0
    gl = alpha_np + 1j * theta                      # gamma * length
    if zc == z0:
        s = np.zeros((frequency.npoints, 2, 2), dtype=complex)
        s[:, 0, 1] = s[:, 1, 0] = np.exp(-gl)
        return skrf.Network(frequency=frequency, s=s, z0=z0, name="thru")
    # ABCD of a line (Pozar 4th ed. Table 4.1), then S at the reference impedance
    ch, sh = np.cosh(gl), np.sinh(gl)
    a, b, c = ch, zc * sh, sh / zc
    den = a + b / z0 + c * z0 + a
    s = np.empty((frequency.npoints, 2, 2), dtype=complex)
    s[:, 0, 0] = s[:, 1, 1] = (b / z0 - c * z0) / den
    s[:, 0, 1] = s[:, 1, 0] = 2 / den
    return skrf.Network(frequency=frequency, s=s, z0=z0, name="thru")


def ideals(kit: CalKit, frequency: skrf.Frequency) -> dict[str, skrf.Network]:
    """Ideal 2-port networks of the kit's open, short, load (pairs) and thru."""
    z0 = kit.reference_impedance_ohm
    out = {role: _pair(g, frequency, z0, role)
           for role, g in ideal_reflects(kit, frequency).items()}
    out["thru"] = ideal_thru(kit, frequency)
    return out
