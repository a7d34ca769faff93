"""IEEE 488.2 arbitrary blocks: encoding, decoding, malformed headers.

Format per IEEE Std 488.2-1992, 8.7.9 (definite length arbitrary block response
data) and 7.7.6 (arbitrary block program data), from memory: '#', one non-zero
digit n, n ASCII digits of byte count L, L data bytes; '#0' starts the indefinite
form that ends at NL^END.
"""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from probelog.drivers.errors import MalformedBlock, ShortBlock
from probelog.drivers.blocks import (
    decode_block,
    encode_block,
    float64_from_block,
    floats_from_ascii,
    parse_block_header,
    parse_error_reply,
)


# Worked examples, IEEE Std 488.2-1992 8.7.9 / 7.7.6 (from memory).
@pytest.mark.parametrize(
    "raw",
    [b"#15HELLO", b"#3005HELLO", b"#0HELLO\n", b"#15HELLO\n", b"#15HELLO\r\n", b"#9000000005HELLO"],
)
def test_standard_examples_decode_to_hello(raw):
    assert decode_block(raw) == b"HELLO"


def test_201_complex_float64_header():
    # 201 points x 16 bytes (two float64) = 3216 bytes -> 4 digits: '#43216'
    payload = np.zeros(201, dtype=complex).tobytes()
    block = encode_block(payload)
    assert block[:6] == b"#43216"
    assert len(block) == 6 + 3216


def test_empty_payload_and_header_lengths():
    assert encode_block(b"") == b"#10"
    assert parse_block_header(b"#3005HELLO") == (5, 5)
    assert parse_block_header(b"#0HELLO") == (2, None)


def test_float64_byte_order():
    values = np.array([1.0, -2.5, 1e-300])
    assert np.array_equal(float64_from_block(values.astype("<f8").tobytes(), "little"), values)
    assert np.array_equal(float64_from_block(values.astype(">f8").tobytes(), "big"), values)
    # The wrong byte order must not silently give the same numbers.
    assert not np.array_equal(float64_from_block(values.astype(">f8").tobytes(), "little"), values)
    with pytest.raises(MalformedBlock, match="multiple of 8"):
        float64_from_block(b"\x00" * 12, "little")


@pytest.mark.parametrize(
    "raw, match",
    [
        (b"", "truncated"),
        (b"HELLO", "start with '#'"),
        (b"#A5HELLO", "digit must be 0-9"),
        (b"#2", "length digits"),
        (b"#3 05HELLO", "ASCII digits"),
        (b"#3_05HELLO", "ASCII digits"),  # int() would accept the underscore
        (b"#15HELLOWORLD", "unexpected bytes"),
    ],
)
def test_malformed_blocks_are_named(raw, match):
    with pytest.raises(MalformedBlock, match=match):
        decode_block(raw)


def test_short_block_reports_counts():
    with pytest.raises(ShortBlock) as info:
        decode_block(b"#210HELLO")
    assert (info.value.expected, info.value.received) == (10, 5)


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=3000))
def test_random_payloads_round_trip(payload):
    # Payloads full of 0x0A and '#' bytes must survive: blocks are read by count.
    assert decode_block(encode_block(payload)) == payload
    assert decode_block(encode_block(payload) + b"\n") == payload


@settings(max_examples=500, deadline=None)
@given(st.binary(max_size=40))
def test_arbitrary_bytes_decode_or_raise_malformed_only(raw):
    try:
        out = decode_block(raw)
    except MalformedBlock:
        return
    # Whatever decodes must be consistent with the header it came with.
    head, count = parse_block_header(raw)
    assert out == (raw[head : head + count] if count is not None else raw[head:].removesuffix(b"\n"))


@settings(max_examples=300, deadline=None)
@given(
    st.binary(min_size=1, max_size=12).filter(lambda h: not h.startswith(b"#")),
    st.binary(max_size=20),
)
def test_headers_without_hash_are_malformed(prefix, rest):
    with pytest.raises(MalformedBlock):
        decode_block(prefix + rest)


@settings(max_examples=300, deadline=None)
@given(st.integers(1, 9), st.text(alphabet=st.characters(exclude_categories=("Cs",)), min_size=1, max_size=9), st.binary(max_size=20))
def test_non_digit_length_fields_are_malformed(n, digits, rest):
    field = digits.encode("utf-8")[:n].ljust(n, b"x")
    if all(48 <= c <= 57 for c in field):
        field = field[:-1] + b"x"
    with pytest.raises(MalformedBlock):
        decode_block(b"#" + str(n).encode() + field + rest)


def test_ascii_numbers_and_error_replies():
    assert np.array_equal(floats_from_ascii("1,-2.5e-3, 3E+2\n"), [1.0, -2.5e-3, 300.0])
    # SCPI-1999 error queue form <code>,"<text>", e.g. -222 Data out of range.
    assert parse_error_reply('-222,"Data out of range"') == (-222, "Data out of range")
    assert parse_error_reply('+0,"No error"') == (0, "No error")
    assert parse_error_reply("0") == (0, "")
