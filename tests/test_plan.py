"""The probing plan: the demo loads, every mistake names file, key and line."""

import re
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from probelog.bench import SweepSettings
from probelog.plan import PlanError, load_plan, load_plan_text

ROOT = Path(__file__).resolve().parents[1]
DEMO = (ROOT / "probelog" / "plans" / "demo.toml").read_text(encoding="utf-8")
CHIP = ROOT / "drivers" / "simbench" / "chip.toml"


# ------------------------------------------------------------------ the demo plan


def test_demo_plan_loads_by_word_and_by_path():
    by_word = load_plan("demo")
    by_path = load_plan(ROOT / "probelog" / "plans" / "demo.toml")
    assert by_word.sha256 == by_path.sha256
    assert by_word.wafer.id == "QF2611-W07" and by_word.wafer.lot == "QF2611"
    assert by_word.wafer.chip == "PLX-7"
    assert by_word.calibration.method == "lrrm" and by_word.calibration.compare_with == "solt"
    # The kit path is relative to the plan file, so both routes find the same file.
    assert by_word.calibration.kit_path == ROOT / "probelog" / "kits" / "plx7.toml"


def test_demo_plan_hash_is_sha256_of_its_text():
    import hashlib  # FIPS 180-4 SHA-256 as the reference

    plan = load_plan("demo")
    assert plan.text == DEMO
    assert plan.sha256 == hashlib.sha256(DEMO.encode()).hexdigest()


def _chip_sites() -> dict[str, tuple[float, float]]:
    # Read the simulated chip's site table by pattern, not by importing drivers.
    out = {}
    for block in CHIP.read_text().split("[[site]]")[1:]:
        name = re.search(r'^name = "([^"]+)"', block, re.M).group(1)
        x, y = re.search(r"^offset_um = \[([\d.]+), ([\d.]+)\]", block, re.M).groups()
        out[name] = (float(x), float(y))
    return out


def test_demo_sites_mirror_the_simulated_chip():
    plan = load_plan("demo")
    chip = _chip_sites()
    assert len(chip) > 40
    for site in plan.sites:
        assert site.offset_um == chip[site.name], site.name


def test_demo_sequence_and_settings():
    plan = load_plan("demo")
    assert 10 <= len(plan.sequence.sites) <= 14
    kinds = {plan.site(n).kind for n in plan.sequence.sites}
    assert {"line", "open-stub", "short-stub", "device"} <= kinds
    types = {plan.site(n).line_type for n in plan.sequence.sites if plan.site(n).kind == "line"}
    assert types == {"cpw", "gcpw", "swl"}
    assert len(plan.dies_in_order()) == 12
    assert plan.sequence.drift_site == "cal-thru" and plan.sequence.drift_every_landings == 40
    assert plan.vna.sweep_settings() == SweepSettings(1e9, 110e9, 201, 1e3, -10.0)
    assert plan.vna.power_dbm <= plan.vna.power_limit_dbm
    assert plan.probes.ids == ("GSG100-A17", "GSG100-B04")


def test_demo_line_windows_hold_the_closed_form_cpw_value():
    # Quasi-static CPW on a finite substrate, W/S/h = 10/6/300 um, eps_r 11.7:
    # Z0 = 50.439 ohm, eps_eff 6.3488 (Ghione & Naldi, Electron. Lett. 20(4), 1984;
    # REFERENCES.md, verified). The pads add capacitance, so the single-line
    # eps_eff window of these sites must lie at or above the quasi-static value.
    plan = load_plan("demo")
    checked = 0
    for s in plan.sites:
        if s.line_type == "cpw" and (s.width_um, s.gap_um) == (10.0, 6.0) and s.z0_window_ohm:
            lo, hi = s.z0_window_ohm
            assert lo < 50.439 < hi, s.name
            assert s.eps_eff_window[1] > 6.3488, s.name
            checked += 1
    assert checked >= 3
    # on-chip lines are tens of ohm (common practice, no source): a window far
    # outside that is a typo in the plan
    for s in plan.sites:
        if s.z0_window_ohm:
            assert 10.0 <= s.z0_window_ohm[0] < s.z0_window_ohm[1] <= 120.0, s.name


def test_demo_kit_file_loads():
    kit = load_plan("demo").calibration.load_kit()
    assert kit["sites"]["thru"] == "cal-thru"


# ------------------------------------------------------------------ ordering


SMALL = """
[wafer]
id = "W"
lot = "L"
chip = "C"
cols = 3
rows = 3
die_pitch_um = [1000.0, 1000.0]
skip = [[0, 0]]
order = "{order}"
dies = {dies}

[[site]]
name = "t"
kind = "thru"
offset_um = [10.0, 10.0]

[[site]]
name = "o"
kind = "open"
offset_um = [20.0, 10.0]

[[site]]
name = "s"
kind = "short"
offset_um = [30.0, 10.0]

[[site]]
name = "l"
kind = "load"
offset_um = [40.0, 10.0]

[sequence]
sites = ["t"]

[calibration]
method = "solt"
kit = {{ name = "inline" }}
die = [1, 1]
standards = ["o", "s", "l", "t"]

[vna]
start_hz = 1e9
stop_hz = 2e9
points = 11
ifbw_hz = 100.0
power_dbm = -20.0
power_limit_dbm = -10.0

[probes]
ids = ["P1", "P2"]
"""


@pytest.mark.parametrize(
    "order, dies, expected",
    [
        # Serpentine: row 0 left->right (die (0,0) skipped), row 1 right->left, row 2 left->right.
        ("serpentine", '"all"', [(1, 0), (2, 0), (2, 1), (1, 1), (0, 1), (0, 2), (1, 2), (2, 2)]),
        ("rows", '"all"', [(1, 0), (2, 0), (0, 1), (1, 1), (2, 1), (0, 2), (1, 2), (2, 2)]),
        ("rows", "[[2, 2], [1, 0], [0, 1]]", [(1, 0), (0, 1), (2, 2)]),
        ("serpentine", "[[0, 1], [2, 1], [1, 2], [2, 2]]", [(0, 1), (2, 1), (2, 2), (1, 2)]),
        ("listed", "[[2, 2], [1, 0], [0, 1]]", [(2, 2), (1, 0), (0, 1)]),
    ],
)
def test_dies_in_order(order, dies, expected):
    plan = load_plan_text(SMALL.format(order=order, dies=dies), "small.toml")
    assert plan.dies_in_order() == expected


def test_inline_kit_and_default_plan_name():
    plan = load_plan_text(SMALL.format(order="rows", dies='"all"'), "small.toml")
    assert plan.calibration.kit_path is None
    assert plan.calibration.load_kit() == {"name": "inline"}
    assert plan.name == "small"
    assert plan.calibration.compare_with is None
    assert plan.sequence.recal_every_hours is None


def test_kit_path_is_relative_to_the_plan_file(tmp_path):
    (tmp_path / "kits").mkdir()
    (tmp_path / "kits" / "k.toml").write_text('name = "k"\n')
    (tmp_path / "plans").mkdir()
    text = SMALL.format(order="rows", dies='"all"').replace('kit = { name = "inline" }', 'kit = "../kits/k.toml"')
    (tmp_path / "plans" / "p.toml").write_text(text)
    plan = load_plan(tmp_path / "plans" / "p.toml")
    assert plan.calibration.kit_path == (tmp_path / "kits" / "k.toml").resolve()
    assert plan.calibration.load_kit() == {"name": "k"}
    (tmp_path / "kits" / "k.toml").unlink()
    with pytest.raises(PlanError, match=r"p\.toml: calibration\.kit: cannot read the kit file"):
        plan.calibration.load_kit()


# ------------------------------------------------------------------ mistakes


def _line_of(text: str, marker: str) -> int:
    for n, line in enumerate(text.splitlines(), start=1):
        if marker in line:
            return n
    raise AssertionError(f"marker {marker!r} not in text")


# (what to replace, with what, key path expected in the message, a marker of the
#  line the message must name (None: no line), words the message must contain)
BROKEN = [
    ("points = 201", "points = = 201", None, "points = = 201", "not valid TOML"),
    ('lot = "QF2611"\n', "", "wafer.lot", "[wafer]", "missing key"),
    ("points = 201", 'points = "201"', "vna.points", 'points = "201"', "expected a whole number"),
    ("ifbw_hz = 1.0e3", "ifbw = 1.0e3", "vna.ifbw", "ifbw = 1.0e3", "did you mean 'ifbw_hz'"),
    ('[probes]', '[probe]', "probe", "[probe]", "did you mean 'probes'"),
    ('    "dev-mim",\n]', '    "dev-mimm",\n]', "sequence.sites[12]", "sites = [", "unknown site 'dev-mimm'"),
    ('name = "cal-short"', 'name = "cal-open"', "site[2].name", 'name = "cal-open"\nkind = "short"',
     "duplicate site name 'cal-open'"),
    ("\ndie = [4, 4]", "\ndie = [4, 9]", "calibration.die", "die = [4, 9]", "outside the 9 x 9 grid"),
    ("drift_die = [4, 4]", "drift_die = [0, 0]", "sequence.drift_die", "drift_die", "is in wafer.skip"),
    ("[2, 7], [4, 7], [6, 7],", "[2, 7], [4, 7], [6, 9],", "wafer.dies[12]", "dies = [", "outside the 9 x 9 grid"),
    ("[2, 7], [4, 7], [6, 7],", "[2, 7], [4, 7], [4, 7],", "wafer.dies[12]", "dies = [", "listed twice"),
    ("stop_hz = 110.0e9", "stop_hz = 0.5e9", "vna.stop_hz", "stop_hz", "stop_hz > start_hz"),
    ("points = 201", "points = 1", "vna.points", "points = 1", "2 to 100001"),
    ("power_dbm = -10.0", "power_dbm = 0.0", "vna.power_dbm", "power_dbm = 0.0", "above power_limit_dbm"),
    ("offset_um = [1200.0, 200.0]", "offset_um = [1200.0]", "site[3].offset_um", "offset_um = [1200.0]",
     "expected two numbers"),
    ("offset_um = [1200.0, 200.0]", "offset_um = [1200.0, 4200.0]", "site[3].offset_um", "4200.0",
     "outside the die"),
    ('kind = "load"', 'kind = "loadd"', "site[3].kind", 'kind = "loadd"', "expected one of open, short"),
    ('name = "cal-load"', 'name = "cal/load"', "site[3].name", "cal/load", "folder name"),
    ('method = "lrrm"', 'method = "mtrl"', "calibration.method", 'method = "mtrl"', "has no line"),
    ('compare_with = "solt"', 'compare_with = "lrrm"', "calibration.compare_with", "compare_with", "itself"),
    ('kit = "../kits/plx7.toml"', "kit = 5", "calibration.kit", "kit = 5", "kit file path"),
    ('order = "serpentine"', 'order = "spiral"', "wafer.order", "spiral", "serpentine, rows, listed"),
    ("[limits]\n", '[limits]\ncontact_db = "x"\n', "limits.contact_db", "contact_db", "finite number"),
    ("z0_window_ohm = [46.9, 56.5]", "z0_window_ohm = [56.5, 46.9]", "site[4].z0_window_ohm", "[56.5, 46.9]",
     "low < high"),
    ("window_band_hz = [15.0e9, 60.0e9]", "window_band_hz = [60.0e9]", "site[4].window_band_hz",
     "[60.0e9]", "band [low, high] in Hz"),
    ('ids = ["GSG100-A17", "GSG100-B04"]', "ids = []", "probes.ids", "ids = []", "one or two probe ids"),
    ("recal_every_hours = 4.0", "recal_every_hours = -1", "sequence.recal_every_hours", "recal_every", '"never"'),
    ("symmetric = true\nlength_um = 100.0", 'symmetric = "yes"\nlength_um = 100.0', "site[4].symmetric",
     'symmetric = "yes"', "true or false"),
    ("drift_site = \"cal-thru\"", "drift_site = \"cal-thr\"", "sequence.drift_site", "cal-thr",
     "did you mean 'cal-thru'"),
    ("cols = 9", "cols = 9.5", "wafer.cols", "cols = 9.5", "whole number"),
    ('standards = ["cal-open", "cal-short", "cal-load", "cal-thru"]',
     'standards = ["cal-open", "cal-short", "cal-thru"]', "calibration.method", 'method = "lrrm"', "has no load"),
]


@pytest.mark.parametrize("old, new, key, marker, says", BROKEN, ids=[b[2] or "syntax" for b in BROKEN])
def test_broken_plan_names_file_key_and_line(old, new, key, marker, says):
    assert DEMO.count(old) >= 1, old
    text = DEMO.replace(old, new, 1)
    with pytest.raises(PlanError) as exc:
        load_plan_text(text, "plans/broken.toml")
    msg = str(exc.value)
    assert "\n" not in msg
    assert msg.startswith("plans/broken.toml"), msg
    if key is not None:
        assert f": {key}: " in msg, msg
    first = marker.split("\n")[0]
    if "\n" in marker:
        line = text.splitlines().index(first, _line_of(text, marker.split("\n")[1]) - 2) + 1
    else:
        line = _line_of(text, first)
    assert f"line {line}:" in msg, msg
    assert says in msg, msg


def test_toml_syntax_error_names_the_column():
    text = DEMO.replace("points = 201", "points = = 201", 1)
    with pytest.raises(PlanError, match=r"line \d+: not valid TOML: .*\(column 10\)"):
        load_plan_text(text, "x.toml")


def test_missing_table_is_named():
    text = DEMO.split("[vna]")[0] + "[probes]" + DEMO.split("[probes]")[1]
    with pytest.raises(PlanError, match=r"^x\.toml: vna: missing table"):
        load_plan_text(text, "x.toml")


def test_unreadable_plan_files(tmp_path):
    with pytest.raises(PlanError, match="no such plan file"):
        load_plan(tmp_path / "nope.toml")
    with pytest.raises(PlanError, match="is a folder"):
        load_plan(tmp_path)
    bad = tmp_path / "bad.toml"
    bad.write_bytes(b'[plan]\nname = "x"\n\xff\xfe\n')
    with pytest.raises(PlanError, match=r"bad\.toml, line 3: not UTF-8"):
        load_plan(bad)


# ------------------------------------------------------------------ fuzzing


def _load_or_plan_error(text: str) -> None:
    try:
        load_plan_text(text, "fuzz.toml")
    except PlanError as exc:
        msg = str(exc)
        assert msg.startswith("fuzz.toml") and "\n" not in msg


toml_ish = st.lists(
    st.one_of(
        st.sampled_from(["[wafer]", "[[site]]", "[vna]", "[sequence]", "[calibration]", "[probes]", "[limits]",
                         "[plan]", "cols = 3", "rows = 2", 'name = "a"', 'kind = "thru"', "offset_um = [1, 2]",
                         "points = 3", 'sites = ["a"]', "die = [0, 0]", "dies = [", "]", "x = {", "=", '"',
                         "start_hz = 1e9", "stop_hz = 1e8", 'kit = "k.toml"', "power_dbm = nan"]),
        st.text(max_size=20),
    ),
    max_size=30,
).map("\n".join)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(toml_ish)
def test_fuzz_random_text_loads_or_raises_plan_error(text):
    _load_or_plan_error(text)


_VALUES = st.one_of(
    st.integers(-10**12, 10**12).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(lambda f: repr(f).replace("inf", "inf")),
    st.text(max_size=8).map(lambda s: '"' + s.replace("\\", "").replace('"', "") + '"'),
    st.sampled_from(["true", "false", "[]", "[1]", "[1, 2]", "[[1, 2]]", '"all"', "{}", "{ a = 1 }",
                     "1979-05-27", "[0, 0]", "[-1, 3]", "[3.5, 2.5]", '"never"', '"none"']),
)


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.data())
def test_fuzz_mutated_demo_loads_or_raises_plan_error(data):
    lines = DEMO.splitlines()
    n = data.draw(st.integers(1, 3), label="mutations")
    for _ in range(n):
        i = data.draw(st.integers(0, len(lines) - 1), label="line")
        op = data.draw(st.sampled_from(["delete", "duplicate", "value", "char"]), label="op")
        if op == "delete":
            del lines[i]
        elif op == "duplicate":
            lines.insert(i, lines[i])
        elif op == "value" and "=" in lines[i]:
            key = lines[i].split("=", 1)[0]
            lines[i] = f"{key}= {data.draw(_VALUES, label='value')}"
        elif lines[i]:
            j = data.draw(st.integers(0, len(lines[i]) - 1), label="col")
            ch = data.draw(st.characters(codec="utf-8"), label="char")
            lines[i] = lines[i][:j] + ch + lines[i][j + 1:]
        if not lines:
            lines = [""]
    _load_or_plan_error("\n".join(lines) + "\n")


def test_tomllib_agrees_the_demo_is_valid_toml():
    # tomllib is the reference parser (TOML 1.0.0 spec); the demo must parse on its own.
    doc = tomllib.loads(DEMO)
    assert len(doc["site"]) == len(load_plan("demo").sites)
