"""A site's golden Touchstone file: what a good landing of that site looks like.

The plan names it per site (``golden_file``, relative to the plan file, like the
kit); it is read once, when the plan is loaded, so a missing, unreadable or
wrong file stops the plan before any session folder exists, and its SHA-256 is
journaled with ``session-opened`` so a resume can refuse a file that changed.
The data is held as arrays (frequencies in Hz, S linear complex, reference
impedance in ohm); :mod:`probelog.checks.golden` compares each corrected landing
with it.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

# Tolerances a golden comparison starts from; a plan overrides them per site.
# |S| within +-0.5 dB and phase within +-5 degrees of the golden die is the usual
# die-to-die correlation window for passive on-wafer devices up to the mm-wave
# bands (common practice, no source); the simulated bench's die-to-die spread of
# its two devices (true S over the 9 demo dies, 1-110 GHz, seeds 1 and 2) is
# 0.23 dB and 0.9 degrees at most.
TOL_DB = 0.5
TOL_DEG = 5.0
# Where |S| of the golden and of the landing are both below this, dB and phase
# say little: magnitudes are clamped to it and phase is not judged. At -15 dB
# (|S| 0.18) the 0.5 dB tolerance is a change of 0.01 in |S|, the landing
# repeatability |dS11| of 0.005-0.01 (REFERENCES.md trade numbers); a lower floor
# would fail a small reflection on landing noise alone (common practice, no source).
FLOOR_DB = -15.0


class GoldenFileError(ValueError):
    """A golden file that cannot be used; the message is one line naming the file."""


@dataclass(frozen=True)
class GoldenData:
    """A golden file as read: ``f_hz`` (n,) in Hz, strictly increasing; ``s``
    (n, 2, 2) linear complex; ``z0_ohm`` its reference impedance (real, ohm);
    ``sha256`` of the file's bytes (hex)."""

    path: Path
    sha256: str
    f_hz: np.ndarray
    s: np.ndarray
    z0_ohm: float


def read_golden(path: Path) -> GoldenData:
    """Read, hash and validate a golden Touchstone file: a regular, readable
    2-port file that :func:`probelog.touchstone_input.load_touchstone` accepts,
    with one real reference impedance. GoldenFileError naming the file otherwise."""
    from probelog.touchstone_input import TouchstoneInputError, load_touchstone

    try:
        ntwk = load_touchstone(path)
        data = path.read_bytes()  # after load_touchstone: it refuses FIFOs and huge files first
    except TouchstoneInputError as exc:
        raise GoldenFileError(str(exc)) from None
    except OSError as exc:
        raise GoldenFileError(f"{path}: cannot read ({exc.strerror})") from None
    if ntwk.nports != 2:
        raise GoldenFileError(f"{path}: a golden file must be a 2-port, this one has {ntwk.nports} port(s)")
    z0 = np.asarray(ntwk.z0)
    if not np.allclose(z0, z0.flat[0]) or abs(z0.flat[0].imag) > 0:
        raise GoldenFileError(f"{path}: reference impedance varies or is complex; expected one real value in ohm")
    f = np.array(ntwk.f, dtype=float)
    s = np.array(ntwk.s, dtype=complex)
    f.setflags(write=False)
    s.setflags(write=False)
    return GoldenData(path, hashlib.sha256(data).hexdigest(), f, s, float(z0.flat[0].real))


def site_hashes(sites: Iterable[Any]) -> dict[str, str]:
    """{site name: SHA-256 of its golden file} of the sites that name one
    (``session-opened`` journals it)."""
    return {s.name: s.golden.sha256 for s in sites if getattr(s, "golden", None) is not None}


def resume_problem(sites: Iterable[Any], journaled: Mapping[str, str]) -> str | None:
    """Why a resume must refuse: a golden file whose SHA-256 (read when the plan
    was reloaded) differs from the one journaled when the session opened, or has
    none journaled; None when every golden file is the one the session used."""
    for s in sites:
        gd = getattr(s, "golden", None)
        if gd is None:
            continue
        then = journaled.get(s.name)
        if then is None:
            return f"{gd.file}: golden file of site {s.name} has no SHA-256 in the journal; cannot trust it on resume"
        if then != gd.sha256:
            return (f"{gd.file}: golden file of site {s.name} changed since the session opened "
                    f"(SHA-256 {then[:12]}... then, {gd.sha256[:12]}... now); restore it or start a new session")
    return None
