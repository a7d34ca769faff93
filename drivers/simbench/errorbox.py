"""Per-port error boxes and switch terms of the simulated VNA + probes.

Each box is a reciprocal 2-port, port 1 on the VNA side and port 2 at the probe
tip: a connector transition, a short cable, a second transition, the GSG probe
body and the tip, plus the residual directivity leak of the VNA coupler. The
mismatches between the delays give the usual source-match ripple. The raw data
are the DUT through the boxes, with switch terms, as in the 8-term model used by
``skrf.calibration`` (Marks, "Formulations of the basic VNA error model including
switch terms", 50th ARFTG, 1997): M = terminate(X ** DUT ** Y, gamma_f, gamma_r).

Units: Hz, s, ohm; S referenced to 50 ohm; e^{+j omega t}; arrays (n_freq, 2, 2).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import skrf
from skrf.calibration import terminate
from skrf.media import DefinedGammaZ0

from probelog.drivers.simbench.physics import C128, F64, abcd_to_s, chain, series, shunt

DB_PER_NP = 20 / np.log(10)


@dataclass(frozen=True)
class PortHardware:
    """What one port's error box is made of (delays in s, losses in dB at 60 GHz)."""

    cable_delay_s: float = 150e-12
    cable_z0: float = 50.3
    cable_loss_db60: float = 0.10
    probe_delay_s: float = 45e-12
    probe_z0: float = 49.0
    probe_loss_db60: float = 0.85  # a GSG probe is ~1 dB at 60 GHz, common practice, no source
    transition_c_ff: float = 8.0
    connector_c_ff: float = 10.0
    connector_l_ph: float = 5.0
    tip_c_ff: float = 4.0
    tip_l_ph: float = 6.0
    directivity_db: float = -40.0
    switch_db: float = -22.0
    switch_delay_s: float = 220e-12


def port_hardware(seed: int, port: int) -> PortHardware:
    """Nominal hardware with a few per cent seeded spread between the two ports."""
    g = np.random.default_rng([seed, 101, port])

    def j(v: float, rel: float) -> float:
        return float(v * (1 + g.normal(0, rel)))

    h = PortHardware()
    return PortHardware(
        cable_delay_s=j(h.cable_delay_s, 0.05),
        cable_z0=j(h.cable_z0, 0.004),
        cable_loss_db60=j(h.cable_loss_db60, 0.05),
        probe_delay_s=j(h.probe_delay_s, 0.03),
        probe_z0=j(h.probe_z0, 0.005),
        probe_loss_db60=j(h.probe_loss_db60, 0.03),
        transition_c_ff=j(h.transition_c_ff, 0.1),
        connector_c_ff=j(h.connector_c_ff, 0.1),
        connector_l_ph=j(h.connector_l_ph, 0.1),
        tip_c_ff=j(h.tip_c_ff, 0.1),
        tip_l_ph=j(h.tip_l_ph, 0.1),
        directivity_db=h.directivity_db + g.normal(0, 1.5),
        switch_db=h.switch_db + g.normal(0, 1.0),
        switch_delay_s=j(h.switch_delay_s, 0.05),
    )


def _guide_abcd(freq: skrf.Frequency, delay_s: float, z0: float, loss_db60: float) -> C128:
    """ABCD of a guide with the given delay and loss: 70 % skin-effect (sqrt f) and
    30 % dielectric (f) loss at 60 GHz, on an skrf medium with unit length 1 m."""
    f = freq.f
    alpha = (0.7 * np.sqrt(f / 60e9) + 0.3 * (f / 60e9)) * loss_db60 / DB_PER_NP
    gamma = alpha + 1j * 2 * np.pi * f * delay_s
    abcd: C128 = DefinedGammaZ0(freq, z0=np.full(len(f), z0, complex), gamma=gamma).line(1.0, "m").a  # scikit-rf is untyped
    return abcd


def box_s(f: F64, hw: PortHardware) -> C128:
    """S (n, 2, 2) of one port's error box: port 1 = VNA side, port 2 = probe tip."""
    f = np.asarray(f, float)
    w = 2 * np.pi * f
    freq = skrf.Frequency.from_f(f, unit="Hz")
    abcd = chain(
        shunt(1j * w * hw.transition_c_ff * 1e-15),
        _guide_abcd(freq, hw.cable_delay_s, hw.cable_z0, hw.cable_loss_db60),
        series(1j * w * hw.connector_l_ph * 1e-12),
        shunt(1j * w * hw.connector_c_ff * 1e-15),
        _guide_abcd(freq, hw.probe_delay_s, hw.probe_z0, hw.probe_loss_db60),
        shunt(1j * w * hw.tip_c_ff * 1e-15),
        series(1j * w * hw.tip_l_ph * 1e-12),
    )
    s = abcd_to_s(abcd)
    # residual coupler leak, itself a little frequency dependent
    leak = 10 ** (hw.directivity_db / 20) * np.exp(-1j * w * 35e-12) * (1 + 0.4 * np.cos(w * 180e-12))
    s[:, 0, 0] += leak
    return s


def switch_term(f: F64, hw: PortHardware) -> C128:
    """Load match of a port's receiver when the other port drives (a2/b2), shape (n,)."""
    w = 2 * np.pi * np.asarray(f, float)
    # typed here: numpy's stubs give 10 ** float as Any
    gamma: C128 = 10 ** (hw.switch_db / 20) * np.exp(-1j * w * hw.switch_delay_s) * (1 + 0.3 * np.exp(-1j * w * 80e-12))
    return gamma


@dataclass(frozen=True)
class ErrorModel:
    """Error boxes and switch terms on one frequency grid.

    x: port-1 box, port 1 at the VNA, port 2 at the tip. y: port-2 box in the
    order skrf's EightTerm uses (port 1 at the tip, port 2 at the VNA).
    gamma_f = a2/b2 with port 1 driving; gamma_r = a1/b1 with port 2 driving.
    """

    f: F64
    x: C128
    y: C128
    gamma_f: C128
    gamma_r: C128


def flip(s: C128) -> C128:
    """Swap the ports of 2-port S arrays."""
    return s[:, ::-1, ::-1].copy()


def error_model(f: F64, seed: int) -> ErrorModel:
    hw1, hw2 = port_hardware(seed, 1), port_hardware(seed, 2)
    f = np.asarray(f, float)
    return ErrorModel(
        f=f,
        x=box_s(f, hw1),
        y=flip(box_s(f, hw2)),
        gamma_f=switch_term(f, hw2),
        gamma_r=switch_term(f, hw1),
    )


def cascade(a: C128, b: C128) -> C128:
    """S of 2-port a followed by 2-port b (a's port 2 to b's port 1), vectorised."""
    a11, a21, a12, a22 = (np.ascontiguousarray(a[:, i, j]) for i, j in ((0, 0), (1, 0), (0, 1), (1, 1)))
    b11, b21, b12, b22 = (np.ascontiguousarray(b[:, i, j]) for i, j in ((0, 0), (1, 0), (0, 1), (1, 1)))
    inv = 1 / (1 - a22 * b11)
    out = np.empty(a.shape, complex)
    out[:, 0, 0] = a11 + a12 * a21 * b11 * inv
    out[:, 1, 0] = a21 * b21 * inv
    out[:, 0, 1] = a12 * b12 * inv
    out[:, 1, 1] = b22 + b12 * b21 * a22 * inv
    return out


def drifted(em: ErrorModel, d1: C128, d2: C128) -> ErrorModel:
    """Error model whose port-1 and port-2 transmission tracking (e10 e01) are
    multiplied by d1 and d2 (complex, shape (n,)); boxes stay reciprocal."""
    x, y = em.x.copy(), em.y.copy()
    r1, r2 = np.sqrt(d1), np.sqrt(d2)
    x[:, 0, 1] *= r1
    x[:, 1, 0] *= r1
    y[:, 0, 1] *= r2
    y[:, 1, 0] *= r2
    return ErrorModel(em.f, x, y, em.gamma_f, em.gamma_r)


def raw_from_true(dut: C128, em: ErrorModel) -> C128:
    """What the uncorrected VNA reports for a DUT (n, 2, 2): through the boxes,
    with switch terms (skrf.calibration.terminate)."""
    freq = skrf.Frequency.from_f(em.f, unit="Hz")
    inner = skrf.Network(frequency=freq, s=cascade(cascade(em.x, dut), em.y))
    gf = skrf.Network(frequency=freq, s=em.gamma_f.reshape(-1, 1, 1))
    gr = skrf.Network(frequency=freq, s=em.gamma_r.reshape(-1, 1, 1))
    raw: C128 = terminate(inner, gf, gr).s  # scikit-rf is untyped
    return raw


