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

Roles are "open", "short", "load", "thru" and "line:<name>". Reflect standards are
measured as 2-port pairs (each probe on its own copy, S21 ~ 0). Switch terms are
the pair (forward, reverse) of 1-port Networks; SOLT's 12-term model does not need
them (it absorbs them), LRRM and multiline TRL use them when given.
Conventions: e^{+j omega t}; frequencies in Hz; dB = 20 log10 |S|; phase in degrees.
"""

from __future__ import annotations

import json
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Collection, Mapping, Sequence

import numpy as np
import skrf
from numpy.typing import NDArray
from skrf.calibration import LRRM, SOLT, EightTerm, NISTMultilineTRL, TwelveTerm

from probelog.cal_agreement import Agreement, agreement
from probelog.cal_guard import guard, refusal
from probelog.calkit import (
    C0,
    CalibrationError,
    CalKit,
    KitError,
    ideals,
    kit_from_mapping,
    load_kit,
)
from probelog.verdicts import CheckResult, Verdict

__all__ = [
    "Agreement", "CalKit", "CalSet", "CalibrationError", "KitError", "VerifyLimits",
    "agreement", "comparable_methods", "kit_from_mapping", "load_calset", "load_kit",
    "required_sites", "solve", "verify",
]

METHODS = ("solt", "lrrm", "mtrl")
FORMAT = "probelog-calset-1"


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


def _ghz(f_hz: float) -> str:
    return f"{f_hz / 1e9:.6g} GHz"


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
                f"{method}: site '{site}' was swept {_ghz(ntwk.f[0])}..{_ghz(ntwk.f[-1])}, "
                f"{len(ntwk.f)} points, but site '{first_site}' "
                f"{_ghz(first.f[0])}..{_ghz(first.f[-1])}, {len(first.f)} points; "
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
                f"{method}: the solve is singular ({key} not finite) at {_ghz(f_hz[i])} "
                f"and {int(bad.sum()) - 1} other point(s); check that every standard was "
                f"landed and that the lines differ in phase there")


@dataclass
class CalSet:
    """A solved two-port calibration (error terms at the probe tips).

    ``cal`` is the scikit-rf calibration object (SOLT: 12-term model; LRRM and
    multiline TRL: 8-term model with switch terms).
    """

    cal_id: str
    method: str
    cal: Any
    kit_name: str = ""
    standards: dict[str, str] = field(default_factory=dict)
    extras: dict[str, Any] = field(default_factory=dict)

    @property
    def frequency(self) -> skrf.Frequency:
        return self.cal.frequency

    @property
    def model(self) -> str:
        return "12term" if isinstance(self.cal, TwelveTerm) else "8term"

    @property
    def error_terms(self) -> dict[str, np.ndarray]:
        """12-term error coefficients, each shape (n_freq,)."""
        return {k: np.asarray(v) for k, v in self.cal.coefs_12term.items()}

    @property
    def error_terms_8(self) -> dict[str, np.ndarray]:
        """8-term error coefficients plus switch terms, each shape (n_freq,)."""
        return {k: np.asarray(v) for k, v in self.cal.coefs_8term.items()}

    def _check_frequency(self, raw: skrf.Network) -> None:
        f = self.frequency
        if raw.frequency != f:
            raise CalibrationError(
                f"cal set '{self.cal_id}' covers {_ghz(f.f[0])}..{_ghz(f.f[-1])} in "
                f"{f.npoints} points, but the sweep '{raw.name}' covers "
                f"{_ghz(raw.f[0])}..{_ghz(raw.f[-1])} in {len(raw.f)} points; "
                f"sweep with the calibration's settings")

    def apply(self, raw: skrf.Network) -> skrf.Network:
        """Correct a raw sweep: 2-port with the full model, 1-port with the port-1
        terms (Gamma = (m - Ed) / (Er + Es (m - Ed)))."""
        self._check_frequency(raw)
        if raw.nports == 2:
            out = self.cal.apply_cal(raw)
        elif raw.nports == 1:
            t = self.error_terms
            d = raw.s[:, 0, 0] - t["forward directivity"]
            g = d / (t["forward reflection tracking"] + t["forward source match"] * d)
            out = raw.copy()
            out.s = g.reshape(-1, 1, 1)
        else:
            raise CalibrationError(f"cal set '{self.cal_id}' corrects 1- or 2-port sweeps; "
                                   f"'{raw.name}' has {raw.nports} ports")
        out.name = raw.name
        return out

    def summary(self) -> dict[str, Any]:
        """JSON-ready description for the journal."""
        f = self.frequency.f
        return {
            "cal_id": self.cal_id,
            "method": self.method,
            "model": self.model,
            "kit": self.kit_name,
            "standards": dict(self.standards),
            "start_hz": float(f[0]),
            "stop_hz": float(f[-1]),
            "points": int(len(f)),
            **self.extras,
        }

    def save(self, folder: str | Path) -> list[Path]:
        """Write the error terms as 1-port Touchstone files (one per term, RI) and
        ``calset.json``; returns the written paths. Re-read with :func:`load_calset`."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        coefs = self.cal.coefs
        files: dict[str, str] = {}
        written: list[Path] = []
        for key, value in coefs.items():
            stem = "term-" + key.replace(" ", "-")
            ntwk = skrf.Network(frequency=self.frequency, s=np.asarray(value).reshape(-1, 1, 1),
                                name=stem)
            ntwk.write_touchstone(stem, dir=str(folder), form="ri")
            files[key] = stem + ".s1p"
            written.append(folder / files[key])
        meta = {"format": FORMAT, **self.summary(), "terms": files}
        meta_path = folder / "calset.json"
        meta_path.write_text(json.dumps(meta, indent=2, sort_keys=True) + "\n", encoding="utf-8")
        written.append(meta_path)
        return written


def load_calset(folder: str | Path) -> CalSet:
    """Read a cal set written by :meth:`CalSet.save`."""
    folder = Path(folder)
    meta_path = folder / "calset.json"
    try:
        meta = json.loads(meta_path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise CalibrationError(f"{meta_path}: cannot read cal set ({exc.strerror})") from exc
    except json.JSONDecodeError as exc:
        raise CalibrationError(f"{meta_path}: not valid JSON (line {exc.lineno}): {exc.msg}") from exc
    if meta.get("format") != FORMAT:
        raise CalibrationError(f"{meta_path}: key 'format' is {meta.get('format')!r}, "
                               f"expected {FORMAT!r}")
    coefs = {}
    frequency = None
    for key, name in meta["terms"].items():
        try:
            ntwk = skrf.Network(str(folder / name))
        except (OSError, ValueError) as exc:
            raise CalibrationError(f"{folder / name}: cannot read error term '{key}': {exc}") from exc
        coefs[key] = ntwk.s[:, 0, 0]
        frequency = ntwk.frequency
    cls = TwelveTerm if meta["model"] == "12term" else EightTerm
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # skrf warns that no switch terms were passed
        cal = cls.from_coefs(frequency, coefs)
    known = {"format", "cal_id", "method", "model", "kit", "standards", "start_hz",
             "stop_hz", "points", "terms"}
    return CalSet(cal_id=meta["cal_id"], method=meta["method"], cal=cal, kit_name=meta["kit"],
                  standards=meta["standards"],
                  extras={k: v for k, v in meta.items() if k not in known})


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


# --- verification -----------------------------------------------------------------


@dataclass(frozen=True)
class VerifyLimits:
    """Limits of the verification after calibrating (common practice, no source)."""

    stub_ccw_max_deg: float = 1.0     # largest counter-clockwise excursion of S11 phase
    stub_delay_tol: float = 0.15      # relative to 2 l sqrt(eps_eff) / c
    stub_loss_max_db: float = 3.0     # largest -20 log10 |S11| allowed
    stub_gain_max_db: float = 0.1     # |S11| above 0 dB beyond this is impossible (passive)
    thru_match_max_db: float = -20.0  # largest |S11|, |S22| of the corrected thru
    thru_delay_tol_s: float = 0.3e-12


def _reflections(ntwk: skrf.Network) -> NDArray[np.complex128]:
    """Reflection traces, shape (n_freq, n_ports): S11 (and S22 of a pair)."""
    traces: NDArray[np.complex128] = np.stack([ntwk.s[:, i, i] for i in range(ntwk.nports)], axis=1)  # skrf is untyped
    return traces


def ccw_excursion_deg(gamma: NDArray[np.complex128]) -> NDArray[np.float64]:
    """Largest rise (deg) of the unwrapped phase over any span, per column.

    A passive, nearly lossless one-port turns clockwise (Foster, Bell Syst. Tech. J.
    3, 1924): its phase only falls, so any rise is a counter-clockwise excursion.
    """
    ph = np.degrees(np.unwrap(np.angle(gamma), axis=0))
    rise: NDArray[np.float64] = np.max(ph - np.minimum.accumulate(ph, axis=0), axis=0)
    return rise


def group_delay_fit_s(s: NDArray[np.complex128], f_hz: NDArray[np.float64]) -> NDArray[np.float64]:
    """Least-squares group delay (s) of each column: -d(phase)/d(omega)."""
    ph = np.unwrap(np.angle(s), axis=0)
    w = 2 * np.pi * f_hz
    wc = w - w.mean()
    delay: NDArray[np.float64] = -(wc @ (ph - ph.mean(axis=0))) / (wc @ wc)
    return delay


def _result(name: str, ok: bool, value: float, limit: float, at_hz: float | None,
            unit: str, good: str, bad: str) -> CheckResult:
    return CheckResult(name=name, verdict=Verdict.PASS if ok else Verdict.FAIL,
                       value=float(value), limit=float(limit),
                       at_hz=None if at_hz is None else float(at_hz),
                       message=good if ok else bad, unit=unit)


def verify(open_stub: skrf.Network, thru: skrf.Network | None, kit: CalKit,
           limits: VerifyLimits | None = None) -> list[CheckResult]:
    """Check a calibration on corrected verification structures.

    open_stub: corrected open stub (2-port pair or 1-port) of length
    ``kit.verification['open_stub_length_um']``; thru: the corrected thru or None.
    Returns ver-stub-rotation, ver-stub-delay, ver-stub-loss, ver-stub-gain and,
    with a thru, ver-thru-match and ver-thru-delay.
    """
    lim = limits or VerifyLimits()
    f = open_stub.f
    g = _reflections(open_stub)
    out = []

    ccw = ccw_excursion_deg(g)
    port = int(np.argmax(ccw))
    ph = np.degrees(np.unwrap(np.angle(g[:, port])))
    at = f[int(np.argmax(ph - np.minimum.accumulate(ph)))]
    out.append(_result(
        "ver-stub-rotation", ccw[port] <= lim.stub_ccw_max_deg, ccw[port], lim.stub_ccw_max_deg,
        at, "deg", "the open stub turns clockwise on the Smith chart, as a passive stub must",
        f"the open stub turns counter-clockwise by {ccw[port]:.3g} deg on port {port + 1} "
        f"near {_ghz(at)}: the reference plane or the open/short definitions of the cal "
        f"are wrong (open C or short L over-specified, wrong thru delay, a standard not landed)"))

    length_um = kit.verification.get("open_stub_length_um")
    if length_um is not None:
        expect = 2 * length_um * 1e-6 * np.sqrt(kit.eps_eff) / C0
        tau = group_delay_fit_s(g, f)
        k = int(np.argmax(np.abs(tau - expect)))
        rel = abs(tau[k] - expect) / expect
        out.append(_result(
            "ver-stub-delay", rel <= lim.stub_delay_tol, rel, lim.stub_delay_tol, None, "",
            f"open stub delay {tau[k] * 1e12:.4g} ps matches 2 l sqrt(eps_eff)/c = "
            f"{expect * 1e12:.4g} ps",
            f"open stub delay on port {k + 1} is {tau[k] * 1e12:.4g} ps, expected "
            f"{expect * 1e12:.4g} ps (off by {rel:.0%}): check the reference plane and eps_eff"))

    db = 20 * np.log10(np.maximum(np.abs(g), 1e-30))
    i, p = np.unravel_index(np.argmin(db), db.shape)
    loss = -db[i, p]
    out.append(_result(
        "ver-stub-loss", loss <= lim.stub_loss_max_db, loss, lim.stub_loss_max_db, f[i], "dB",
        f"open stub return loss at most {loss:.3g} dB",
        f"open stub |S{p + 1}{p + 1}| falls to {-loss:.3g} dB at {_ghz(f[i])}: "
        f"too lossy for a stub; suspect a standard's landing or a bad load"))
    i, p = np.unravel_index(np.argmax(db), db.shape)
    out.append(_result(
        "ver-stub-gain", db[i, p] <= lim.stub_gain_max_db, db[i, p], lim.stub_gain_max_db, f[i],
        "dB", f"open stub |S11| stays at or below 0 dB (max {db[i, p]:.3g} dB)",
        f"open stub |S{p + 1}{p + 1}| is {db[i, p]:.3g} dB at {_ghz(f[i])}: a passive stub "
        f"cannot reflect more than it receives; the cal is wrong"))

    if thru is not None:
        m = 20 * np.log10(np.maximum(np.abs(_reflections(thru)), 1e-30))
        i, p = np.unravel_index(np.argmax(m), m.shape)
        out.append(_result(
            "ver-thru-match", m[i, p] <= lim.thru_match_max_db, m[i, p], lim.thru_match_max_db,
            thru.f[i], "dB", f"thru match at worst {m[i, p]:.3g} dB",
            f"thru |S{p + 1}{p + 1}| is {m[i, p]:.3g} dB at {_ghz(thru.f[i])}: "
            f"the corrected thru is not matched; check the load and the thru landing"))
        thru_tau = float(group_delay_fit_s(thru.s[:, 1, 0][:, None], thru.f)[0])
        err = abs(thru_tau - kit.thru_delay_s)
        out.append(_result(
            "ver-thru-delay", err <= lim.thru_delay_tol_s, err * 1e12, lim.thru_delay_tol_s * 1e12,
            None, "ps", f"thru delay {thru_tau * 1e12:.4g} ps matches the kit "
            f"({kit.thru_delay_s * 1e12:.4g} ps)",
            f"thru delay is {thru_tau * 1e12:.4g} ps, the kit says {kit.thru_delay_s * 1e12:.4g} ps: "
            f"check thru_length_um / thru_delay_s and the probe placement"))
    return out
