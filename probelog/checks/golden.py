"""A corrected landing against the site's golden Touchstone file.

The golden file (the plan's ``golden_file``, read into
:class:`probelog.plan_types.Golden`) says what a good landing of the site looks
like, so a device can be judged on the first die, before the population of
earlier dies (:mod:`probelog.population`) has anything to compare with.

Over the frequencies the sweep and the golden file share, the golden S is
interpolated onto the sweep's points with scikit-rf (``Network.interpolate``,
cubic in real and imaginary part) and, for every S_ij:

- the magnitude deviation 20 log10 max(|S|, floor) - 20 log10 max(|G|, floor)
  (dB; positive when the landing has more), judged against ``tol_db``;
- the phase deviation arg(S / G) in degrees, wrapped to +-180, judged against
  ``tol_deg`` where both |S| and |G| are above the floor (below it the phase
  of a small reflection says little).

Each tolerance widens by what this landing's calibration may be off, u(f)
(linear |S|, :mod:`probelog.limits`), seen at that |G|: 20 log10(1 + u / |G|)
dB and asin(u / |G|) degrees. The per-frequency figure (the worst S_ij, relative
to its tolerance) is graded with :func:`probelog.limits.grade`: a single point
over the tolerance WARNs, a run of points or a gross miss FAILs.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

import numpy as np

from probelog.checks.common import ghz, make_result, not_applicable
from probelog.limits import grade
from probelog.verdicts import CheckResult, Verdict

_ORDER = ((1, 0), (0, 1), (0, 0), (1, 1))  # S21, S12, S11, S22: transmission named first on a tie


def _db(x: complex) -> str:
    """|x| in dB for a message."""
    return f"{20.0 * np.log10(max(abs(x), 1e-15)):.3g} dB"


def golden_on_grid(f_hz: np.ndarray, z0_ohm: float, golden: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray]:
    """The golden S interpolated onto the points of ``f_hz`` (Hz) inside its own
    span, renormalised to ``z0_ohm`` (ohm) when its reference differs: (mask
    of the used points of ``f_hz``, S (m, 2, 2))."""
    import skrf

    gf = np.asarray(golden["f_hz"], dtype=float)
    inside = (f_hz >= gf[0]) & (f_hz <= gf[-1])
    if not inside.any():
        return inside, np.zeros((0, 2, 2), complex)
    net = skrf.Network(frequency=skrf.Frequency.from_f(gf, unit="Hz"), s=np.array(golden["s"], dtype=complex),
                       z0=float(golden["z0_ohm"]))
    if not np.isclose(float(golden["z0_ohm"]), z0_ohm):
        net.renormalize(z0_ohm)
    new = skrf.Frequency.from_f(f_hz[inside], unit="Hz")
    # Cubic in re/im: S passes smoothly through a reflection null, where magnitude and
    # phase do not; on real data (tests/test_golden.py) it kept the error of a golden
    # file 4x coarser than the sweep to ~0.5 dB and ~4 degrees near -20 dB, where
    # linear in magnitude and phase reached 10 degrees.
    s: np.ndarray = net.interpolate(new, coords="cart", kind="cubic" if len(gf) >= 4 else "linear").s
    return inside, s


def deviations(s: np.ndarray, g: np.ndarray, floor_db: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Magnitude deviation (dB, signed, both clamped at ``floor_db``), phase
    deviation (degrees, signed, wrapped to +-180; 0 where either |S| is under the
    floor) and the mask where phase is judged; each shaped like ``s``."""
    floor = 10.0 ** (floor_db / 20.0)
    a, b = np.abs(s), np.abs(g)
    d_db = 20.0 * np.log10(np.maximum(a, floor)) - 20.0 * np.log10(np.maximum(b, floor))
    judged = (a > floor) & (b > floor)
    with np.errstate(divide="ignore", invalid="ignore"):
        d_deg = np.where(judged, np.degrees(np.angle(s * np.conj(g))), 0.0)
    return d_db, d_deg, judged


def golden_match(f_hz: np.ndarray, s: np.ndarray, z0_ohm: float, golden: Mapping[str, Any],
                 unc: np.ndarray | None = None) -> CheckResult:
    """The sweep (``f_hz`` in Hz, ``s`` (n, 2, 2) at ``z0_ohm``) against the
    golden file ``golden`` (the fields of :class:`probelog.plan_types.Golden`).
    ``unc`` (n,) is the cal's uncertainty u(f), linear |S|. The message names
    the file, the S_ij, the frequency and the deviation with its tolerance."""
    name = Path(str(golden["file"])).name
    if s.shape[1:] != (2, 2):
        return not_applicable("golden", f"the golden file {name} is a 2-port; this sweep has {s.shape[1]} port(s)")
    f_hz = np.asarray(f_hz, dtype=float)
    inside, g = golden_on_grid(f_hz, z0_ohm, golden)
    if not inside.any():
        gf = np.asarray(golden["f_hz"], dtype=float)
        return not_applicable("golden", f"no point of the sweep inside the golden file {name} "
                                        f"({gf[0] / 1e9:.4g}-{gf[-1] / 1e9:.4g} GHz)")
    f, m = f_hz[inside], s[inside]
    tol_db, tol_deg = float(golden["tol_db"]), float(golden["tol_deg"])
    d_db, d_deg, judged = deviations(m, g, float(golden["floor_db"]))
    floor = 10.0 ** (float(golden["floor_db"]) / 20.0)
    u = np.zeros(len(f)) if unc is None or len(unc) != len(f_hz) else np.asarray(unc, float)[inside]
    rel = np.minimum(u[:, None, None] / np.maximum(np.abs(g), floor), 1.0)  # cal error seen at |G|
    lim_db = tol_db + 20.0 * np.log10(1.0 + rel)
    lim_deg = tol_deg + np.degrees(np.arcsin(rel))
    r_db, r_deg = np.abs(d_db) / lim_db, np.abs(d_deg) / lim_deg
    ratio = np.maximum(r_db, r_deg)  # per S_ij, the worse quantity relative to its limit
    verdict, k = grade(ratio.reshape(len(f), -1).max(axis=1), None, 1.0)
    i, j = max(_ORDER, key=lambda ij: ratio[k, ij[0], ij[1]])  # first of the worst: S21 before S12
    use_deg = r_deg[k, i, j] > r_db[k, i, j]
    dev = float(d_deg[k, i, j] if use_deg else d_db[k, i, j])
    lim = float(lim_deg[k, i, j] if use_deg else lim_db[k, i, j])
    unit = "deg" if use_deg else "dB"
    what = "phase" if use_deg else "|S|"
    span = f"compared over {f[0] / 1e9:.4g}-{f[-1] / 1e9:.4g} GHz, {len(f)} points"
    levels = f"landing {_db(m[k, i, j])}, golden {_db(g[k, i, j])}"
    if not use_deg and min(abs(m[k, i, j]), abs(g[k, i, j])) < floor:
        levels += f"; below {float(golden['floor_db']):g} dB counts as {float(golden['floor_db']):g} dB"
    every = ", ".join(f"S{a + 1}{b + 1} {d_db[k, a, b]:+.3g} dB "
                      + (f"{d_deg[k, a, b]:+.3g} deg" if judged[k, a, b] else "(phase not judged)")
                      for a, b in _ORDER)
    text = (f"S{i + 1}{j + 1} {what} {dev:+.3g} {unit} from the golden file {name} at {ghz(float(f[k]))} "
            f"(tolerance +-{lim:.3g} {unit} there; {levels}) [there: {every}]")
    if verdict is Verdict.PASS:
        msg = f"matches the golden file: largest deviation {text}; {span}"
    elif verdict is Verdict.WARN:
        msg = f"off the golden file at isolated points: {text}; {span}"
    else:
        msg = f"differs from the golden file: {text}; {span} (wrong device, bad landing or wrong calibration)"
    return make_result("golden", verdict, abs(dev), lim, float(f[k]), msg, unit)
