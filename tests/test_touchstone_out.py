"""Touchstone bytes with a probelog header round-trip through scikit-rf's reader."""

import json

import numpy as np
import pytest
import skrf
from hypothesis import given, settings
from hypothesis import strategies as st

from probelog.touchstone_out import _fast_range, _scientific, network_to_touchstone, read_header

HEADER = {
    "session": "20261201-224501-QF2611-W07",
    "seq": 17,
    "die": (4, 3),
    "site": "ln-cpw-m9-r2-l500",
    "landing": 2,
    "cal": "cal-1",
    "start_hz": 1e9,
    "stop_hz": 110e9,
    "points": 201,
    "ifbw_hz": 1e3,
    "power_dbm": -10.0,
    "note": "tips re-landed after a skate; é",
}


def _random_network(nports: int, n: int, seed: int) -> skrf.Network:
    rng = np.random.default_rng(seed)
    # Magnitudes over many decades so the text format must keep full precision.
    mag = 10.0 ** rng.uniform(-9, 0.5, size=(n, nports, nports))
    s = mag * np.exp(1j * rng.uniform(-np.pi, np.pi, size=(n, nports, nports)))
    f = skrf.Frequency.from_f(np.linspace(1e9, 110e9, n), unit="Hz")
    return skrf.Network(frequency=f, s=s, z0=50.0)


def _read_back(data: bytes, tmp_path, nports: int) -> skrf.Network:
    path = tmp_path / f"back.s{nports}p"
    path.write_bytes(data)
    return skrf.Network(str(path))


@pytest.mark.parametrize("nports", [1, 2])
def test_round_trip_through_skrf_to_1e12(nports, tmp_path):
    # scikit-rf's reader is the reference (Touchstone v1.1, IBIS).
    ntwk = _random_network(nports, 201, seed=nports)
    data = network_to_touchstone(ntwk, HEADER)
    back = _read_back(data, tmp_path, nports)
    np.testing.assert_array_equal(back.f, ntwk.f)
    rel = np.abs(back.s - ntwk.s) / np.abs(ntwk.s)
    assert rel.max() < 1e-12
    np.testing.assert_allclose(back.z0, 50.0)


def test_option_line_and_header_come_first(tmp_path):
    data = network_to_touchstone(_random_network(2, 5, seed=3), HEADER)
    text = data.decode("ascii")
    lines = text.splitlines()
    option = next(i for i, ln in enumerate(lines) if ln.startswith("#"))
    assert lines[option].split()[:5] == ["#", "Hz", "S", "RI", "R"]
    assert float(lines[option].split()[5]) == 50.0
    assert all(ln.startswith("! probelog ") for ln in lines[: len(HEADER)])
    # 2-port v1.1 data lines: f, then S11, S21, S12, S22 as re/im pairs (9 columns).
    data_lines = [ln for ln in lines[option + 1:] if ln and not ln.startswith("!")]
    assert len(data_lines) == 5 and all(len(ln.split()) == 9 for ln in data_lines)


def test_header_reads_back():
    data = network_to_touchstone(_random_network(2, 3, seed=4), HEADER)
    head = read_header(data)
    assert head["session"] == HEADER["session"]
    assert head["site"] == HEADER["site"]
    assert json.loads(head["die"]) == [4, 3]
    assert float(head["start_hz"]) == 1e9 and int(head["seq"]) == 17
    assert json.loads(head["note"]) == HEADER["note"]  # spaces and non-ASCII are JSON-escaped


def test_comments_of_the_network_are_kept(tmp_path):
    ntwk = _random_network(1, 4, seed=5)
    ntwk.comments = "raw from the analyzer"
    back = _read_back(network_to_touchstone(ntwk, {"seq": 1}), tmp_path, 1)
    assert "probelog seq=1" in back.comments
    assert "raw from the analyzer" in back.comments


def test_unusable_inputs_are_refused():
    ntwk = _random_network(2, 3, seed=6)
    with pytest.raises(ValueError, match="header key"):
        network_to_touchstone(ntwk, {"bad key": 1})
    ntwk.z0 = np.array([50.0, 25.0])
    with pytest.raises(ValueError, match="one real reference impedance"):
        network_to_touchstone(ntwk, {})



_IN_RANGE = st.one_of(st.just(0.0), st.floats(1e-300, 1e300, exclude_min=True, exclude_max=True),
                      st.floats(-1e300, -1e-300, exclude_min=True, exclude_max=True))


@settings(max_examples=300, deadline=None)
@given(st.lists(_IN_RANGE, min_size=1, max_size=50))
def test_vectorised_numbers_parse_back_to_15_digits(values):
    # Python's float() parser is the reference reader.
    x = np.array(values)
    assert _fast_range(np.abs(x))
    text = _scientific(x, 15).tobytes().decode("ascii")
    back = np.array([float(text[i * 22:(i + 1) * 22]) for i in range(len(x))])
    tol = np.maximum(np.abs(x) * 1e-14, 5e-324)
    assert np.all(np.abs(back - x) <= tol), (x, back)


def test_decade_edges_and_zero_format_exactly():
    x = np.array([0.0, 1.0, -1.0, 1000.0, 1e-3, 9.999999999999999e2, 1e300, -2.5e-300])
    text = _scientific(x, 15).tobytes().decode("ascii")
    parts = [text[i * 22:(i + 1) * 22] for i in range(len(x))]
    assert parts[0] == " 0.00000000000000e+000"
    assert parts[3] == " 1.00000000000000e+003"
    assert [float(p) for p in parts] == pytest.approx(list(x), rel=1e-14)


def test_non_finite_and_subnormal_data_still_written_by_skrf(tmp_path):
    ntwk = _random_network(2, 5, seed=9)
    ntwk.s[2, 0, 0] = np.nan
    data = network_to_touchstone(ntwk, {"seq": 1})
    assert b"nan" in data.lower()
    assert not _fast_range(np.array([5e-324])) and not _fast_range(np.array([1.7e308]))
