"""Plan keys of the contact pre-check (issue 15): on by default, tuned or turned
off per plan and per site, every bad value one line naming file, line and key."""

from __future__ import annotations

from importlib import resources

import pytest

from probelog.bench import PRECHECK_IFBW_HZ, PRECHECK_POINTS
from probelog.plan import PlanError, Precheck, load_plan_text

DEMO = (resources.files("probelog") / "plans" / "demo.toml").read_text(encoding="utf-8")
DEVICE = 'name = "dev-ind"\nkind = "device"\n'
STUB = 'name = "ver-ostub"\nkind = "open-stub"\n'


def _plan(extra: str = "", device: str = "", stub: str = ""):
    text = DEMO.replace(DEVICE, DEVICE + device).replace(STUB, STUB + stub) + extra
    return load_plan_text(text, "lab.toml")


def test_on_by_default_with_the_bench_defaults():
    plan = _plan()
    assert plan.precheck == Precheck(True, PRECHECK_POINTS, PRECHECK_IFBW_HZ)
    assert all(plan.precheck_for(s.name) == plan.precheck for s in plan.sites)


def test_plan_wide_values_and_per_site_overrides():
    plan = _plan("\n[precheck]\npoints = 21\nifbw_hz = 50e3\n", device="precheck = { ifbw_hz = 10e3 }\n",
                 stub="precheck = false\n")
    assert plan.precheck == Precheck(True, 21, 50e3)
    assert plan.precheck_for("dev-ind") == Precheck(True, 21, 10e3)  # only the key it names
    assert plan.precheck_for("ver-ostub") == Precheck(False, 21, 50e3)
    assert plan.precheck_for("dev-mim") == plan.precheck
    off = _plan("\n[precheck]\nenabled = false\n", device="precheck = true\n")
    assert not off.precheck_for("dev-mim").enabled and off.precheck_for("dev-ind").enabled


@pytest.mark.parametrize("extra, device, message", [
    ("\n[precheck]\npoints = 1\n", "", r"precheck\.points: expected a whole number 2 to 201, found 1"),
    ("\n[precheck]\npoints = 11.5\n", "", r"precheck\.points: expected a whole number"),
    ("\n[precheck]\nifbw_hz = 0\n", "", r"precheck\.ifbw_hz: expected a number > 0"),
    ("\n[precheck]\npointz = 11\n", "", r"precheck\.pointz: unknown key; did you mean 'points'\?"),
    ("\n[precheck]\nenabled = \"no\"\n", "", r"precheck\.enabled: expected true or false"),
    ("", 'precheck = "off"\n', r"site\[\d+\]\.precheck: expected true, false or a table"),
    ("", "precheck = { ifbw = 1e3 }\n", r"site\[\d+\]\.precheck\.ifbw: unknown key; did you mean 'ifbw_hz'\?"),
])
def test_bad_values_are_one_line_naming_file_line_and_key(extra, device, message):
    with pytest.raises(PlanError, match=r"^lab\.toml, line \d+: " + message) as info:
        _plan(extra, device=device)
    assert "\n" not in str(info.value)
