"""Loading a user's Touchstone file with errors a person can act on.

Every problem raises :class:`TouchstoneInputError` with one line that names the
file (and the line, where there is one) and says what is wrong. scikit-rf does
the real parsing; a light pre-scan of Touchstone v1 data finds the line of a
non-number, a NaN or a frequency that does not increase, which scikit-rf would
otherwise report without a line or silently reorder.
"""

from __future__ import annotations

import math
import os
import re
import stat
import warnings
from pathlib import Path

import skrf

from probelog.checks import KINDS, REFLECT_KINDS


class TouchstoneInputError(ValueError):
    """A Touchstone file that cannot be used; the message is one line naming the file."""


_EXT = re.compile(r"\.s(\d+)p$", re.IGNORECASE)

# Largest file read: a 4-port of 100,001 points in RI is ~40 MB of text; common practice, no source
MAX_BYTES = 64 * 1024 * 1024
_V2_COUNT = re.compile(r"^\s*\[number of frequencies\]\s+(\S+)", re.IGNORECASE | re.MULTILINE)


def _one_line(text: object) -> str:
    return " ".join(str(text).split())


def _prescan(path: Path, text: str, nports: int) -> None:
    """Walk the v1 data as a token stream, records of 1 + 2 N^2 numbers."""
    per_record = 1 + 2 * nports * nports
    tokens: list[tuple[str, int]] = []  # (token, line number)
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("!", 1)[0].strip()
        if not line or line.startswith("#"):
            continue
        if line.startswith("["):
            return  # Touchstone v2 keywords: leave the layout to scikit-rf
        words = line.split()
        if nports == 2 and len(words) == 5 and len(tokens) % per_record == 0 and tokens:
            break  # v1 2-port noise parameters follow the network data
        tokens.extend((w, lineno) for w in words)
    if not tokens:
        raise TouchstoneInputError(f"{path}: no data lines")
    values = []
    for word, lineno in tokens:
        try:
            v = float(word)
        except ValueError:
            raise TouchstoneInputError(f"{path}: line {lineno}: '{word}' is not a number") from None
        if math.isnan(v) or math.isinf(v):
            raise TouchstoneInputError(f"{path}: line {lineno}: data value '{word}' is not finite")
        values.append(v)
    if len(values) % per_record:
        last = tokens[-1][1]
        raise TouchstoneInputError(
            f"{path}: line {last}: data ends mid-record ({len(values)} numbers is not a multiple of "
            f"{per_record} for a {nports}-port)"
        )
    for k in range(per_record, len(values), per_record):
        if not values[k] > values[k - per_record]:
            raise TouchstoneInputError(
                f"{path}: line {tokens[k][1]}: frequency {tokens[k][0]} is not above the previous "
                f"{tokens[k - per_record][0]} (frequencies must strictly increase)"
            )


def load_touchstone(path: str | Path) -> skrf.Network:
    """Read and validate a Touchstone file (v1 ``.sNp`` or v2).

    Refuses: a missing or unreadable file, anything but a regular file (a FIFO,
    a device), a file past ``MAX_BYTES``, a UTF-8 byte-order mark, a name without
    an .sNp extension that is not v2, data scikit-rf cannot parse, NaN or infinite
    values, frequencies that are not strictly increasing or not above 0 Hz, a
    reference impedance not above 0 ohm, an empty or one-point sweep, and a v2
    ``[Number of Frequencies]`` that disagrees with the data.
    """
    path = Path(path)
    try:
        st = os.stat(path)  # before opening: reading a FIFO or a device would block or never end
    except FileNotFoundError:
        raise TouchstoneInputError(f"{path}: no such file") from None
    except OSError as exc:
        raise TouchstoneInputError(f"{path}: cannot read ({_one_line(exc.strerror or exc)})") from None
    if stat.S_ISDIR(st.st_mode):
        raise TouchstoneInputError(f"{path}: is a folder, not a Touchstone file")
    if not stat.S_ISREG(st.st_mode):
        raise TouchstoneInputError(f"{path}: not a regular file (a pipe, socket or device), not a Touchstone file")
    if st.st_size > MAX_BYTES:
        raise TouchstoneInputError(f"{path}: {st.st_size / 1e6:.0f} MB is past the {MAX_BYTES / 1e6:.0f} MB "
                                   "a Touchstone sweep can sensibly be")
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise TouchstoneInputError(f"{path}: cannot read ({_one_line(exc.strerror or exc)})") from None
    if raw.startswith(b"\xef\xbb\xbf"):
        raise TouchstoneInputError(f"{path}: starts with a UTF-8 byte-order mark, which Touchstone does not "
                                   "allow; save it as plain ASCII / UTF-8 without BOM")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    if "\x00" in text:
        raise TouchstoneInputError(f"{path}: binary content, not a Touchstone text file")
    m = _EXT.search(path.name)
    is_v2 = re.search(r"^\s*\[version\]", text, re.IGNORECASE | re.MULTILINE) is not None
    if m is None and not is_v2:
        raise TouchstoneInputError(f"{path}: not a Touchstone file name (expected an extension like .s2p)")
    if m is not None and not is_v2:
        nports = int(m.group(1))
        if nports < 1:
            raise TouchstoneInputError(f"{path}: extension names {nports} ports")
        _prescan(path, text, nports)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ntwk = skrf.Network(str(path))
    except Exception as exc:  # scikit-rf raises many types for bad content; all are bad input here
        raise TouchstoneInputError(f"{path}: malformed Touchstone data ({_one_line(exc) or type(exc).__name__})") from None
    if is_v2 and (m2 := _V2_COUNT.search(text)) is not None:
        try:
            declared = int(m2.group(1))
        except ValueError:
            raise TouchstoneInputError(f"{path}: [Number of Frequencies] '{m2.group(1)}' is not a whole number") from None
        if declared != len(ntwk.f):
            line = text.count("\n", 0, m2.start()) + 1
            raise TouchstoneInputError(f"{path}: line {line}: [Number of Frequencies] says {declared}, "
                                       f"the data holds {len(ntwk.f)} points")
    return validate_network(ntwk, path)


def validate_network(ntwk: skrf.Network, path: str | Path) -> skrf.Network:
    """Checks on a parsed Network: at least one point, finite data, strictly
    increasing frequency (Hz). Returns ``ntwk``."""
    import numpy as np

    f = np.asarray(ntwk.f, dtype=float)
    if f.size == 0:
        raise TouchstoneInputError(f"{path}: no frequency points")
    if f.size == 1:
        raise TouchstoneInputError(f"{path}: one frequency point ({f[0] / 1e9:.6g} GHz); a sweep needs at least two")
    if not f[0] > 0:
        raise TouchstoneInputError(f"{path}: frequency {f[0]:g} Hz (point 1) is not above 0 Hz")
    z0 = np.asarray(ntwk.z0)
    if not (np.isfinite(z0).all() and (z0.real > 0).all()):
        bad_z = z0.flat[int(np.argmax(~(np.isfinite(z0) & (z0.real > 0))))]
        raise TouchstoneInputError(f"{path}: reference impedance {bad_z.real:g} ohm is not above 0 ohm")
    bad = ~np.isfinite(ntwk.s).all(axis=(1, 2))
    if bad.any():
        i = int(np.argmax(bad))
        raise TouchstoneInputError(f"{path}: data is not finite at {f[i] / 1e9:.6g} GHz (point {i + 1})")
    step = np.diff(f)
    if (step <= 0).any():
        i = int(np.argmax(step <= 0)) + 1
        raise TouchstoneInputError(
            f"{path}: frequency {f[i] / 1e9:.6g} GHz (point {i + 1}) is not above the previous {f[i - 1] / 1e9:.6g} GHz"
        )
    return ntwk


def require_ports(ntwk: skrf.Network, kind: str, path: str | Path) -> None:
    """Reflect-type kinds take a 1-port or a 2-port (a pair); the others need a 2-port."""
    if kind not in KINDS:
        raise TouchstoneInputError(f"{path}: unknown site kind '{kind}' (known: {', '.join(KINDS)})")
    allowed = (1, 2) if kind in REFLECT_KINDS else (2,)
    if ntwk.nports not in allowed:
        need = "a 1-port or 2-port" if len(allowed) == 2 else "a 2-port"
        raise TouchstoneInputError(f"{path}: a {kind} site needs {need} sweep, the file has {ntwk.nports} port(s)")
