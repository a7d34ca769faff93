"""Every driver (and the engine tests' fakes) has every member of the protocols
the engine talks to (probelog.bench.Vna / Prober), with the protocol's parameter
names: the engine calls them directly, never through getattr. mypy checks the
same for drivers/ statically (a TYPE_CHECKING assignment in each driver module);
this test also covers the test doubles and fails with the missing names.
"""

from __future__ import annotations

import inspect

import pytest

from probelog.bench import Prober, Vna
from probelog.drivers.folder import FolderVna
from probelog.drivers.prober import ManualProber, ScpiProber
from probelog.drivers.vna import ScpiVna
from tests._engine_fakes import FakeProber, FakeVna

DRIVERS = [(Vna, ScpiVna), (Vna, FolderVna), (Vna, FakeVna),
           (Prober, ScpiProber), (Prober, ManualProber), (Prober, FakeProber)]


def members(protocol: type) -> list[str]:
    """The public members a protocol class declares (methods and properties)."""
    return sorted(n for n in vars(protocol) if not n.startswith("_"))


def gaps(protocol: type, cls: type) -> list[str]:
    """What ``cls`` lacks of ``protocol``: missing names, properties that are not
    properties, methods whose parameter names differ."""
    out = []
    for name in members(protocol):
        want = vars(protocol)[name]
        got = inspect.getattr_static(cls, name, None)
        if got is None:
            out.append(f"{name}: missing")
        elif isinstance(want, property) != isinstance(got, property):
            out.append(f"{name}: {'a property' if isinstance(want, property) else 'a method'} in the protocol")
        elif callable(want):
            w = list(inspect.signature(want).parameters)
            g = list(inspect.signature(got).parameters)
            if w != g:
                out.append(f"{name}: parameters {g}, the protocol has {w}")
    return out


def test_the_vna_protocol_says_what_the_engine_calls():
    # the engine fetches switch terms after a thru / line standard (calstep) and
    # reopens the VNA after a VNA error (core._configure)
    assert {"identify", "configure", "sweep", "precheck_sweep", "switch_terms", "reopen", "close"} == set(members(Vna))
    assert {"identify", "move_to", "contact", "separate", "in_contact", "position", "touchdowns",
            "close"} == set(members(Prober))


@pytest.mark.parametrize(("protocol", "cls"), DRIVERS, ids=lambda x: x.__name__)
def test_every_driver_has_every_member(protocol, cls):
    assert gaps(protocol, cls) == []


def test_a_driver_without_reopen_is_caught(tmp_path):
    """The failing case: a VNA class with one member taken away."""
    no_reopen = type("NoReopen", (), {k: v for k, v in vars(FolderVna).items()
                                      if k not in ("reopen", "__dict__", "__weakref__")})
    assert gaps(Vna, no_reopen) == ["reopen: missing"]
    wrong = type("WrongSweep", (FolderVna,), {"sweep": lambda self, n=2: None})
    assert gaps(Vna, wrong) == ["sweep: parameters ['self', 'n'], the protocol has ['self', 'ports']"]
    # the runtime check the engine's callers may use agrees
    assert isinstance(FolderVna(tmp_path), Vna)
    assert not isinstance(no_reopen.__new__(no_reopen), Vna)


def test_folder_vna_reopen_checks_the_folder_and_has_no_switch_terms(tmp_path):
    folder = tmp_path / "share"
    folder.mkdir()
    v = FolderVna(folder)
    assert v.switch_terms() is None  # a saved file carries no switch terms
    v.reopen()  # the folder is there: nothing to do
    folder.rmdir()  # a network share that dropped
    with pytest.raises(FileNotFoundError, match="share: watched folder does not exist"):
        v.reopen()
