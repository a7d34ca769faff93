"""UI tests answer dialogs at once: the 300 ms key guard (tui.screens.dialogs.GUARD_S)
is off here, except in the test that checks the guard itself."""

import pytest

import probelog.tui.screens.dialogs as dialogs


@pytest.fixture(autouse=True)
def no_key_guard(monkeypatch):
    monkeypatch.setattr(dialogs, "GUARD_S", 0.0)
