"""The calibration step: measure each standard (raw), fetch the VNA's switch
terms, solve the cal, verify it on the verification sites, compare with a
second algorithm (scikit-rf calibrations behind probelog.calibration).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import skrf

from probelog import events as ev
from probelog.engine.core import EngineCore
from probelog.engine.store import agreement_csv
from probelog.engine.types import CalOutcome, LandingOutcome, StandardStatus, Step, StepKind, StepMeasured
from probelog.plan_types import Site
from probelog.verdicts import CheckResult, Verdict, overall

if TYPE_CHECKING:  # types only: the kit and the cal set are imported where they are used
    from probelog.calkit import CalKit
    from probelog.calset import CalSet
    from probelog.state_records import CalRec

# Worst-case |dS| (linear) between two cal sets from the same standards: above a
# few hundredths the choice of algorithm shows in the data (common practice, no source).
AGREEMENT_WARN = 0.03
AGREEMENT_FAIL = 0.10


def agreement_verdict(worst: float) -> Verdict:
    if worst > AGREEMENT_FAIL:
        return Verdict.FAIL
    return Verdict.WARN if worst > AGREEMENT_WARN else Verdict.PASS


class CalStep(EngineCore):
    """Measuring standards and computing / verifying a calibration."""

    def _cal_step(self) -> Step | None:
        req = self.view.required()
        for i, (name, site) in enumerate(req):
            if name not in self.state.standards:
                landing = self.state.std_landings.get(f"{self._cal_id()}/{site}", 0) + 1
                return Step(StepKind.CAL_STANDARD, self.view.cal_die(), site, self.view.site(site).kind,
                            landing, i, len(req), name)
        return None

    @property
    def cal_standards(self) -> list[StandardStatus]:
        out = []
        for name, site in self.view.required():
            got = self.state.standards.get(name)
            out.append(StandardStatus(name, site, self.view.site(site).kind, got is not None,
                                      got.verdict if got else None))
        return out

    @property
    def last_standard(self) -> str | None:
        """Role of the standard measured last in this calibration (what reland() re-lands)."""
        from probelog.engine.types import Phase

        return self.state.last_standard if self._phase is Phase.CALIBRATING else None

    def _standard_networks_by_role(self) -> dict[str, skrf.Network]:
        """Raw standards measured so far, keyed by role (open, short, ..., line:<name>); hash-checked."""
        out = {}
        for role, rec in self.state.standards.items():
            if rec.raw is not None:
                out[role] = self.store.network(rec.raw, f"raw standard {role} of {self._cal_id()}")
        return out

    def _standard_networks(self) -> dict[str, skrf.Network]:
        """Raw standards keyed by site name (as calibration.solve wants them)."""
        sites = dict(self.view.required())
        return {sites[role]: ntwk for role, ntwk in self._standard_networks_by_role().items()}

    def _switch_networks(self) -> tuple[skrf.Network, ...] | None:
        terms = self.state.switch_terms
        if not terms:
            return None
        return tuple(self.store.network(r, "switch term") for r in terms)

    def _measure_standard(self, step: Step) -> LandingOutcome:
        from probelog.standard_checks import raw_standard_checks

        assert step.standard is not None
        raw = self._land(step.die, step.site)
        site = self.view.site(step.site)
        cal_id = self._cal_id()
        # raw data: the kind checks expect corrected data, so judge contact by
        # transmission and by how the standard differs from those already measured
        earlier = {r: n for r, n in self._standard_networks_by_role().items() if r != step.standard}
        checks = raw_standard_checks(raw, step.standard, earlier, self.view.limits())
        if "open" in earlier and "short" in earlier and step.standard not in ("open", "short"):
            # with the raw open and short in hand, a tip in the air is told from physics too
            from probelog.contact import physics_contact
            from probelog.engine.planview import expectation

            checks.append(physics_contact(raw, earlier["open"], earlier["short"], site.kind,
                                          expectation(site), self.view.limits()))
        verdict = overall(checks)
        suffix = "" if step.landing == 1 else f"-L{step.landing}"
        stem = f"data/cal/{cal_id}/{step.site}{suffix}"
        files = self.store.write_pair(stem, raw, None, self._header(step, "raw"))
        switch = self._fetch_switch_terms(raw, site, step, stem)
        e = self._append(ev.CalStandard(
            cal_id=cal_id, standard=step.standard, die=step.die, site=step.site, kind=site.kind,
            landing=step.landing, raw=files["raw"], checks=[ev.Check.of(c) for c in checks],
            verdict=verdict, touchdowns=dict(self._touchdowns), switch_terms=switch))
        out = LandingOutcome(step, raw, None, checks, verdict, None, e.seq, {"raw": files["raw"].path})
        self._emit(StepMeasured(seq=e.seq, outcome=out))
        return out

    def _fetch_switch_terms(self, raw: skrf.Network, site: Site, step: Step, stem: str) -> list[ev.FileRef] | None:
        """Fetch and store the VNA's switch terms right after a transmissive standard
        (they belong to the instrument; any reciprocal 2-port reveals them, Marks,
        50th ARFTG 1997). None when the VNA does not offer them."""
        if raw.nports != 2 or site.kind not in ("thru", "line"):
            return None
        try:
            terms = self.bench.vna.switch_terms()
        except Exception as exc:
            self._instrument_failed("vna", exc)
        if terms is None:
            return None
        return [self.store.write_net(f"{stem}-switch-{d}", t, self._header(step, f"switch term {d}"))
                for d, t in zip(("gf", "gr"), terms, strict=False)]

    def _compute_and_verify(self) -> CalOutcome:
        from probelog import calibration as cal

        method = self.view.cal_method()
        kit = self.view.kit()
        measured = self._standard_networks()
        cal_id = self._cal_id()
        cal_dir = f"data/cal/{cal_id}"
        names = [name for name, _ in self.view.required()]
        switch = self._switch_networks()
        calset: CalSet | None
        try:
            calset = cal.solve(method, measured, kit, switch_terms=switch, cal_id=cal_id)
            ok, message = True, f"{method.upper()} solved from {len(measured)} standards"
        except Exception as exc:  # a singular or inconsistent set of standards
            calset, ok, message = None, False, f"{method.upper()} could not be solved: {exc}"
        refs = self.store.save_calset(calset, cal_dir) if calset is not None else []
        if calset is not None:
            self._calsets[cal_id] = calset
        kit_text, kit_sha = self.view.kit_text()
        e = self._append(ev.CalComputed(
            cal_id=cal_id, method=method, standards=names, file=refs[0] if refs else None, files=refs,
            ok=ok, message=message, summary=calset.summary() if calset is not None else None,
            kit_name=kit.name or None, kit_text=kit_text, kit_sha256=kit_sha))
        outcome = CalOutcome(cal_id, method, ok, message, calset, [], None,
                             Verdict.PASS if ok else Verdict.FAIL, e.seq, refs[0].path if refs else None)
        if calset is None:  # not solved (ok is False)
            return outcome
        outcome.verification = self._verification(calset, kit)
        outcome.agreement = self._agreement(method, calset, measured, kit, cal_dir, switch)
        worst = [o.verdict for o in outcome.verification]
        if outcome.agreement:
            worst.append(Verdict(outcome.agreement["verdict"]))
        # standards that failed contact make a cal that cannot be right, however it solved
        worst.extend(rec.verdict for rec in self.state.standards.values())
        outcome.verdict = max(worst, key=lambda v: v.rank, default=Verdict.PASS)
        outcome.seq = self._last_seq()
        return outcome

    def cal_refusal(self, outcome: CalOutcome | None) -> str | None:
        """Why ``outcome`` may not be accepted (one line), or None: it did not
        solve, a standard failed contact, a verification or the agreement failed."""
        bad = [f"standard {role} ({rec.site}) failed contact" for role, rec in self.state.standards.items()
               if rec.verdict is Verdict.FAIL]
        if outcome is None or not outcome.ok or outcome.calset is None:
            bad.append("it did not solve")
            return f"calibration {self._cal_id()} cannot be accepted: {'; '.join(bad)}; redo it"
        for o in outcome.verification:
            failed = [c.name for c in o.checks if c.verdict is Verdict.FAIL]
            if failed:
                bad.append(f"verification on {o.step.site} failed ({', '.join(failed)})")
        rec = self.state.pending  # after a resume the outcome carries no verification: the record does
        if not outcome.verification and rec is not None and rec.cal_id == outcome.cal_id \
                and Verdict.FAIL in rec.verdicts:
            bad.append("its verification or agreement failed (on record)")
        if outcome.agreement and outcome.agreement.get("verdict") == Verdict.FAIL.value:
            bad.append(f"{outcome.agreement.get('other_method')} disagrees by {outcome.agreement.get('worst'):.3g}")
        if not bad:
            return None
        return f"calibration {outcome.cal_id} cannot be accepted: {'; '.join(bad)}; redo it"

    def _verification(self, calset: CalSet, kit: CalKit) -> list[LandingOutcome]:
        """Measure every verification site, then judge: the kit's open stub and
        thru with calibration.verify, any other site with its kind's checks."""
        from probelog import calibration as cal

        die = self.view.cal_die()
        cal_id = self._cal_id()
        sites = self.view.verify_sites()
        measured: list[tuple[Step, skrf.Network, skrf.Network, dict[str, ev.FileRef]]] = []
        counts: dict[str, int] = {}
        for site_name in sites:
            site = self.view.site(site_name)
            landing = counts.get(site_name, self.state.landing_count(die, site_name)) + 1
            counts[site_name] = landing
            step = Step(StepKind.VERIFY, die, site_name, site.kind, landing, len(measured), len(sites))
            raw = self._land(die, site_name)
            cor = calset.apply(raw)
            # own folder: a re-landed standard on the same site is {site}-L{n} too
            files = self.store.write_pair(f"data/cal/{cal_id}/verify/{site_name}-L{landing}", raw, cor,
                                          self._header(step, "raw"))
            measured.append((step, raw, cor, files))
        stub_site = kit.verification.get("open_stub_site")
        thru_site = kit.site_of("thru")
        by_site = {m[0].site: m[2] for m in measured}
        ver_checks: list[CheckResult] = []
        if stub_site in by_site:
            ver_checks = list(cal.verify(by_site[stub_site], by_site.get(thru_site) if thru_site else None, kit))
        outs = []
        for step, raw, cor, files in measured:
            if step.site == stub_site:
                checks = [c for c in ver_checks if c.name.startswith("ver-stub")]
            elif step.site == thru_site and stub_site in by_site:
                checks = [c for c in ver_checks if c.name.startswith("ver-thru")]
            else:
                checks = self._checks(cor, self.view.site(step.site))
            verdict = overall(checks)
            e = self._append(ev.CalVerification(
                cal_id=cal_id, site=step.site, die=die, landing=step.landing, raw=files["raw"],
                corrected=files["corrected"], checks=[ev.Check.of(c) for c in checks], verdict=verdict,
                touchdowns=dict(self._touchdowns)))
            out = LandingOutcome(step, raw, cor, checks, verdict, None, e.seq,
                                 {k: v.path for k, v in files.items()})
            self._emit(StepMeasured(seq=e.seq, outcome=out))
            outs.append(out)
        return outs

    def _agreement(self, method: str, calset: CalSet, measured: dict[str, skrf.Network], kit: CalKit,
                   cal_dir: str, switch: tuple[skrf.Network, ...] | None) -> dict[str, Any] | None:
        from probelog import calibration as cal

        others = cal.comparable_methods(method, list(measured), kit)
        if not others:
            return None
        wanted = self.view.cal().compare_with
        other_method = wanted if wanted in others else others[0]
        cal_id = self._cal_id()
        try:
            other = cal.solve(other_method, measured, kit, switch_terms=switch, cal_id=f"{cal_id}-{other_method}")
            result = cal.agreement(calset, other, list(measured.values()))
        except Exception:  # the second algorithm is a cross-check, not a requirement
            return None
        ref = self.store.write_bytes(f"{cal_dir}/agreement-{method}-{other_method}", ".csv", agreement_csv(result))
        data = ev.CalAgreement(cal_id=cal_id, method=method, other_method=other_method,
                               worst=float(result.worst), at_hz=float(result.at_hz), file=ref,
                               verdict=agreement_verdict(float(result.worst)))
        self._append(data)
        out: dict[str, Any] = ev.encode(data)
        out["verdict"] = data.verdict.value
        out["file"] = {"path": ref.path, "sha256": ref.sha256}
        return out

    def _active_calset(self) -> CalSet | None:
        """The accepted cal set (read back once after a resume, hash-checked), or None."""
        rec = self.state.active
        if rec is None or not rec.ok:
            return None
        got = self._calsets.get(rec.cal_id)
        if got is None:
            got = self._calsets[rec.cal_id] = self._calset_of(rec)
        return got

    def _calset_of(self, rec: CalRec) -> CalSet:
        """The saved cal set of a CalRec, every file hash-checked."""
        files = rec.files or ((rec.file,) if rec.file else ())
        return self.store.calset(files, f"cal set of {rec.cal_id}")

    def _outcome_of(self, rec: CalRec, calset: CalSet | None) -> CalOutcome:
        agreement = None
        if rec.agreement is not None:
            agreement = ev.encode(rec.agreement)
            agreement["verdict"] = rec.agreement.verdict.value
        return CalOutcome(rec.cal_id, rec.method, rec.ok, rec.message, calset, [], agreement,
                          rec.verdict, rec.seq, rec.file.path if rec.file else None)
