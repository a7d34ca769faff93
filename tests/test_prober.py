"""Prober drivers: the contact interlock, touchdown counts, manual prompts, SCPI.

The safety rule under test is the design's (DESIGN.md, Safety): never move the
prober in XY while in contact. Common practice, no source: probes dragged across
a wafer while down destroy tips and pads.
"""

from __future__ import annotations

import pytest
from hypothesis import settings, strategies as st
from hypothesis.stateful import RuleBasedStateMachine, invariant, precondition, rule

from probelog.drivers.dialect import load_dialect
from probelog.drivers.errors import DriverError, InterlockError, InstrumentError, OperatorDeclined, ReplyError
from probelog.drivers.prober import ManualProber, ScpiProber
from probelog.drivers.blocks import parse_error_reply
from probelog.bench import Prober

PROBES = ("P1-GSG100", "P2-GSG100")
DIALECT = load_dialect("generic-prober", "prober")


class StageFault(Exception):
    """The fake stage's injected failure (stands in for a transport error)."""


class FakeStage:
    """An in-memory chuck: XY position, Z state, and a record of any crash."""

    def __init__(self):
        self.down = False
        self.xy = ((0, 0), (0.0, 0.0))
        self.crashes = 0  # XY moves executed while down
        self.touchdowns = 0  # physical lowerings
        self.fail_next = None  # None, "before" (rejects) or "after" (acts, then fails)

    def act(self, action: str, arg=None):
        fault, self.fail_next = self.fail_next, None
        if fault == "before":
            raise StageFault(action)
        if action == "move":
            if self.down:
                self.crashes += 1
            self.xy = arg
        elif action == "contact":
            if not self.down:
                self.touchdowns += 1
            self.down = True
        elif action == "separate":
            self.down = False
        if fault == "after":
            raise StageFault(action)


class FakeLink:
    """Speaks the generic prober dialect to a FakeStage, like a Link to a real prober."""

    def __init__(self, stage: FakeStage):
        self.stage = stage
        self.sent: list[str] = []
        self.errors: list[str] = []

    def write(self, cmd: str) -> None:
        self.sent.append(cmd)
        if cmd.startswith("STAGe:MOVE "):
            c, r, x, y = cmd.split(" ", 1)[1].split(",")
            self.stage.act("move", ((int(c), int(r)), (float(x), float(y))))
        elif cmd == DIALECT.commands["contact"]:
            self.stage.act("contact")
        elif cmd == DIALECT.commands["separate"]:
            self.stage.act("separate")
        else:
            self.errors.append(f'-113,"Undefined header; {cmd}"')

    def query(self, cmd: str, timeout_ms=None) -> str:
        self.sent.append(cmd)
        if cmd == "*IDN?":
            return "QF-Labs,FakeProber,SN7,0.1"
        if cmd == "*OPC?":
            return "1"
        if cmd == "STAGe:Z?":
            return "CONT" if self.stage.down else "SEP"
        if cmd == "STAGe:POSition?":
            (c, r), (x, y) = self.stage.xy
            return f"{c},{r},{x:.3f},{y:.3f}"
        if cmd == "SYSTem:ERRor:NEXT?":
            return self.errors.pop(0) if self.errors else '0,"No error"'
        return "garbage"

    def command(self, cmd: str) -> None:
        self.write(cmd)
        self.check_errors(cmd)

    def check_errors(self, after: str) -> None:
        errs = [parse_error_reply(e) for e in self.errors]
        self.errors.clear()
        if errs:
            raise InstrumentError(f"after {after!r}: {errs}", errors=errs, command=after)

    def reopen(self) -> None:
        pass

    def close(self) -> None:
        pass


class Operator:
    """Obeys the manual prober's prompts on the fake stage, or declines."""

    def __init__(self, stage: FakeStage):
        self.stage = stage
        self.prompts: list[str] = []
        self.decline_next = False

    def __call__(self, prompt: str) -> bool:
        self.prompts.append(prompt)
        if self.decline_next:
            self.decline_next = False
            return False
        if prompt.startswith("Move"):
            self.stage.act("move", "as prompted")
        elif prompt.startswith("Lower"):
            self.stage.act("contact")
        elif prompt.startswith("Raise"):
            self.stage.act("separate")
        return True


dies = st.tuples(st.integers(0, 8), st.integers(0, 8))
offsets = st.tuples(st.floats(0, 4000, allow_nan=False), st.floats(0, 4000, allow_nan=False))


class InterlockMachine(RuleBasedStateMachine):
    """Random command sequences, with injected faults, against both driver kinds."""

    def __init__(self):
        super().__init__()
        self.stage = FakeStage()
        self.kind = None
        self.prober = None
        self.fault_contacts = 0

    @precondition(lambda self: self.prober is None)
    @rule(kind=st.sampled_from(["scpi", "manual"]))
    def build(self, kind):
        self.kind = kind
        if kind == "scpi":
            self.prober = ScpiProber(None, PROBES, link=FakeLink(self.stage))
        else:
            self.operator = Operator(self.stage)
            self.prober = ManualProber(self.operator, PROBES)

    @precondition(lambda self: self.prober is not None)
    @rule(die=dies, offset=offsets)
    def move(self, die, offset):
        believed_down = self.prober.in_contact
        try:
            self.prober.move_to(die, offset)
        except InterlockError:
            assert believed_down or self.stage.down
            return
        except (StageFault, OperatorDeclined):
            return
        assert not believed_down
        assert self.prober.position == ((die[0], die[1]), (float(offset[0]), float(offset[1])))

    @precondition(lambda self: self.prober is not None)
    @rule()
    def contact(self):
        was_down = self.prober.in_contact
        try:
            self.prober.contact()
        except (StageFault, OperatorDeclined):
            self.fault_contacts += not was_down
        assert self.prober.in_contact

    @precondition(lambda self: self.prober is not None)
    @rule()
    def separate(self):
        try:
            self.prober.separate()
        except (StageFault, OperatorDeclined, DriverError):
            return
        assert not self.prober.in_contact

    @precondition(lambda self: self.prober is not None)
    @rule(when=st.sampled_from(["before", "after"]))
    def inject_fault(self, when):
        if self.kind == "scpi":
            self.stage.fail_next = when
        elif when == "before":
            self.operator.decline_next = True

    @precondition(lambda self: self.kind == "scpi")
    @rule()
    def someone_lowers_the_stage_by_hand(self):
        # Behind the driver's back (front-panel button): the SCPI driver must still refuse.
        self.stage.down = True

    @invariant()
    def never_moved_while_down(self):
        assert self.stage.crashes == 0

    @invariant()
    def driver_never_believes_separated_while_down(self):
        if self.prober is not None and self.kind == "manual":
            assert self.prober.in_contact or not self.stage.down

    @invariant()
    def touchdowns_counted_per_probe(self):
        if self.prober is None:
            return
        counts = self.prober.touchdowns
        assert set(counts) == set(PROBES) and len(set(counts.values())) == 1
        n = counts[PROBES[0]]
        # Hand-lowering is not a commanded touchdown; faults may add counted attempts.
        if self.kind == "manual":
            assert self.stage.touchdowns <= n <= self.stage.touchdowns + self.fault_contacts


InterlockMachine.TestCase.settings = settings(max_examples=150, stateful_step_count=30, deadline=None)
TestInterlock = InterlockMachine.TestCase


# --------------------------------------------------------------------------- examples


def test_scpi_prober_sequence_and_protocol():
    stage = FakeStage()
    link = FakeLink(stage)
    p = ScpiProber(None, PROBES, link=link)
    assert isinstance(p, Prober)
    p.move_to((3, 4), (200.0, 600.0))
    assert "STAGe:MOVE 3,4,200.000,600.000" in link.sent
    p.contact()
    p.contact()  # already down: no second touchdown, no second command
    assert link.sent.count("STAGe:Z:CONTact") == 1
    assert p.touchdowns == {"P1-GSG100": 1, "P2-GSG100": 1}
    with pytest.raises(InterlockError, match="in contact; separate first"):
        p.move_to((3, 5), (200.0, 600.0))
    assert stage.xy == ((3, 4), (200.0, 600.0))
    p.separate()
    p.move_to((3, 5), (700.0, 200.0))
    assert p.read_position() == ((3, 5), (700.0, 200.0))


def test_scpi_prober_starts_locked_when_stage_is_down():
    stage = FakeStage()
    stage.down = True
    p = ScpiProber(None, PROBES, link=FakeLink(stage))
    assert p.in_contact
    with pytest.raises(InterlockError):
        p.move_to((0, 0), (0.0, 0.0))


def test_scpi_prober_quotes_instrument_errors_and_bad_replies():
    stage = FakeStage()
    link = FakeLink(stage)
    p = ScpiProber(None, PROBES, link=link)
    link.errors.append('-222,"Data out of range; die (40,40) is off the wafer"')
    with pytest.raises(InstrumentError, match="off the wafer"):
        p.move_to((40, 40), (0.0, 0.0))
    link.query = lambda cmd, timeout_ms=None: "HALF"
    with pytest.raises(ReplyError, match="'HALF'"):
        p.move_to((1, 1), (0.0, 0.0))


def test_manual_prober_prompts_and_records():
    prompts = []

    def confirm(text):
        prompts.append(text)
        return True

    p = ManualProber(confirm, PROBES)
    p.move_to((2, 7), (1700.0, 200.0))
    p.contact()
    p.separate()
    assert prompts[0] == "Move to die (2, 7), site at x = 1700.0 um, y = 200.0 um, at separation height. Done?"
    assert [h[1] for h in p.history] == ["move", "contact", "separate"]
    assert p.touchdowns["P2-GSG100"] == 1


def test_manual_prober_declined_separation_keeps_the_lock():
    answers = iter([True, False])
    p = ManualProber(lambda _: next(answers), PROBES)
    p.contact()
    with pytest.raises(OperatorDeclined, match="Raise the probes"):
        p.separate()
    with pytest.raises(InterlockError):
        p.move_to((0, 0), (0.0, 0.0))


def test_probe_ids_must_be_distinct():
    with pytest.raises(ValueError, match="distinct"):
        ManualProber(lambda _: True, ["P1", "P1"])
