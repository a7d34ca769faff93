"""Touchstone v1.1 bytes from a skrf.Network, with a self-describing header.

Each data file starts with comment lines ``! probelog <key>=<value>`` (session
id, journal seq, die, site, landing, cal set id, instrument settings...), so a
file copied away from its session still says where it came from.

The writer is scikit-rf's own (``Network.write_touchstone(return_string=True)``):
it takes our comments through ``Network.comments`` and formats numbers with
``'{}'`` (Python's shortest round-tripping repr), so a file read back with skrf
gives the same float64 values.
"""

from __future__ import annotations

import json
import re
from typing import Any, Mapping

import skrf

_TOKEN = re.compile(r"^[A-Za-z0-9_.,:;/+@#()<>*~^|$%&?-]+$")  # ASCII; no quotes, =, !, [ or {
_LINE = re.compile(r"^!\s*probelog\s+([A-Za-z0-9_.-]+)=(.*)$")


def _value_text(value: Any) -> str:
    """A header value on one line: bare when it is a plain token, else JSON."""
    if isinstance(value, str) and _TOKEN.match(value):
        return value
    if isinstance(value, tuple):
        value = list(value)
    return json.dumps(value, separators=(",", ":"), ensure_ascii=True, default=str)


def network_to_touchstone(ntwk: skrf.Network, header: Mapping[str, Any]) -> bytes:
    """Touchstone v1.1 text (ASCII bytes) of ``ntwk``: frequency in Hz, S in
    real/imaginary, reference ``R 50`` (the network's port impedance must be a
    real, equal, frequency-independent value; v1.1 has one R for all ports).

    ``header`` keys must be words ([A-Za-z0-9_.-]); values are written bare or
    as compact JSON. The network's own comments follow the header.
    """
    z0 = ntwk.z0
    if z0.size and not (abs(z0.imag).max() == 0 and (z0.real == z0.real.flat[0]).all()):
        raise ValueError("Touchstone v1.1 needs one real reference impedance for every port and frequency")
    lines = []
    for key, value in header.items():
        if not re.fullmatch(r"[A-Za-z0-9_.-]+", str(key)):
            raise ValueError(f"header key {key!r}: expected letters, digits, '_', '.' or '-'")
        lines.append(f" probelog {key}={_value_text(value)}")
    if ntwk.comments:
        lines.extend(" " + c for c in ntwk.comments.rstrip("\n").split("\n"))
    out = ntwk.copy()
    out.frequency.unit = "hz"
    out.comments = "\n".join(lines)
    out.name = out.name or "probelog"
    text = out.write_touchstone(return_string=True, skrf_comment=False, form="ri", version="1.0",
                                r_ref=float(z0.real.flat[0]) if z0.size else 50.0)
    return text.encode("ascii", "replace")  # Touchstone is ASCII; header values are escaped


def read_header(data: bytes | str) -> dict[str, str]:
    """The ``! probelog key=value`` comments of a file, values as written
    (JSON values still encoded)."""
    text = data.decode("ascii", "replace") if isinstance(data, bytes) else data
    out: dict[str, str] = {}
    for line in text.splitlines():
        if not line.startswith("!"):
            if line.strip():
                break  # header comments come before the option line
            continue
        m = _LINE.match(line)
        if m:
            out[m.group(1)] = m.group(2)
    return out
