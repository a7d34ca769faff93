"""Checks of a calibration on corrected verification structures (an open stub,
the thru): rotation on the Smith chart, stub delay, loss and gain, thru match and
delay. Each returns a :class:`CheckResult` with a message a person can act on.

Conventions: e^{+j omega t}; frequencies in Hz; dB = 20 log10 |S|; phase in
degrees; delays in s (ps in messages).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import skrf
from numpy.typing import NDArray

from probelog.calkit import C0, CalKit
from probelog.calset import ghz
from probelog.verdicts import CheckResult, Verdict

__all__ = ["VerifyLimits", "ccw_excursion_deg", "group_delay_fit_s", "verify"]


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
        f"near {ghz(at)}: the reference plane or the open/short definitions of the cal "
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
        f"open stub |S{p + 1}{p + 1}| falls to {-loss:.3g} dB at {ghz(f[i])}: "
        f"too lossy for a stub; suspect a standard's landing or a bad load"))
    i, p = np.unravel_index(np.argmax(db), db.shape)
    out.append(_result(
        "ver-stub-gain", db[i, p] <= lim.stub_gain_max_db, db[i, p], lim.stub_gain_max_db, f[i],
        "dB", f"open stub |S11| stays at or below 0 dB (max {db[i, p]:.3g} dB)",
        f"open stub |S{p + 1}{p + 1}| is {db[i, p]:.3g} dB at {ghz(f[i])}: a passive stub "
        f"cannot reflect more than it receives; the cal is wrong"))

    if thru is not None:
        m = 20 * np.log10(np.maximum(np.abs(_reflections(thru)), 1e-30))
        i, p = np.unravel_index(np.argmax(m), m.shape)
        out.append(_result(
            "ver-thru-match", m[i, p] <= lim.thru_match_max_db, m[i, p], lim.thru_match_max_db,
            thru.f[i], "dB", f"thru match at worst {m[i, p]:.3g} dB",
            f"thru |S{p + 1}{p + 1}| is {m[i, p]:.3g} dB at {ghz(thru.f[i])}: "
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
