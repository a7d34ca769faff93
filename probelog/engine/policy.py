"""The decision policy: what the operator may decide on a landing and what it
takes. Accepting a FAIL landing needs a reason and is journaled as its own
action (``accept-despite-fail``); skip and give-up need a reason; a whole die
can be skipped with one reason; re-landing a cal standard drops its landing
from the calibration.
"""

from __future__ import annotations

from probelog import events as ev
from probelog.bench import Die
from probelog.engine.core import die_of, need_reason
from probelog.engine.types import DecisionRecorded, EngineError, Phase, StepKind
from probelog.engine.walk import Walk
from probelog.line_figures_step import die_events
from probelog.verdicts import Verdict


class Policy(Walk):
    """Decisions on landings and dies."""

    def accept(self, reason: str = "") -> None:
        """Keep the landing waiting for a decision. A FAIL landing is kept only
        with a reason, journaled as ``accept-despite-fail``."""
        with self._busy():
            self._require_phase(Phase.DECIDING)
            die, site, landing = self._awaiting()
            rec = self.state.site(die, site).landings
            if rec and rec[-1].what == "precheck" and rec[-1].landing == landing:
                raise EngineError(f"die {die[0]},{die[1]} site {site}: the contact pre-check failed and no sweep "
                                  "was taken, so there is nothing to keep; re-land, skip or give up")
            last = self.state.site(die, site).last_landing
            if last is not None and last.verdict is Verdict.FAIL:
                reason = need_reason(reason, f"accept a FAIL landing on die {die[0]},{die[1]} site {site}")
                self._record(die, site, landing, ev.ACCEPT_DESPITE_FAIL, reason)
            else:
                self._record(die, site, landing, ev.ACCEPT, (reason or "").strip())

    def reland(self, reason: str = "") -> None:
        """Measure the same site again (its landing number goes up by one). While
        calibrating, re-measures the standard measured last: its earlier landing
        stays on record but no longer counts for the calibration."""
        if self._phase is Phase.CALIBRATING:
            self._reland_standard(reason)
            return
        self._decide(ev.RELAND, reason)

    def skip(self, reason: str) -> None:
        self._decide(ev.SKIP, need_reason(reason, "skip a site"))

    def give_up(self, reason: str) -> None:
        """Record the site as failed and go on."""
        self._decide(ev.GIVE_UP, need_reason(reason, "give up on a site"))

    def skip_die(self, die: Die, reason: str) -> list[str]:
        """Skip every undecided site of ``die`` with one reason (one ``die-skipped``
        event). PROBING only. Returns the sites skipped."""
        with self._busy():
            self._require_phase(Phase.PROBING)
            die = die_of(die)
            reason = need_reason(reason, f"skip die {die[0]},{die[1]}")
            self.view.die_start(die)
            sites = [s.name for d, s in self.view.sequence.die_items(die) if not self.state.is_finished(d, s.name)]
            if not sites:
                raise EngineError(f"die {die[0]},{die[1]}: every site is already decided; nothing to skip")
            before = self._phase
            e = self._append(ev.DieSkipped(die=die, sites=sites, reason=reason))
            for site in sites:
                self._emit(DecisionRecorded(seq=e.seq, die=die, site=site, landing=self.state.landing_count(die, site),
                                            action=ev.SKIP, reason=reason))
            self._announce_phase(before, e.seq)
            return sites

    def _awaiting(self) -> tuple[Die, str, int]:
        aw = self.state.awaiting
        if aw is None:
            raise EngineError("no landing is waiting for a decision")
        return aw

    def _decide(self, action: str, reason: str) -> None:
        with self._busy():
            if self._phase is Phase.PROBING and action in (ev.SKIP, ev.GIVE_UP):
                step = self.next_step  # skip / give up a site before landing on it
                if step is None or step.kind is not StepKind.SITE:
                    raise EngineError(f"nothing to {action} now")
                die, site, landing = step.die, step.site, step.landing - 1
            else:
                self._require_phase(Phase.DECIDING)
                die, site, landing = self._awaiting()
            self._record(die, site, landing, action, reason)

    def _record(self, die: Die, site: str, landing: int, action: str, reason: str) -> None:
        before = self._phase
        e = self._append(ev.Decision(die=die, site=site, landing=landing, action=action, reason=reason))
        if action != ev.RELAND and all(self.state.is_finished(d, s.name) for d, s in self.view.sequence if d == die):
            for figures in die_events(self.state, die, self.plan.sites, self.session_dir):
                self._append(figures)  # the die's pad-free line figures, after its last decision
        self._last_outcome = None
        self._emit(DecisionRecorded(seq=e.seq, die=die, site=site, landing=landing, action=action, reason=reason))
        self._announce_phase(before, e.seq)

    def _reland_standard(self, reason: str) -> None:
        with self._busy():
            role = self.state.last_standard
            if role is None or role not in self.state.standards:
                raise EngineError("no standard measured yet in this calibration to re-land")
            rec = self.state.standards[role]
            die = self.view.cal_die()
            e = self._append(ev.Decision(die=die, site=rec.site, landing=rec.landing, action=ev.RELAND,
                                         reason=reason, standard=role, cal_id=self._cal_id()))
            self._emit(DecisionRecorded(seq=e.seq, die=die, site=rec.site, landing=rec.landing,
                                        action=ev.RELAND, reason=reason))
