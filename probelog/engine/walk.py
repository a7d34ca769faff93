"""The walk through the plan: which step comes next (a cal standard, a drift
re-measure, the next undecided site in sequence order from where ``goto`` put
the walk), and measuring a site or a drift reference.
"""

from __future__ import annotations

import skrf

from probelog import events as ev
from probelog.bench import Die
from probelog.engine.calstep import CalStep
from probelog.engine.precheck import PrecheckStep
from probelog.engine.store import die_dir
from probelog.engine.types import (DriftChecked, EngineError, JumpedToDie, LandingOutcome, Phase,
                                   RecalibrationAdvised, Step, StepKind, StepMeasured)
from probelog.plan_types import Site
from probelog.verdicts import Verdict, overall


class Walk(CalStep, PrecheckStep):
    """Stepping through the plan's dies and sites."""

    @property
    def next_step(self) -> Step | None:
        if self._phase is Phase.CALIBRATING:
            return self._cal_step()
        if self._phase is not Phase.PROBING:
            return None
        s = self.state
        site_step = self._site_step()
        drift_site = self.view.drift_site()
        # A re-land goes straight back to its site: a drift re-measure that fell
        # due by count waits for the next new site (the tips are lifted already,
        # and the operator asked for that very site).
        due = s.ref_wanted or self._drift_requested or (self._drift_due() and not self._relanding(site_step))
        if drift_site and s.active is not None and due:
            die = self.view.drift_die()
            return Step(StepKind.DRIFT, die, drift_site, self.view.site(drift_site).kind,
                        s.landing_count(die, drift_site) + 1, 0, 1)
        return site_step

    def _relanding(self, step: Step | None) -> bool:
        """True when ``step`` re-lands its site: the site's last decision is a
        re-land of its latest landing (so also after a resume)."""
        if step is None:
            return False
        rec = self.state.site(step.die, step.site)
        last = rec.decisions[-1] if rec.decisions else None
        return last is not None and last.action == ev.RELAND and last.landing == rec.count

    def _site_step(self) -> Step | None:
        """The next undecided site in sequence order from the walk's start."""
        s = self.state
        seq = self.view.sequence
        n = len(seq)
        start = self.view.die_start(s.walk_die) if s.walk_die is not None else 0
        # A decided site stays decided, so the scan goes on from where it last
        # stopped for this start (one step per call, not the whole walk so far).
        first = self._walk_cursor[1] if self._walk_cursor[0] == start else start
        for k in range(first, start + n):
            die, site = seq[k % n]
            if not s.is_finished(die, site.name):
                self._walk_cursor = (start, k)
                return Step(StepKind.SITE, die, site.name, site.kind,
                            s.landing_count(die, site.name) + 1, k % n, n)
        self._walk_cursor = (start, start + n)
        return None

    @property
    def progress(self) -> tuple[int, int]:
        return self.state.n_finished, len(self.view.sequence)

    def _drift_due(self) -> bool:
        every = self.view.drift_every()
        return bool(every and self.state.since_drift >= every)

    def request_drift(self) -> None:
        """Make the next ``measure()`` re-measure the drift reference."""
        if not self.view.drift_site():
            raise EngineError(f"plan {self.view.name!r} names no drift reference site")
        self._drift_requested = True

    def goto(self, die: Die, reason: str = "") -> None:
        """Make the first unfinished site of ``die`` (in sequence order) the next
        site step; after it the walk goes on in the plan's order (wrapping round
        to the sites before it), skipping what is finished. PROBING only; a due
        drift re-measure still comes first. Journals ``goto``."""
        with self._busy():
            self._require_phase(Phase.PROBING)
            die = (int(die[0]), int(die[1]))
            self.view.die_start(die)
            if all(self.state.is_finished(d, s.name) for d, s in self.view.sequence.die_items(die)):
                raise EngineError(f"die {die[0]},{die[1]}: every site is already decided; nothing left to land on")
            e = self._append(ev.Goto(die=die, reason=(reason or "").strip()))
            self._emit(JumpedToDie(seq=e.seq, die=die, reason=(reason or "").strip()))

    def _previous(self, die: Die, site: str) -> skrf.Network | None:
        ref = self.state.site(die, site).previous
        return self.store.network(ref, f"previous landing on {site}") if ref is not None else None

    def _correct(self, raw: skrf.Network) -> skrf.Network | None:
        calset = self._active_calset()
        return calset.apply(raw) if calset is not None else None

    def _measure_site(self, step: Step) -> LandingOutcome:
        site = self._touch_down(step.die, step.site)
        failed = self._precheck(step, site)  # a tip in the air is caught in milliseconds
        if failed is not None:
            return failed
        raw = self._sweep(site)
        cor = self._correct(raw)
        use = cor if cor is not None else raw
        from probelog.engine.evidence import gather

        evidence = gather(self, step.die, step.site, use.f) if cor is not None else None
        checks = self._checks(use, site, previous=self._previous(step.die, step.site), evidence=evidence, raw=raw)
        metrics = self._metrics(use, site)
        base = f"data/{die_dir(step.die)}/{step.site}/L{step.landing}"
        files = self.store.write_pair(base, raw, cor, self._header(step, "raw"))
        verdict = overall(checks)
        before = self._phase
        e = self._append(ev.Landing(
            die=step.die, site=step.site, kind=site.kind, landing=step.landing, cal_id=self._active_cal_id(),
            raw=files["raw"], corrected=files.get("corrected"), checks=[ev.Check.of(c) for c in checks],
            verdict=verdict, metrics=metrics, touchdowns=dict(self._touchdowns)))
        out = LandingOutcome(step, raw, cor, checks, verdict, metrics, e.seq, {k: v.path for k, v in files.items()})
        self._last_outcome = out
        self._emit(StepMeasured(seq=e.seq, outcome=out))
        self._announce_phase(before, e.seq)
        return out

    def _metrics(self, ntwk: skrf.Network, site: Site) -> dict[str, list[float | None]] | None:
        length_um = site.length_um  # None: a line the plan gives no length
        if site.kind not in ("line", "thru") or not length_um or ntwk.nports != 2:
            return None
        import numpy as np

        from probelog import lines

        try:
            with np.errstate(all="ignore"):  # a lifted tip gives singular ABCD; checks judge it
                m = lines.line_metrics(ntwk, length_um * 1e-6)
                got: dict[str, list[float | None]] = lines.metrics_at(
                    m, lines.default_frequencies(m.f_hz, prefer_round=True))
                return got
        except (ValueError, FloatingPointError, ZeroDivisionError):
            return None  # metrics are information; the line-window check judges

    def _measure_drift(self, step: Step) -> LandingOutcome:
        raw = self._land(step.die, step.site)
        cor = self._correct(raw)
        use = cor if cor is not None else raw
        site = self.view.site(step.site)
        ref = self.state.drift_ref
        ref_net = self.store.network(ref[0], "drift reference") if ref else None
        checks = self._checks(use, site, previous=None, reference=ref_net)
        verdict = overall(checks)
        files = self.store.write_pair(f"data/{die_dir(step.die)}/{step.site}/L{step.landing}", raw, cor,
                                      self._header(step, "raw"))
        e = self._append(ev.Drift(
            die=step.die, site=step.site, landing=step.landing, cal_id=self._active_cal_id(),
            reference_seq=ref[1] if ref else None, raw=files["raw"], corrected=files.get("corrected"),
            checks=[ev.Check.of(c) for c in checks], verdict=verdict, touchdowns=dict(self._touchdowns)))
        self._drift_requested = False
        out = LandingOutcome(step, raw, cor, checks, verdict, None, e.seq, {k: v.path for k, v in files.items()})
        self._emit(DriftChecked(seq=e.seq, outcome=out))
        # Only the drift figure itself calls for a new cal; a failed contact means the
        # reference was landed badly and is re-measured, not that the cal went stale.
        drift_failed = any(c.name == "drift" and c.verdict is Verdict.FAIL for c in checks)
        contact_failed = any(c.name == "contact" and c.verdict is Verdict.FAIL for c in checks)
        if ref is not None and drift_failed and not contact_failed:
            worst = next(c for c in checks if c.name == "drift")
            reason = f"drift on {step.site}: {worst.message}"
            adv = self._append(ev.RecalRequested(reason=reason, advised_by="drift", drift_seq=e.seq))
            self._emit(RecalibrationAdvised(seq=adv.seq, reason=reason))
        return out
