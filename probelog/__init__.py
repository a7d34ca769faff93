"""probelog: the measurement core (plans, checks, line metrics, calibration,
journal, session engine, export). No UI and no instrument I/O live here."""

from __future__ import annotations

from typing import TYPE_CHECKING, Callable

if TYPE_CHECKING:  # only for the annotation: importing opening here would load scikit-rf
    from pathlib import Path

    from probelog.opening import SessionData

__version__ = "0.1.0"


def __getattr__(name: str) -> Callable[[str | Path], SessionData]:
    # Lazy so `import probelog` stays light (no scikit-rf until an analyst asks).
    if name == "open_session":
        from probelog.opening import open_session

        return open_session
    raise AttributeError(f"module 'probelog' has no attribute {name!r}")
