"""Touchstone v1.1 bytes from a skrf.Network, with a self-describing header.

Each data file starts with comment lines ``! probelog <key>=<value>`` (session
id, journal seq, die, site, landing, cal set id, instrument settings...), so a
file copied away from its session still says where it came from.

Numbers are formatted with numpy (see :func:`network_to_touchstone` for why);
files are read back with scikit-rf's reader in the tests.
"""

from __future__ import annotations

import json
import re
from typing import Any, Mapping

import numpy as np
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

    Numbers are formatted by :func:`_format_rows`, vectorised with numpy: Python's
    float formatting (scikit-rf's writer, ``%`` or ``repr``) costs ~0.5 us a
    number, 50-80 ms for a 10,001-point 2-port, which is most of a landing's
    overhead. S values keep 15 significant digits (relative error < 1e-14, far
    below any VNA's); integral frequencies are written exactly. Data outside
    :func:`_fast_range` fall back to scikit-rf's writer.
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
    r_ref = float(z0.real.flat[0]) if z0.size else 50.0
    f, s = ntwk.f, ntwk.s
    mag = np.abs(s)
    if not (np.isfinite(f).all() and _fast_range(mag)) or ntwk.nports > 2:
        return _skrf_text(ntwk, lines, r_ref)
    # v1.1 order: f, then S11 S21 S12 S22 (column-major walk of each matrix)
    cols = s.transpose(0, 2, 1).reshape(len(f), -1)
    values = np.empty((len(f), 2 * cols.shape[1]))
    values[:, 0::2], values[:, 1::2] = cols.real, cols.imag
    head = "".join(f"!{line}\n" for line in lines)
    head += f"# Hz S RI R {r_ref:g}\n"
    return head.encode("ascii", "replace") + _format_rows(f, values)


def _fast_range(mag: np.ndarray) -> bool:
    """True when every |value| is 0 or within 1e-300..1e300: the range where the
    vectorised formatter's decade scaling is exact to 15 digits (S-parameters
    always are; NaN, inf and subnormals go to scikit-rf's writer)."""
    return bool(np.all((mag == 0) | ((mag > 1e-300) & (mag < 1e300))))


def _skrf_text(ntwk: skrf.Network, lines: list[str], r_ref: float) -> bytes:
    out = ntwk.copy()
    out.frequency.unit = "hz"
    out.comments = "\n".join(lines)
    out.name = out.name or "probelog"
    text: str = out.write_touchstone(return_string=True, skrf_comment=False, form="ri", version="1.0", r_ref=r_ref)
    return text.encode("ascii", "replace")  # Touchstone is ASCII; header values are escaped


# ASCII of 0000..9999: digits are looked up four at a time
_QUADS = np.array([list(f"{i:04d}".encode()) for i in range(10_000)], np.uint8)


def _digits(v: np.ndarray, count: int) -> np.ndarray:
    """Decimal digits (uint8 ASCII) of non-negative int64 ``v``, ``count`` wide, shape (*v.shape, count)."""
    groups = -(-count // 4)
    powers = 10_000 ** np.arange(groups - 1, -1, -1, dtype=np.int64)
    quads = _QUADS[(v[..., None] // powers) % 10_000]  # (*v.shape, groups, 4)
    return quads.reshape(v.shape + (4 * groups,))[..., 4 * groups - count:]


def _scientific(x: np.ndarray, sig: int) -> np.ndarray:
    """ASCII of finite ``x`` as ``-d.ddd...e+xxx`` with ``sig`` significant digits,
    shape (*x.shape, sig + 7); the sign column is a space for x >= 0."""
    ax = np.abs(x)
    nz = ax > 0
    e = np.zeros(x.shape, np.int64)
    e[nz] = np.floor(np.log10(ax[nz])).astype(np.int64)
    scale = float(10 ** (sig - 1))
    with np.errstate(over="ignore", invalid="ignore"):
        m = np.rint(ax / 10.0 ** e * scale)
        up = m >= 10 * scale  # log10 landed one decade low, or rounding carried
        e[up] += 1
        m[up] = np.rint(ax[up] / 10.0 ** e[up] * scale)
        low = nz & (m < scale)
        e[low] -= 1
        m[low] = np.rint(ax[low] / 10.0 ** e[low] * scale)
    mant = _digits(m.astype(np.int64), sig)
    out = np.empty(x.shape + (sig + 7,), np.uint8)
    out[..., 0] = np.where(x < 0, ord("-"), ord(" "))
    out[..., 1] = mant[..., 0]
    out[..., 2] = ord(".")
    out[..., 3:sig + 2] = mant[..., 1:]
    out[..., sig + 2] = ord("e")
    out[..., sig + 3] = np.where(e < 0, ord("-"), ord("+"))
    out[..., sig + 4:] = _digits(np.abs(e), 3)
    return out


def _format_rows(f: np.ndarray, values: np.ndarray) -> bytes:
    """One line a frequency: f (Hz) then ``values`` (n, k), space separated."""
    n = len(f)
    if np.all(f == np.rint(f)) and f.max() < 1e17:
        width = max(1, len(str(int(f.max()))))
        fcol = _digits(np.rint(f).astype(np.int64), width)
    else:  # non-integral Hz: exact shortest repr, n calls only
        fcol = np.array([list(repr(float(v)).rjust(24).encode()) for v in f], np.uint8)
    num = _scientific(values, 15)  # (n, k, 22)
    row = np.concatenate([fcol, np.full((n, 1), ord(" "), np.uint8),
                          np.concatenate([num, np.full(num.shape[:2] + (1,), ord(" "), np.uint8)], axis=2)
                          .reshape(n, -1)], axis=1)
    row[:, -1] = ord("\n")
    return row.tobytes()


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
