"""Probe-tip calibration: solve, apply, save, verify and compare cal sets.

The algorithms are scikit-rf's (SOLT: Kruppa & Sodomsky, IEEE T-MTT 19(1), 1971;
LRRM: Davidson, Jones & Strid, 36th ARFTG 1990, as in Purroy & Pradell, IEEE TIM
50(5), 2001; multiline TRL: Marks, IEEE T-MTT 39(7), 1991, skrf NISTMultilineTRL).
This module picks the standards, builds their ideals from a :class:`CalKit`, turns
failures into errors a person can act on, and stores the result.

Public API (other modules build on it)::

    kit = load_kit(path)                       # CalKit from TOML (see probelog.calkit)
    kit = kit_from_mapping(d, source)
    required_sites(method, kit) -> list[(role, site)]   # method: "solt" | "lrrm" | "mtrl"
    comparable_methods(primary, measured_sites, kit) -> list[str]
    cal = solve(method, measured: {site: Network}, kit, switch_terms=None, cal_id="cal-1")
    cal.cal_id, cal.method, cal.frequency, cal.error_terms (12-term dict of arrays)
    cal.apply(raw) -> Network                  # 2-port, or 1-port for port-1-only data
    cal.save(folder) -> list[Path]             # Touchstone error terms + calset.json
    cal.summary() -> dict                      # JSON-ready, for the journal
    load_calset(folder) -> CalSet
    verify(open_stub, thru, kit, limits=None) -> list[CheckResult]
    agreement(cal_a, cal_b, raw_standards=None) -> Agreement   (probelog.cal_agreement)
    CalibrationError, KitError(CalibrationError)

Solving is here; the cal set (apply, save, load) is :mod:`probelog.calset`, the
verification checks :mod:`probelog.cal_verify`; both are re-exported by name.

Roles are "open", "short", "load", "thru" and "line:<name>". Reflect standards are
measured as 2-port pairs (each probe on its own copy, S21 ~ 0). Switch terms are
the pair (forward, reverse) of 1-port Networks; SOLT's 12-term model does not need
them (it absorbs them), LRRM and multiline TRL use them when given.
Conventions: e^{+j omega t}; frequencies in Hz; dB = 20 log10 |S|; phase in degrees.
"""

from __future__ import annotations

import warnings
from typing import Any, Collection, Mapping, Sequence

import numpy as np
import skrf
from skrf.calibration import LRRM, SOLT, EightTerm, NISTMultilineTRL, TwelveTerm

from probelog.cal_agreement import Agreement, agreement
from probelog.cal_guard import guard, refusal
from probelog.cal_verify import VerifyLimits, verify
from probelog.calkit import (
    CalibrationError,
    CalKit,
    KitError,
    ideals,
    kit_from_mapping,
    load_kit,
)
from probelog.calset import CalSet, ghz, load_calset

__all__ = [
    "Agreement", "CalKit", "CalSet", "CalibrationError", "KitError", "VerifyLimits",
    "agreement", "comparable_methods", "kit_from_mapping", "load_calset", "load_kit",
    "required_sites", "solve", "verify",
]

METHODS = ("solt", "lrrm", "mtrl")


def _roles(method: str, kit: CalKit) -> list[str]:
    if method in ("solt", "lrrm"):
        return ["open", "short", "load", "thru"]
    if method == "mtrl":
        if len(kit.lines) < 1:
            raise KitError(f"{kit.source}: multiline TRL needs at least one [lines.*] entry")
        return ["thru", kit.mtrl_reflect] + ["line:" + line.name for line in kit.lines]
    raise CalibrationError(f"unknown calibration method {method!r} (known: {', '.join(METHODS)})")


def required_sites(method: str, kit: CalKit) -> list[tuple[str, str]]:
    """The (role, site) pairs ``method`` needs, in measurement order."""
    out = []
    for role in _roles(method, kit):
        site = kit.site_of(role)
        if site is None:
            raise KitError(f"{kit.source}: no site for the {role} standard, which {method} needs "
                           f"(add it under [sites])")
        out.append((role, site))
    return out


def comparable_methods(primary: str, measured_sites: Collection[str], kit: CalKit) -> list[str]:
    """Other methods whose standards are all among ``measured_sites`` (site names),
    so their cal sets can be compared with the primary one (``agreement``)."""
    have = set(measured_sites)
    out = []
    for method in METHODS:
        if method == primary:
            continue
        try:
            need = required_sites(method, kit)
        except CalibrationError:
            continue
        if all(site in have for _, site in need):
            out.append(method)
    return out


def _gather(method: str, measured: Mapping[str, skrf.Network], kit: CalKit) -> dict[str, skrf.Network]:
    """Measured networks by role, checked for presence, port count and frequency."""
    by_role: dict[str, skrf.Network] = {}
    first_site, first = None, None
    for role, site in required_sites(method, kit):
        if site not in measured:
            raise CalibrationError(f"{method}: the {role} standard (site '{site}') was not "
                                   f"measured; measure it before solving")
        ntwk = measured[site]
        if ntwk.nports != 2:
            raise CalibrationError(f"{method}: the {role} standard (site '{site}') has "
                                   f"{ntwk.nports} port(s); standards are measured as 2-ports")
        if first is None:
            first_site, first = site, ntwk
        elif ntwk.frequency != first.frequency:
            raise CalibrationError(
                f"{method}: site '{site}' was swept {ghz(ntwk.f[0])}..{ghz(ntwk.f[-1])}, "
                f"{len(ntwk.f)} points, but site '{first_site}' "
                f"{ghz(first.f[0])}..{ghz(first.f[-1])}, {len(first.f)} points; "
                f"re-measure with the same sweep")
        by_role[role] = ntwk
    return by_role


def _skrf_cal(method: str, std: dict[str, skrf.Network], kit: CalKit,
              switch_terms: Sequence[skrf.Network] | None) -> TwelveTerm | EightTerm:
    freq = std["thru"].frequency
    ideal = ideals(kit, freq)
    z0 = kit.reference_impedance_ohm
    if method == "solt":
        roles = ["open", "short", "load", "thru"]
        return SOLT([std[r] for r in roles], [ideal[r] for r in roles], n_thrus=1)
    if method == "lrrm":
        # skrf order: line, reflect (unknown), reflect (known |Gamma|), match
        roles = ["thru", "short", "open", "load"]
        return LRRM([std[r] for r in roles], [ideal[r] for r in roles],
                    switch_terms=switch_terms, z0=z0, match_fit="l")
    refl = kit.mtrl_reflect
    lines = ["line:" + line.name for line in kit.lines]
    lengths = [kit.thru_length_um * 1e-6] + [line.length_um * 1e-6 for line in kit.lines]
    renorm = {}
    if kit.line_z0_ohm is not None:
        renorm = {"z0_line": kit.line_z0_ohm, "z0_ref": z0}
    return NISTMultilineTRL([std["thru"], std[refl]] + [std[r] for r in lines],
                            Grefls=[1.0 if refl == "open" else -1.0], l=lengths,
                            refl_offset=[kit.reflect_offset_um * 1e-6],  # m, negative towards the probes
                            er_est=kit.eps_eff, switch_terms=switch_terms, **renorm)


def _check_finite(coefs: Mapping[str, np.ndarray], f_hz: np.ndarray, method: str) -> None:
    for key, value in coefs.items():
        bad = ~np.isfinite(value)
        if bad.any():
            i = int(np.argmax(bad))
            raise CalibrationError(
                f"{method}: the solve is singular ({key} not finite) at {ghz(f_hz[i])} "
                f"and {int(bad.sum()) - 1} other point(s); check that every standard was "
                f"landed and that the lines differ in phase there")


def solve(method: str, measured: Mapping[str, skrf.Network], kit: CalKit,
          switch_terms: Sequence[skrf.Network] | None = None, cal_id: str = "cal-1") -> CalSet:
    """Solve a calibration from raw standards keyed by site name.

    method: "solt", "lrrm" or "mtrl" (multiline TRL). Raises CalibrationError
    naming the missing standard, the mismatched sweep or the singular frequency.
    """
    std = _gather(method, measured, kit)
    f_hz = std["thru"].f
    if switch_terms is not None:
        for name, st in zip(("forward", "reverse"), switch_terms, strict=False):
            if st.frequency != std["thru"].frequency:
                raise CalibrationError(f"{method}: the {name} switch term was swept "
                                       f"differently from the standards")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # skrf warns about absent switch terms, divisions
        try:
            cal = _skrf_cal(method, std, kit, switch_terms)
            cal.run()
            coefs = cal.coefs
        except (np.linalg.LinAlgError, ValueError, ZeroDivisionError, IndexError) as exc:
            raise CalibrationError(f"{method}: scikit-rf could not solve the calibration "
                                   f"({exc}); check the standards' landings and the kit") from exc
    _check_finite(coefs, f_hz, method)
    extras: dict[str, Any] = {}
    if method == "lrrm":
        extras["lrrm_load_l_h"] = float(np.mean(np.real(cal.solved_l)))
    standards = dict(required_sites(method, kit))
    calset = CalSet(cal_id=cal_id, method=method, cal=cal, kit_name=kit.name,
                    standards=standards, extras=extras)
    # a cal that cannot be right is refused, never used "when solved" (probelog.cal_guard)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        corrected = {role: calset.apply(ntwk) for role, ntwk in std.items()}
    if method == "mtrl" and kit.reflect_offset_um:
        # the reflect sits offset_um from the thru centre; at the centre its corrected
        # reflection carries -2 x offset of line (gain if towards the probes): move it
        # back to the reflect's own plane with the solved gamma, Gamma e^{2 gamma offset}
        refl = corrected[kit.mtrl_reflect]
        shift = np.exp(2.0 * np.asarray(cal.gamma) * kit.reflect_offset_um * 1e-6)
        refl.s = refl.s * shift[:, None, None]
    why = refusal(guard(corrected))
    if why is not None:
        raise CalibrationError(f"{method}: {why}")
    return calset
