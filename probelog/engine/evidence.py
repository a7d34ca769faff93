"""What the checks of a landing get besides the sweep itself, read from the
session state (never from raw journal lines):

- the active cal's raw open and short: contact from physics on the raw sweep
  (:mod:`probelog.contact`), from the first die on;
- the cal's uncertainty per frequency, u(f): the larger of its agreement bound
  with the second algorithm (the agreement CSV) and its verification residual
  (the corrected verification thru against the kit's thru), for the
  per-frequency limits (:mod:`probelog.limits`);
- the accepted landings of the site on earlier dies (plain accepts, not
  accepted-despite-FAIL): the population check (:mod:`probelog.population`),
  whose spread takes u(f) only when some of them were corrected with another
  cal (under one cal its error is common to all and cancels);
- the LAST ACCEPTED landing of the site under the same cal: the repeatability
  reference, named in its message; a re-landed (rejected) or failed landing is
  never a reference.

Files are hash-checked by the store and cached there; u(f) is cached per cal.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import skrf

from probelog import events as ev
from probelog.bench import Die
from probelog.limits import cal_uncertainty, verification_residual
from probelog.state_records import CalRec, LandingRec
from probelog.verdicts import Verdict

if TYPE_CHECKING:  # the engine imports this module lazily, from its mixins
    from probelog.engine.calstep import CalStep
    from probelog.engine.core import EngineCore


@dataclass
class Evidence:
    """Keyword arguments of :func:`probelog.checks.run_checks` for one landing."""

    raw_open: skrf.Network | None = None
    raw_short: skrf.Network | None = None
    unc: np.ndarray | None = None
    history: list[tuple[str, np.ndarray, np.ndarray]] = field(default_factory=list)
    previous: skrf.Network | None = None
    previous_label: str = "the previous landing"
    previous_other_die: bool = False
    population_unc: np.ndarray | None = None

    def kwargs(self, raw: skrf.Network | None) -> dict[str, Any]:
        return {"unc": self.unc, "history": self.history, "previous_label": self.previous_label,
                "previous_other_die": self.previous_other_die, "population_unc": self.population_unc,
                "raw": raw if self.raw_open is not None else None,
                "raw_open": self.raw_open, "raw_short": self.raw_short}


def _label(die: Die, rec: LandingRec) -> str:
    return f"die {die[0]},{die[1]} landing {rec.landing} (seq {rec.seq})"


def raw_open_short(core: EngineCore) -> tuple[skrf.Network | None, skrf.Network | None]:
    """The active cal's raw open and short (None when it has none or no cal is active)."""
    s = core.state
    if s.active is None or s.active.cal_id != s.cal_id:
        return None, None
    out = []
    for role in ("open", "short"):
        rec = s.standards.get(role)
        out.append(core.store.network(rec.raw, f"raw {role} of {s.cal_id}") if rec and rec.raw else None)
    return out[0], out[1]


def _agreement_bound(core: EngineCore, rec: CalRec) -> np.ndarray | None:
    agree = rec.agreement  # None: no second algorithm could be compared
    if agree is None or agree.file is None:
        return None
    path = core.store.check(agree.file, f"agreement of {rec.cal_id}")
    rows = list(csv.reader(io.StringIO(path.read_text(encoding="utf-8"))))[1:]
    return np.array([[float(x) for x in row[1:5]] for row in rows]) if rows else None


def _verification_residual(core: EngineCore, rec: CalRec) -> np.ndarray | None:
    from probelog.calkit import ideal_thru

    kit = core.view.kit()
    thru_site = kit.site_of("thru")
    if thru_site is None:
        return None
    site_rec = core.state.site(core.view.cal_die(), thru_site)
    ver = [x.corrected for x in site_rec.landings
           if x.what == "verification" and x.cal_id == rec.cal_id and x.corrected is not None]
    if not ver:
        return None
    cor = core.store.network(ver[-1], f"verification thru of {rec.cal_id}")
    return verification_residual(cor.s, ideal_thru(kit, cor.frequency).s)


def uncertainty(core: CalStep, f_hz: np.ndarray) -> np.ndarray | None:
    """u(f) of the active cal on ``f_hz`` (its own grid), cached per cal; None
    without an active cal or on another grid."""
    rec = core.state.active
    if rec is None:
        return None
    cache = core._unc_cache
    if rec.cal_id not in cache:
        calset = core._active_calset()
        if calset is None:
            return None
        f_cal = np.asarray(calset.frequency.f, dtype=float)
        bound = _agreement_bound(core, rec)
        resid = _verification_residual(core, rec)
        if bound is not None and len(bound) != len(f_cal):
            bound = None
        if resid is not None and len(resid) != len(f_cal):
            resid = None
        cache[rec.cal_id] = (f_cal, cal_uncertainty(len(f_cal), bound, resid))
    f_cal, u = cache[rec.cal_id]
    if len(f_cal) != len(f_hz) or not np.allclose(f_cal, f_hz, rtol=1e-9, atol=0.0):
        return None
    return u


def gather(core: CalStep, die: Die, site: str, f_hz: np.ndarray) -> Evidence:
    """Everything :class:`Evidence` holds for a landing of ``site`` on ``die``."""
    s = core.state
    raw_open, raw_short = raw_open_short(core)
    history = []
    cals: list[str | None] = []
    last: tuple[int, str, skrf.Network] | None = None
    active_id = s.active.cal_id if s.active is not None else None
    for d, rec in s.accepted_across_dies(site):
        if tuple(d) == tuple(die) or rec.verdict is Verdict.FAIL:
            continue
        decision = s.site(d, site).decision
        if decision is None or decision.action != ev.ACCEPT:  # accepted despite FAIL is no reference
            continue
        ref = rec.corrected or rec.raw
        if ref is None:
            continue
        ntwk = core.store.network(ref, f"accepted landing of {site} on die {d[0]},{d[1]}")
        history.append((_label(d, rec), np.asarray(ntwk.f, float), ntwk.s))
        cals.append(rec.cal_id)
        if rec.cal_id == active_id and rec.corrected is not None and (last is None or rec.seq > last[0]):
            last = (rec.seq, _label(d, rec), ntwk)
    out = Evidence(raw_open=raw_open, raw_short=raw_short, unc=uncertainty(core, f_hz), history=history)
    # landings corrected with the same cal share its error, which cancels in their
    # difference; only landings under another cal bring the cal's uncertainty along
    if any(c != active_id for c in cals):
        out.population_unc = out.unc
    if last is not None:
        out.previous, out.previous_label = last[2], f"the last accepted landing of the site, {last[1]}"
        out.previous_other_die = True  # accepted landings of this die's site are never before it
    return out
