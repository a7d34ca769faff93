"""The contact pre-check: right after touchdown, before the plan's long sweep, a
short fast sweep judged only for gross contact (a tip in the air or on the
wrong pad, a dead die).

The sweep is the plan's band and power at a few points and a wide IF bandwidth
(:func:`probelog.bench.precheck_settings`, the plan's ``[precheck]`` keys); the
VNA restores the plan's settings and reads them back before the full sweep
(:meth:`probelog.bench.Vna.precheck_sweep`). The judge is physics on raw data
(:func:`probelog.contact.physics_contact`): does each port read like the active
calibration's raw open (a tip in the air) or raw short? Nothing else is judged
here; a passed pre-check goes straight on to the full sweep, whose checks decide.

A failed pre-check is a FAIL landing of its own kind: its raw short sweep is
stored, a ``precheck`` event journaled, and the same StepMeasured notification
the full sweep sends goes out, so the screen shows it at once; it waits for a
decision like any FAIL (no full sweep exists to accept).

What it cannot judge, it passes on to the full sweep: no accepted cal with a raw
open and short (multiline TRL has neither), a VNA without a pre-check (files
saved by the operator), and what physics cannot tell from a few points (a lifted
tip on an ``open`` site, a very short open stub: probelog.contact says why).
"""

from __future__ import annotations

import numpy as np
import skrf

from probelog import events as ev
from probelog.bench import SweepSettings, precheck_settings
from probelog.engine.core import EngineCore
from probelog.engine.planview import expectation
from probelog.engine.store import die_dir
from probelog.engine.types import LandingOutcome, Step, StepMeasured
from probelog.plan_types import Site
from probelog.verdicts import CheckResult, Verdict


def on_grid(ntwk: skrf.Network, f_hz: np.ndarray) -> skrf.Network:
    """``ntwk`` at exactly the frequencies ``f_hz`` (Hz) when each is one of its own
    points (the pre-check's grid is a subset of the plan's, on which the cal's
    standards were measured): a slice, no interpolation. Else ``ntwk`` as it is
    (probelog.contact interpolates)."""
    f = np.asarray(f_hz, dtype=float)
    idx = np.clip(np.searchsorted(ntwk.f, f), 0, len(ntwk.f) - 1)
    if not np.allclose(ntwk.f[idx], f, rtol=1e-9, atol=0.0):
        return ntwk
    return skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=ntwk.s[idx], z0=ntwk.z0[idx])


class PrecheckStep(EngineCore):
    """The pre-check between touchdown and the full sweep (a mixin of the Engine)."""

    def _precheck(self, step: Step, site: Site) -> LandingOutcome | None:
        """Run the pre-check of ``step`` (probes down): None when it passed or
        could not be judged (go on to the full sweep), else the FAIL outcome,
        journaled and announced."""
        conf = self.plan.precheck_for(step.site)
        if not conf.enabled:
            return None
        standards = self._raw_open_short()
        if standards is None:
            return None  # nothing to judge against: the full sweep's checks decide
        settings = precheck_settings(self.plan.settings, conf.points, conf.ifbw_hz)
        try:
            raw = self.bench.vna.precheck_sweep(settings, ports=site.ports)
        except Exception as exc:
            self._instrument_failed("vna", exc)
        if raw is None:
            return None  # this VNA has no pre-check (the operator saves each file)
        from probelog.contact import physics_contact

        raw_open, raw_short = (on_grid(n, raw.f) for n in standards)
        result = physics_contact(raw, raw_open, raw_short, site.kind, expectation(site), self.view.limits())
        if result.verdict is not Verdict.FAIL:
            return None
        return self._precheck_failed(step, site, raw, settings, result)

    def _precheck_failed(self, step: Step, site: Site, raw: skrf.Network, settings: SweepSettings,
                         result: CheckResult) -> LandingOutcome:
        check = CheckResult(result.name, result.verdict, result.value, result.limit, result.at_hz,
                            f"pre-check ({settings.points} points at {settings.ifbw_hz / 1e3:g} kHz IF "
                            f"bandwidth, no full sweep taken): {result.message}", result.unit)
        header = {**self._header(step, "raw"), "what": "precheck-raw", "points": settings.points,
                  "ifbw_hz": settings.ifbw_hz}
        ref = self.store.write_net(f"data/{die_dir(step.die)}/{step.site}/L{step.landing}-precheck", raw, header)
        before = self._phase
        e = self._append(ev.Precheck(
            die=step.die, site=step.site, landing=step.landing, kind=site.kind, cal_id=self._active_cal_id(),
            raw=ref, settings=ev.Settings(settings.start_hz, settings.stop_hz, settings.points, settings.ifbw_hz,
                                          settings.power_dbm),
            checks=[ev.Check.of(check)], verdict=Verdict.FAIL, touchdowns=dict(self._touchdowns)))
        out = LandingOutcome(step, raw, None, [check], Verdict.FAIL, None, e.seq, {"raw": ref.path},
                             precheck=True)
        self._last_outcome = out
        self._emit(StepMeasured(seq=e.seq, outcome=out))
        self._announce_phase(before, e.seq)
        return out

    def _raw_open_short(self) -> tuple[skrf.Network, skrf.Network] | None:
        """The accepted calibration's raw open and short (hash-checked, cached by
        the store), or None when it has none."""
        from probelog.engine.evidence import raw_open_short

        raw_open, raw_short = raw_open_short(self)
        return None if raw_open is None or raw_short is None else (raw_open, raw_short)
