"""Reply formats of SCPI instruments, as pure functions over bytes and text:
IEEE 488.2 arbitrary blocks, REAL,64 payloads, ASCII number lists and
error-queue replies.

Blocks (IEEE Std 488.2-1992, 8.7.9 and 7.7.6, from memory): ``#``, one digit n
(1-9), n ASCII digits giving the byte count L, then L bytes, then the response
terminator. The indefinite form is ``#0`` followed by bytes up to NL with END.
Malformed input raises :mod:`probelog.drivers.errors` exceptions
(:class:`MalformedBlock`, :class:`ShortBlock`, :class:`ReplyError`).
"""

from __future__ import annotations

import re

import numpy as np

from probelog.drivers.errors import MalformedBlock, ReplyError, ShortBlock

__all__ = ["DIGITS", "decode_block", "encode_block", "float64_from_block", "floats_from_ascii",
           "parse_block_header", "parse_error_reply"]

DIGITS = frozenset(b"0123456789")


def encode_block(payload: bytes) -> bytes:
    """Wrap ``payload`` in a definite-length IEEE 488.2 block (no terminator)."""
    count = str(len(payload)).encode("ascii")
    if len(count) > 9:
        raise ValueError(f"payload of {len(payload)} bytes is too large for a definite block")
    return b"#" + str(len(count)).encode("ascii") + count + bytes(payload)


def parse_block_header(data: bytes) -> tuple[int, int | None]:
    """Parse the start of an arbitrary block.

    Returns (header length in bytes, payload byte count), the count being None
    for the indefinite form ``#0``. Raises :class:`MalformedBlock` when ``data``
    does not start with a complete, valid header.
    """
    if len(data) < 2:
        raise MalformedBlock(f"block header truncated: got {bytes(data[:2])!r}, need '#' and a digit")
    if data[0:1] != b"#":
        raise MalformedBlock(f"block must start with '#', got {bytes(data[:12])!r}")
    if data[1] not in DIGITS:
        raise MalformedBlock(f"block header digit must be 0-9, got {bytes(data[1:2])!r}")
    n = data[1] - 0x30
    if n == 0:
        return 2, None
    digits = bytes(data[2 : 2 + n])
    if len(digits) < n:
        raise MalformedBlock(f"block header '#{n}' announces {n} length digits, got {digits!r}")
    # int() would accept spaces, '_' and non-ASCII digits: check byte by byte.
    if not all(c in DIGITS for c in digits):
        raise MalformedBlock(f"block length must be {n} ASCII digits, got {digits!r}")
    return 2 + n, int(digits)


def decode_block(data: bytes) -> bytes:
    """Payload of a complete IEEE 488.2 block, definite or indefinite.

    A trailing LF or CR LF terminator is accepted; other bytes after a definite
    block, or fewer bytes than announced, raise :class:`MalformedBlock`
    (:class:`ShortBlock` for the latter).
    """
    data = bytes(data)
    head, count = parse_block_header(data)
    if count is None:
        body = data[head:]
        return body[:-1] if body.endswith(b"\n") else body
    payload = data[head : head + count]
    if len(payload) < count:
        raise ShortBlock(
            f"block announces {count} bytes but only {len(payload)} follow the header",
            expected=count,
            received=len(payload),
        )
    tail = data[head + count :]
    if tail not in (b"", b"\n", b"\r\n"):
        raise MalformedBlock(f"{len(tail)} unexpected bytes after a {count}-byte block: {tail[:12]!r}")
    return payload


def float64_from_block(payload: bytes, byte_order: str) -> np.ndarray:
    """REAL,64 payload as float64; ``byte_order`` is "little" or "big"."""
    if len(payload) % 8:
        raise MalformedBlock(f"REAL,64 block of {len(payload)} bytes is not a multiple of 8")
    return np.frombuffer(payload, dtype="<f8" if byte_order == "little" else ">f8").copy()


def floats_from_ascii(text: str) -> np.ndarray:
    """Comma-separated ASCII numbers (SCPI ``FORMat:DATA ASCii``) as float64."""
    parts = [p.strip() for p in text.strip().split(",")]
    try:
        return np.array([float(p) for p in parts], dtype=float)
    except ValueError:
        bad = next(p for p in parts if not _is_float(p))
        raise ReplyError(f"ASCII data reply has a non-number {bad!r} in {text[:60]!r}") from None


def _is_float(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


_ERROR_REPLY = re.compile(r'^\s*([+-]?\d+)\s*(?:,\s*"?(.*?)"?)?\s*$', re.S)


def parse_error_reply(reply: str) -> tuple[int, str]:
    """``SYSTem:ERRor:NEXT?`` reply ``-222,"Data out of range"`` -> (code, message)."""
    m = _ERROR_REPLY.match(reply)
    if not m:
        raise ReplyError(f"error-queue reply {reply!r} is not of the form <code>,\"<message>\"")
    return int(m.group(1)), (m.group(2) or "").strip()
