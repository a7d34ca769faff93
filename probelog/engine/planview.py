"""What the engine reads from a plan: sites, the cal method and kit, the walk's
sequence, the drift reference, limits. Checked once, up front (:func:`validate`),
so a bad plan is refused before any session folder exists.
"""

from __future__ import annotations

import dataclasses
import hashlib
from pathlib import Path
from typing import TYPE_CHECKING, Any

from probelog.bench import Die
from probelog.engine.sequence import SiteSequence
from probelog.engine.types import EngineError
from probelog.plan_types import CalibrationPlan, Plan, Site

if TYPE_CHECKING:  # types only: the kit and the checks are imported where they are used
    from probelog.calkit import CalKit
    from probelog.checks import Limits


class PlanView:
    """Read-only questions about one loaded plan."""

    def __init__(self, plan: Plan, journaled_kit: str | None = None) -> None:
        self.plan = plan
        self.journaled_kit = journaled_kit  # the kit text a resumed session journaled with its cal
        self._kit: CalKit | None = None
        self._required: list[tuple[str, str]] | None = None
        self._limits: Limits | None = None
        # computed on demand: a 1000 x 1000 grid is never a list of its million dies
        self.sequence = SiteSequence(plan)

    @property
    def name(self) -> str:
        return self.plan.name

    def site(self, name: str) -> Site:
        try:
            return self.plan.site(name)
        except KeyError:
            raise EngineError(f"plan {self.name!r}: no site named {name!r}") from None

    def cal(self) -> CalibrationPlan:
        return self.plan.calibration

    def has_cal(self) -> bool:
        return self.cal().method.lower() not in ("", "none")

    def cal_method(self) -> str:
        return self.cal().method.lower()

    def kit_source(self) -> str:
        plan_cal = self.cal()
        return str(plan_cal.kit_path) if plan_cal.kit_path else f"{self.plan.source}: calibration.kit"

    def kit(self) -> CalKit:
        from probelog import calibration as cal

        if self._kit is None:
            try:
                self._kit = cal.kit_from_mapping(self._kit_mapping(), self.kit_source())
            except (OSError, ValueError, KeyError, TypeError) as exc:
                raise EngineError(f"plan {self.name!r}: cal kit {self.kit_source()}: {exc}") from None
        return self._kit

    def _kit_mapping(self) -> dict[str, Any]:
        """The kit file, or on a resume where it cannot be read any more (the
        session moved, the plan was given by a relative path) the text journaled
        with the last cal (the kit the session was calibrated with)."""
        import tomllib

        try:
            return self.cal().load_kit()
        except ValueError:
            if self.journaled_kit is None:
                raise
            return tomllib.loads(self.journaled_kit)

    def kit_text(self) -> tuple[str | None, str | None]:
        """The kit file's text and its SHA-256 (None, None for a kit written inline in the plan)."""
        path = self.cal().kit_path
        if not path:
            return None, None
        data = Path(path).read_bytes()
        return data.decode("utf-8", "replace"), hashlib.sha256(data).hexdigest()

    def required(self) -> list[tuple[str, str]]:
        """(standard name, site name) pairs of the plan's cal method."""
        if not self.has_cal():
            return []
        if self._required is None:
            from probelog import calibration as cal

            self._required = cal.required_sites(self.cal_method(), self.kit())
        return self._required

    def cal_die(self) -> Die:
        return self.cal().die

    def drift_die(self) -> Die:
        die = self.plan.sequence.drift_die
        return die if die is not None else self.cal_die()

    def verify_sites(self) -> list[str]:
        return list(self.cal().verification)

    def drift_site(self) -> str | None:
        return self.plan.sequence.drift_site if self.has_cal() else None

    def drift_every(self) -> int:
        return self.plan.sequence.drift_every_landings

    def limits(self) -> Limits:
        if self._limits is None:
            from probelog.checks import Limits

            try:
                self._limits = Limits.from_mapping(self.plan.limits, f"{self.plan.source}: [limits]")
            except ValueError as exc:
                raise EngineError(str(exc)) from None
        return self._limits

    def probe_ids(self) -> list[str]:
        return list(self.plan.probes.ids)

    def die_start(self, die: Die) -> int:
        """Index of the die's first site in the sequence; EngineError if not planned."""
        i = self.sequence.die_start(die)
        if i is not None:
            return i
        raise EngineError(f"plan {self.name!r}: die {die[0]},{die[1]} is not in the plan's die list")


def validate(plan: Plan, journaled_kit: str | None = None, resuming: bool = False) -> PlanView:
    """Everything a session will need from the plan, checked now: power limit,
    kit file (exists, parses, holds the standards the method needs), limit names.
    EngineError with one line naming the file and field; nothing is created.
    ``journaled_kit``: on resume, the kit text the session journaled (used when
    the file cannot be read any more). A resumed session of a journal older than
    kit texts, whose kit file is gone, opens and fails only when it calibrates."""
    view = PlanView(plan, journaled_kit)
    power = plan.vna.power_dbm
    if power > plan.power_limit_dbm:
        raise EngineError(f"plan {view.name!r}: source power {power:g} dBm is above the plan's "
                          f"limit of {plan.power_limit_dbm:g} dBm; refusing to start")
    view.limits()
    if view.has_cal():
        try:
            view.required()
        except EngineError:
            if resuming and journaled_kit is None:
                return view
            raise
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise EngineError(f"plan {view.name!r}: cal kit {view.kit_source()}: {exc}") from None
        for _, site in view.required():
            view.site(site)
        for site in view.verify_sites():
            view.site(site)
    return view


def expectation(site: Site) -> dict[str, Any]:
    """The plan's expectations of a site as the mapping run_checks reads."""
    return {k: v for k, v in dataclasses.asdict(site).items() if v is not None}


def plan_from_opened(plan_text: str, plan_file: str, session_dir: Path) -> Plan:
    from probelog.plan import load_plan_text

    if not plan_text:
        raise EngineError(f"{session_dir}: session-opened carries no plan text; cannot resume")
    source = plan_file or f"{session_dir}/journal.jsonl"
    # A relative kit path resolves against the plan's folder, as when it was loaded.
    if source.endswith("(built-in)"):
        from importlib import resources

        base = Path(str(resources.files("probelog") / "plans"))
    else:
        base = Path(source).resolve().parent if Path(source).is_file() else session_dir
    return load_plan_text(plan_text, source, base_dir=base)
