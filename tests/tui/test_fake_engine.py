"""The UI's test double must offer what the UI may ask of an engine
(probelog.engine.protocol.EngineProtocol, which mypy checks against the real
Engine): same members, same parameter names, kinds and defaults. Then the UI
tests cannot pass against a double the real engine does not match."""

from __future__ import annotations

import inspect

from probelog.engine.protocol import EngineProtocol
from tests.tui.fake_engine import FakeEngine


def members(cls) -> dict[str, object]:
    return {name: value for name, value in vars(cls).items() if not name.startswith("_")}


def shape(fn) -> list[tuple[str, object, object]]:
    return [(p.name, p.kind, p.default) for p in inspect.signature(fn).parameters.values()]


def test_the_fake_engine_has_every_member_of_the_protocol_with_the_same_signature():
    wanted = members(EngineProtocol)
    assert "accept" in wanted and "skip_die" in wanted  # the protocol is what we think it is
    for name, member in wanted.items():
        assert hasattr(FakeEngine, name), f"FakeEngine lacks {name}"
        mine = getattr(FakeEngine, name)
        if isinstance(member, property):
            assert isinstance(mine, property), f"FakeEngine.{name} should be a property"
        elif callable(member):
            assert shape(mine) == shape(member), f"FakeEngine.{name}{inspect.signature(mine)} " \
                                                 f"!= protocol {inspect.signature(member)}"


def test_the_check_fails_for_a_double_that_drifted():
    class Drifted(FakeEngine):
        def accept(self) -> None:  # type: ignore[override]  # the reason parameter lost
            super().accept()

    assert shape(Drifted.accept) != shape(EngineProtocol.accept)
