"""The plan's value readers (probelog.plan_fields) on their own: each returns the
value in its type for a good input and, for a bad one, raises one line naming the
file, the line the key is on and the key path (the contract of probelog.plan)."""

from __future__ import annotations

import tomllib

import pytest

from probelog import plan_fields as F
from probelog.plan_toml import Ctx, PlanError

TEXT = """\
[vna]
points = 201
ifbw_hz = 1e3
name = "a"
band = [2.0, 1.0]
on = 1
[[site]]
name = "x"
[[site]]
name = "y"
die = [5, 0]
"""
RAW = tomllib.loads(TEXT)
CTX = Ctx("p.toml", TEXT)
VNA = RAW["vna"]


def _err(fn, *args, **kw) -> str:
    with pytest.raises(PlanError) as exc:
        fn(*args, **kw)
    msg = str(exc.value)
    assert "\n" not in msg
    return msg


def test_good_values_come_back_in_their_types():
    assert F.integer(CTX, VNA, "points", "vna.points", lo=2, hi=1001) == 201
    got = F.num(CTX, VNA, "ifbw_hz", "vna.ifbw_hz", positive=True, allow_zero=False)
    assert got == 1e3 and isinstance(got, float)
    assert F.text(CTX, VNA, "name", "vna.name", choices=("a", "b")) == "a"
    assert F.pair(CTX, VNA, "band", "vna.band", "a band") == (2.0, 1.0)  # not ordered: taken as written
    assert F.die(CTX, [2, 0], "d", 3, 1) == (2, 0)


def test_optional_keys_give_none_or_their_default_and_required_ones_fail():
    assert F.num(CTX, VNA, "power_dbm", "vna.power_dbm", None) is None
    assert F.text(CTX, VNA, "metal", "vna.metal", None) is None
    assert F.integer(CTX, VNA, "avg", "vna.avg", 4) == 4
    assert _err(F.num, CTX, VNA, "power_dbm", "vna.power_dbm") == "p.toml, line 1: vna.power_dbm: missing key"


def test_a_bad_value_names_file_line_and_key():
    assert _err(F.integer, CTX, VNA, "points", "vna.points", lo=2, hi=101) == \
        "p.toml, line 2: vna.points: expected a whole number 2 to 101, found 201"
    assert _err(F.boolean, CTX, VNA, "on", "vna.on") == "p.toml, line 6: vna.on: expected true or false, found the number 1"
    assert _err(F.pair, CTX, VNA, "band", "vna.band", "a band [low, high] in Hz", ordered=True) == \
        "p.toml, line 5: vna.band: expected a band [low, high] in Hz with low < high, found [2, 1]"
    assert _err(F.text, CTX, VNA, "name", "vna.name", choices=("b", "c")) == \
        "p.toml, line 4: vna.name: expected one of b, c; found 'a'"


def test_array_tables_are_counted_from_one_as_a_reader_counts_them():
    site2 = RAW["site"][1]
    assert _err(F.die, CTX, site2["die"], "site[2].die", 4, 4) == \
        "p.toml, line 11: site[2].die: die [5, 0] is outside the 4 x 4 grid (col 0..3, row 0..3)"
    # an unknown key points at its line and names the nearest known one
    assert _err(F.check_keys, CTX, site2, "site[2]", ("name", "dies"), ()) == \
        "p.toml, line 11: site[2].die: unknown key; did you mean 'dies'?"
    F.check_keys(CTX, site2, "site[2]", ("name", "die"), ("name",))  # both known, the required one present


def test_booleans_are_not_numbers():
    assert F.is_num(1) and F.is_num(1.5)
    assert not F.is_num(True) and not F.is_num("1")
