"""True (error-free) S-parameters of the PLX-7 sites, from physics.

Conventions: time dependence e^{+j omega t}; frequencies in Hz; lengths in m
inside this module (um only where a name says so); S referenced to 50 ohm;
arrays shaped (n_freq, 2, 2) like ``skrf.Network.s``; ports numbered from 1.
Lines are RLGC models: Z = j w L + R(f), Y = j w C + G(f), gamma = sqrt(Z Y),
Zc = sqrt(Z / Y) (Pozar, Microwave Engineering, 4th ed., ch. 2), built into
``skrf.media.DefinedGammaZ0`` with that explicit, causal gamma. L and C come from
the quasi-static line: ``skrf.media.CPW`` for CPW on silicon and CPW over a
ground plane (Ghione & Naldi 1983/1984), and for the slow-wave line the
inductance of the unshielded CPW with the capacitance of the CPW over its shield.
Conductor loss is a causal skin-effect impedance R_dc sqrt(1 + j w / w0), which
tends to (1 + j) R_s-like sqrt(f) growth; we do not use skrf's CPW loss (it is
~0.815x the textbook value, see REFERENCES.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import skrf
from numpy.typing import ArrayLike, NDArray
from scipy.special import ellipk
from skrf.media import CPW, DefinedGammaZ0

from probelog.drivers.simbench.chip import Chip, Site

C0 = 299_792_458.0  # m/s
MU0 = 4e-7 * np.pi  # H/m
EPS0 = 1.0 / (MU0 * C0**2)  # F/m
Z_REF = 50.0  # ohm, port reference impedance

F64 = NDArray[np.float64]  # real arrays over frequency (Hz, H/m, F/m)
C128 = NDArray[np.complex128]  # ABCD and S stacks
# Impedances and admittances: complex128 at run time, but numpy's stubs type
# arithmetic with a Python complex (1j * w) as complexfloating[Any, Any].
ZY = NDArray[np.complexfloating[Any, Any]]


@dataclass(frozen=True)
class DieVariation:
    """Relative process deviations of one die (0.01 = +1 %)."""

    z0: float = 0.0
    eps: float = 0.0
    loss: float = 0.0
    pad_c: float = 0.0
    load_trim: float = 0.0


NOMINAL = DieVariation()


def die_variation(chip: Chip, die: tuple[int, int], seed: int) -> DieVariation:
    """Seeded per-die deviations: a smooth wafer gradient (tilt plus a radial bowl)
    plus a small random part, so wafer maps show a believable pattern.
    Z0 within about +-1 %, loss +-3 %, load trim +-0.5 % (chip.toml load_trim_pct)."""
    x, y = chip.die_centre_mm(die)
    r = chip.usable_radius_mm
    xn, yn = x / r, y / r
    rn2 = xn * xn + yn * yn
    g = np.random.default_rng([seed, 7, die[0], die[1]])
    tilt = np.random.default_rng([seed, 11]).uniform(0, 2 * np.pi)
    along = xn * np.cos(tilt) + yn * np.sin(tilt)
    trim = chip.process["load_trim_pct"] / 100.0
    return DieVariation(
        z0=float(0.005 * along + 0.004 * (rn2 - 0.5) + g.normal(0, 0.0015)),
        eps=float(0.002 * along + g.normal(0, 0.0008)),
        loss=float(0.012 * along + 0.015 * (rn2 - 0.5) + g.normal(0, 0.004)),
        pad_c=float(0.02 * (rn2 - 0.5) + g.normal(0, 0.005)),
        load_trim=float(np.clip(g.normal(0, trim / 2), -trim, trim)),
    )


@dataclass(frozen=True)
class LineModel:
    """RLGC of one line type on one metal level.

    L, C: lossless per-unit-length values (H/m, F/m), arrays over frequency.
    r_dc: DC series resistance (ohm/m); w0: skin-effect corner (rad/s);
    g_dc: shunt conductance from the conducting substrate (S/m); tan_d: dielectric
    loss tangent applied to C.
    """

    L: F64
    C: F64
    r_dc: float
    w0: float
    g_dc: float
    tan_d: float

    @property
    def z0_lossless(self) -> F64:
        return np.sqrt(self.L / self.C)

    @property
    def eps_eff_lossless(self) -> F64:
        return C0**2 * self.L * self.C

    def series_z(self, f: F64) -> ZY:
        """Series impedance per metre (ohm/m)."""
        w = 2 * np.pi * f
        z: ZY = 1j * w * self.L + self.r_dc * np.sqrt(1 + 1j * w / self.w0)  # numpy's stubs lose the type in sqrt(1 + ...)
        return z

    def shunt_y(self, f: F64) -> ZY:
        """Shunt admittance per metre (S/m)."""
        w = 2 * np.pi * f
        return self.g_dc + w * self.C * (1j + self.tan_d)

    def gamma_zc(self, f: F64) -> tuple[ZY, ZY]:
        """Propagation constant (1/m, Re >= 0) and characteristic impedance (ohm)."""
        z, y = self.series_z(f), self.shunt_y(f)
        return np.sqrt(z * y), np.sqrt(z / y)


def _quasi_static_lc(site: Site, chip: Chip, freq: skrf.Frequency) -> tuple[F64, F64, float, float]:
    """Lossless L, C (per m) of the site's line, the substrate filling factor for
    substrate conductance and the dielectric tan_d."""
    # chip.py's loader requires metal, width and gap of every line kind
    assert site.metal is not None and site.width_um is not None and site.gap_um is not None
    p, m = chip.process, chip.metals[site.metal]
    w, s = site.width_um * 1e-6, site.gap_um * 1e-6

    def lc(media: CPW) -> tuple[F64, F64]:
        z0 = np.real(media.z0_characteristic)
        ee = np.real(media.ep_reff_f)
        return z0 * np.sqrt(ee) / C0, np.sqrt(ee) / (C0 * z0)

    if site.line_type == "cpw":
        media = CPW(freq, w=w, s=s, h=p["substrate_h_um"] * 1e-6, ep_r=p["substrate_eps_r"], rho=None, t=None)
        L, C = lc(media)
        q = (np.real(media.ep_reff_f) - 1) / (p["substrate_eps_r"] - 1)
        return L, C, float(np.mean(q)), 0.0
    if site.line_type == "gcpw":
        media = CPW(freq, w=w, s=s, h=m["ground_height_um"] * 1e-6, ep_r=p["oxide_eps_r"], rho=None, t=None,
                    has_metal_backside=True)
        L, C = lc(media)
        return L, C, 0.0, p["oxide_tan_d"]
    # slow-wave: magnetic field passes the slotted shield (L of the CPW in air),
    # electric field ends on it (C of the CPW over a ground at the shield height)
    k = w / (w + 2 * s)
    L = np.full(len(freq), MU0 / 4 * ellipk(1 - k * k) / ellipk(k * k))  # scipy takes m = k^2
    shield = CPW(freq, w=w, s=s, h=m["shield_height_um"] * 1e-6, ep_r=p["oxide_eps_r"], rho=None, t=None,
                 has_metal_backside=True)
    _, C = lc(shield)
    return L, C, 0.0, 2 * p["oxide_tan_d"]


def line_model(site: Site, chip: Chip, f: F64, var: DieVariation = NOMINAL) -> LineModel:
    """RLGC of a line site on a die with process deviations ``var``."""
    assert site.metal is not None and site.width_um is not None  # required for line kinds by chip.py
    p, m = chip.process, chip.metals[site.metal]
    freq = skrf.Frequency.from_f(np.asarray(f, float), unit="Hz")
    L, C, q, tan_d = _quasi_static_lc(site, chip, freq)
    # Z0 and eps_eff deviations: Z0 ~ sqrt(L/C), eps_eff ~ L C
    L = L * (1 + var.z0) * np.sqrt(1 + var.eps)
    C = C * np.sqrt(1 + var.eps) / (1 + var.z0)
    w, t, sigma = site.width_um * 1e-6, m["thickness_um"] * 1e-6, m["conductivity_s_per_m"]
    kappa = p["current_crowding"]
    loss = 1 + var.loss
    r_dc = 1.1 / (sigma * w * t)  # signal strip plus 10 % for the ground return
    # corner where R_dc sqrt(w / 2 w0) meets kappa R_s / (2 W), R_s = sqrt(w mu0 / 2 sigma)
    w0 = r_dc**2 * 4 * w**2 * sigma / (MU0 * kappa**2)
    if site.line_type == "swl":
        r_dc *= p["swl_shield_loss"]
    g_dc = 0.0
    if site.line_type == "cpw":
        sigma_si = 1.0 / (p["substrate_rho_ohm_cm"] * 1e-2)
        eps_eff = C0**2 * L * C
        g_dc = float(np.mean(C * q * sigma_si / (EPS0 * eps_eff)))
    return LineModel(L=L, C=C, r_dc=r_dc * loss, w0=w0, g_dc=g_dc * loss, tan_d=tan_d * loss)


def line_media(site: Site, chip: Chip, f: F64, var: DieVariation = NOMINAL) -> DefinedGammaZ0:
    """The site's line as an skrf medium with explicit causal gamma, 50 ohm ports."""
    model = line_model(site, chip, f, var)
    gamma, zc = model.gamma_zc(np.asarray(f, float))
    freq = skrf.Frequency.from_f(np.asarray(f, float), unit="Hz")
    return DefinedGammaZ0(freq, z0_port=Z_REF, z0=zc, gamma=gamma)


# ---- lumped pieces as ABCD arrays (n, 2, 2) -------------------------------------------------


def series(z: ArrayLike) -> C128:
    """ABCD of a series impedance z (ohm)."""
    z = np.asarray(z, complex)
    a = np.zeros(z.shape + (2, 2), complex)
    a[:, 0, 0] = a[:, 1, 1] = 1
    a[:, 0, 1] = z
    return a


def shunt(y: ArrayLike) -> C128:
    """ABCD of a shunt admittance y (S)."""
    y = np.asarray(y, complex)
    a = np.zeros(y.shape + (2, 2), complex)
    a[:, 0, 0] = a[:, 1, 1] = 1
    a[:, 1, 0] = y
    return a


def chain(*abcd: C128) -> C128:
    out = abcd[0]
    for a in abcd[1:]:
        out = out @ a
    return out


def _through(f: F64) -> C128:
    """ABCD of a zero-length connection (identity), shape (n, 2, 2)."""
    return np.broadcast_to(np.eye(2, dtype=complex), (len(f), 2, 2)).copy()


def terminated_y(abcd: C128, y_load: ZY) -> ZY:
    """Input admittance (S) of a 2-port (ABCD) loaded by y_load at its port 2."""
    A, B, C, D = abcd[:, 0, 0], abcd[:, 0, 1], abcd[:, 1, 0], abcd[:, 1, 1]
    return (C + D * y_load) / (A + B * y_load)


def pair_s(y1: ZY, y2: ZY, yc: ZY) -> C128:
    """S (50 ohm) of two one-ports (admittances y1 at port 1, y2 at port 2) with a
    weak coupling admittance yc between the ports: the crosstalk of a reflect pair."""
    y = np.empty(y1.shape + (2, 2), complex)
    y[:, 0, 0] = y1 + yc
    y[:, 1, 1] = y2 + yc
    y[:, 0, 1] = y[:, 1, 0] = -yc
    s: C128 = skrf.network.y2s(y, z0=Z_REF)  # scikit-rf is untyped
    return s


def abcd_to_s(abcd: C128) -> C128:
    s: C128 = skrf.network.a2s(abcd, z0=Z_REF)  # scikit-rf is untyped
    return s


@dataclass(frozen=True)
class SiteModel:
    """Builds the true S of every site of a chip for one die."""

    chip: Chip
    var: DieVariation = NOMINAL

    def _w(self, f: F64) -> F64:
        return 2 * np.pi * f

    def pad(self, f: F64, port: int) -> C128:
        """GSG pad as ABCD from the probe tip inward: shunt C (with a little
        substrate loss), then series R + j w L into the structure. Port 2 is mirrored."""
        p, w = self.chip.process, self._w(f)
        c = p["pad_c_ff"] * 1e-15 * (1 + self.var.pad_c)
        sh = shunt(w * c * (1j + 0.02))
        se = series(p["pad_r_ohm"] + 1j * w * p["pad_l_ph"] * 1e-12)
        return chain(sh, se) if port == 1 else chain(se, sh)

    def crosstalk_y(self, f: F64) -> ZY:
        return 1j * self._w(f) * self.chip.process["crosstalk_c_ff"] * 1e-15

    def open_y(self, f: F64) -> ZY:
        return 1j * self._w(f) * self.chip.process["open_c_ff"] * 1e-15

    def short_y(self, f: F64) -> ZY:
        p = self.chip.process
        return 1 / (p["short_r_ohm"] + 1j * self._w(f) * p["short_l_ph"] * 1e-12)

    def load_y(self, f: F64) -> ZY:
        p = self.chip.process
        r = p["load_r_ohm"] * (1 + self.var.load_trim)
        return 1 / (r + 1j * self._w(f) * p["load_l_ph"] * 1e-12)

    def air_y(self, f: F64) -> ZY:
        """A probe tip in air: its own fringing C and a little radiation conductance
        rising as f^2 (|S11| ~0.2 dB below 0 dB at 110 GHz, common practice, no source)."""
        return 1j * self._w(f) * self.chip.process["air_c_ff"] * 1e-15 + 2e-4 * (f / 110e9) ** 2

    def air(self, f: F64) -> C128:
        """Both tips in air (or on bare passivation)."""
        y = self.air_y(f)
        return pair_s(y, y, self.crosstalk_y(f) / 3)

    def line_abcd(self, site: Site, f: F64) -> C128:
        """ABCD of the bare line. Built with the line's own Zc as port impedance:
        ABCD does not depend on it, and it spares skrf a renormalisation."""
        model = line_model(site, self.chip, f, self.var)
        gamma, zc = model.gamma_zc(f)
        media = DefinedGammaZ0(skrf.Frequency.from_f(f, unit="Hz"), z0=zc, gamma=gamma)
        assert site.length_um is not None  # required for line kinds by chip.py
        abcd: C128 = media.line(site.length_um * 1e-6, "m").a  # scikit-rf is untyped
        return abcd

    def device_abcd(self, site: Site, f: F64) -> C128:
        m, w = site.model, self._w(f)
        if m["model"] == "spiral":
            # skin effect on the winding: R grows as sqrt(f) above ~2 GHz
            r = m["r_ohm"] * np.sqrt(1 + 1j * f / 2e9)
            zl = r + 1j * w * m["l_ph"] * 1e-12
            z = 1 / (1 / zl + 1j * w * m["cp_ff"] * 1e-15)  # inter-turn C in parallel
            ysh = w * m["c_ff"] * 1e-15 * (1j + 0.03)  # oxide C to a lossy substrate
            return chain(shunt(ysh), series(z), shunt(ysh))
        # series MIM: R + j w L + 1/(j w C), bottom plate loads port 2 to substrate
        z = m["r_ohm"] + 1j * w * m["l_ph"] * 1e-12 + 1 / (1j * w * m["c_ff"] * 1e-15)
        ybot = w * m["cp_ff"] * 1e-15 * (1j + 0.05)
        return chain(series(z), shunt(ybot))

    def site_s(self, site: Site | None, f: F64) -> C128:
        """True S (n, 2, 2) of a site, or of tips on bare passivation when site is None."""
        f = np.asarray(f, float)
        if site is None:
            return self.air(f)
        k = site.kind
        pad1, pad2 = (self.pad(f, 1), self.pad(f, 2)) if site.pads else (_through(f), _through(f))
        if k in ("thru", "line", "device"):
            mid = self.line_abcd(site, f) if k != "device" else self.device_abcd(site, f)
            return abcd_to_s(chain(pad1, mid, pad2))
        if k in ("open", "short", "load"):
            y_end = {"open": self.open_y, "short": self.short_y, "load": self.load_y}[k](f)
            y = terminated_y(pad1, y_end)
        else:  # open-stub / short-stub
            y_end = self.open_y(f) if k == "open-stub" else self.short_y(f)
            y = terminated_y(chain(pad1, self.line_abcd(site, f)), y_end)
        # each port lands on its own (identical) copy of the reflect
        return pair_s(y, y, self.crosstalk_y(f))

    def dead_s(self, f: F64, shorted: bool) -> C128:
        """A dead die: the pads are there but open (or shorted) behind them."""
        y = terminated_y(self.pad(f, 1), self.short_y(f) if shorted else np.zeros_like(f, complex))
        return pair_s(y, y, self.crosstalk_y(f))
