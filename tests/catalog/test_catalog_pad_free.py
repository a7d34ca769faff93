"""Pad-free line figures: the two-line gamma through real pads (scikit-rf as the
reference circuit), Z0 from a stated C, and the demo bundle's figures against a
published closed form."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest
import skrf

from probelog.line_pairs import LineSite, die_figures, pad_free_metrics, pairs_on_die


def _line_with_pads(f, length_m, gamma, z0):
    """Pads 20 fF shunt + 15 pH series on both ends of a DefinedGammaZ0 line
    (the verified case in shared REFERENCES.md, Engen & Hoer / Marks)."""
    freq = skrf.Frequency.from_f(f, unit="hz")
    med50 = skrf.media.DefinedGammaZ0(freq, z0_port=50, z0=50, gamma=gamma)
    line = skrf.media.DefinedGammaZ0(freq, z0_port=50, z0=z0, gamma=gamma)
    pad = med50.shunt_capacitor(20e-15) ** med50.inductor(15e-12)
    return pad ** line.line(length_m, unit="m") ** pad.flipped()


@pytest.fixture
def physical_line():
    f = np.linspace(1e9, 110e9, 219)  # 0.5 GHz steps: 40 GHz is a point
    w = 2 * np.pi * f
    # R, L, G, C of REFERENCES.md's verified round trip (Pozar 4th ed. ch. 2)
    r, ell, g, c = 300 * np.sqrt(f / 1e9), 400e-9, 1e-3 * f / 1e9, 160e-12
    gamma = np.sqrt((r + 1j * w * ell) * (g + 1j * w * c))
    z0 = np.sqrt((r + 1j * w * ell) / (g + 1j * w * c))
    return f, gamma, z0, c


def test_two_lines_remove_the_pads_and_a_stated_c_gives_z0(physical_line):
    f, gamma, z0, c = physical_line
    a = LineSite("a", "cpw", "M9", 10, 6, 500.0, c_ref_pf_per_mm=c * 1e12 / 1e3)
    b = LineSite("b", "cpw", "M9", 10, 6, 2500.0)
    m, how = pad_free_metrics(_line_with_pads(f, 500e-6, gamma, z0), a, _line_with_pads(f, 2500e-6, gamma, z0), b)
    assert how == "c-ref"
    assert np.allclose(m.gamma, gamma, rtol=1e-9)
    i = np.argmin(abs(f - 40e9))
    # REFERENCES.md at 40 GHz: alpha 0.17348 dB/mm, eps_eff 5.75249 (Z0 needs G too: G is taken as 0 here)
    assert m.alpha_db_per_mm[i] == pytest.approx(0.17348, rel=1e-4)
    assert m.eps_eff[i] == pytest.approx(5.75249, rel=1e-5)
    g_over_wc = 1e-3 * 40 / (2 * np.pi * 40e9 * c)  # the G the C-only formula leaves out, relative
    assert abs(m.z0[i] / z0[i] - 1) < 1.5 * g_over_wc
    # without any reference Z0 is not guessed
    m2, how2 = pad_free_metrics(_line_with_pads(f, 500e-6, gamma, z0), b,
                                _line_with_pads(f, 2500e-6, gamma, z0), LineSite("c", "cpw", "M9", 10, 6, 1500.0))
    assert how2 == "" and np.isnan(m2.z0).all()


def test_a_single_line_with_pads_in_reads_wrong(physical_line):
    """The failing case the two-line method exists for: the pads bias the
    single-line eps_eff (REFERENCES.md: 10.03 instead of 5.752 at 40 GHz for 0.5 mm)."""
    from probelog.lines import line_metrics

    f, gamma, z0, _c = physical_line
    single = line_metrics(_line_with_pads(f, 500e-6, gamma, z0), 500e-6)
    i = np.argmin(abs(f - 40e9))
    assert single.eps_eff[i] > 1.5 * 5.75249


def test_pairs_need_the_same_family_at_two_lengths():
    s = [LineSite("a", "cpw", "M9", 10, 6, 500), LineSite("b", "cpw", "M9", 10, 6, 1500),
         LineSite("c", "cpw", "M6", 10, 6, 1500), LineSite("d", "cpw", "M9", 6, 12, 500)]
    assert [(a.name, b.name) for a, b in pairs_on_die(s)] == [("a", "b")]
    assert die_figures([((0, 0), "a", None)], {}) == []


def test_demo_bundle_has_pad_free_figures_near_the_closed_form(demo_sessions, tmp_path):
    """ln-cpw-m9-r2 is CPW 10/6 um on 300 um of silicon (eps_r 11.7, the simulated
    chip): quasi-static eps_eff 6.3488 (Ghione & Naldi 1984, REFERENCES.md,
    verified). The pad-free figure at 110 GHz must be within 5 % of it (metal
    thickness and internal inductance move it a little); the single-line
    figure with the pads in is far off."""
    from probelog.export import export_bundle

    out = export_bundle(demo_sessions[0], tmp_path / "b", progress=False)
    rows = [r for r in csv.DictReader(open(out / "manifest.csv", encoding="utf-8"))
            if r["site"] == "ln-cpw-m9-r2-l500"]
    assert len(rows) == 12
    pad_free = [float(r["padfree_eps_eff@110GHz"]) for r in rows]
    single = [float(r["eps_eff@110GHz"]) for r in rows]
    assert all(abs(x / 6.3488 - 1) < 0.05 for x in pad_free)
    assert all(abs(x / 6.3488 - 1) > 0.3 for x in single)
    assert "Pad-free line figures" in (out / "report.html").read_text(encoding="utf-8")


def test_a_plan_states_the_reference_on_the_line_site():
    """The plan's site keys c_ref_pf_per_mm / z0_ref_ohm reach the pairing; a
    reference that is not a positive number is refused with its key."""
    from probelog.manifest import plan_sites
    from probelog.plan import PlanError, load_plan_text

    demo = (Path(__file__).resolve().parents[2] / "probelog" / "plans" / "demo.toml").read_text(encoding="utf-8")
    marker = 'name = "ln-cpw-m9-r2-l500"\n'
    text = demo.replace(marker, marker + "c_ref_pf_per_mm = 0.16\n", 1)
    plan = load_plan_text(text, "p.toml", base_dir=Path(__file__).resolve().parents[2] / "probelog" / "plans")
    site = next(s for s in plan.sites if s.name == "ln-cpw-m9-r2-l500")
    assert site.c_ref_pf_per_mm == 0.16 and site.z0_ref_ohm is None
    from probelog.line_pairs import line_site

    assert line_site(site.name, plan_sites(text)[site.name]).c_ref_pf_per_mm == 0.16
    with pytest.raises(PlanError, match=r"c_ref_pf_per_mm"):
        load_plan_text(demo.replace(marker, marker + "c_ref_pf_per_mm = -1.0\n", 1), "p.toml",
                       base_dir=Path(__file__).resolve().parents[2] / "probelog" / "plans")


def test_the_engine_journals_each_dies_figures_after_its_last_decision(demo_sessions):
    """One line-figures event a die (the demo pairs one family), after that die's
    last decision, agreeing with the figures the catalog computes from the files."""
    import json

    from probelog.catalog.source import read_session

    events = [json.loads(x) for x in (demo_sessions[0] / "journal.jsonl").read_text().splitlines()]
    figs = [(i, e) for i, e in enumerate(events) if e["type"] == "line-figures"]
    assert len(figs) == 12
    for i, e in figs:
        die = e["payload"]["die"]
        later = [x for x in events[i + 1:] if x["type"] == "decision" and x["payload"]["die"] == die]
        assert later == []  # written after the die's last decision
    rec = read_session(demo_sessions[0])
    cat = {(r["die_col"], r["die_row"], r["f_hz"]): r["eps_eff"] for r in rec.line_figures}
    from probelog.manifest import read_journal

    state = read_journal(demo_sessions[0]).state  # the events read back into the session state
    held = {(die, fam): f for die, by_family in state.line_figures.items() for fam, f in by_family.items()}
    assert {(tuple(e["payload"]["die"]), e["payload"]["family"]) for _i, e in figs} == set(held)
    for _i, e in figs:
        assert held[(tuple(e["payload"]["die"]), e["payload"]["family"])].metrics == e["payload"]["metrics"]
    for _i, e in figs:
        p = e["payload"]
        for f, eps in zip(p["metrics"]["f_hz"], p["metrics"]["eps_eff"], strict=True):
            assert cat[(p["die"][0], p["die"][1], f)] == pytest.approx(eps, rel=1e-9)


def test_the_bundle_takes_the_journaled_figures_and_computes_only_the_rest(demo_sessions):
    """The bundle's pad-free figures are the ones the session journaled (read
    into the state); they agree with the figures computed again from the kept
    sweeps. A die without journaled figures (taken out of the state here, as in
    a session left mid-die) is computed from its sweeps, and only it needs them."""
    import dataclasses

    import msgspec

    from probelog.export import load_networks
    from probelog.manifest import index_session, read_journal
    from probelog.pad_free_bundle import figures

    index = index_session(read_journal(demo_sessions[0]))
    networks, problems = load_networks(index, demo_sessions[0], lambda: None)
    assert problems == []
    kept = [((r["die_col"], r["die_row"]), r["site"], networks.get(r["seq"])) for r in index.rows]

    def keyed(rows):
        return {(r["die_col"], r["die_row"], r["family"], r["f_hz"]): r for r in rows}

    computed = keyed(die_figures(kept, index.sites))
    journaled = keyed(figures(index, {}))  # no sweeps at all: every figure from the journal
    assert len(journaled) > 0 and set(journaled) == set(computed)
    for k, row in journaled.items():
        assert set(row) == set(computed[k])
        for name, value in row.items():
            want = computed[k][name]
            assert value == (pytest.approx(want, rel=1e-9) if isinstance(want, float) else want), (k, name)

    die = next(iter(index.state.line_figures))
    rest = {d: f for d, f in index.state.line_figures.items() if d != die}
    cut = dataclasses.replace(index, state=msgspec.structs.replace(index.state, line_figures=rest))
    assert {(r["die_col"], r["die_row"]) for r in figures(cut, {})} == set(rest)  # that die is missing
    again = keyed(figures(cut, networks))  # computed from its sweeps
    assert set(again) == set(computed)


def test_the_catalog_takes_the_journaled_figures_and_reads_no_sweep_for_them(demo_sessions, monkeypatch):
    """A completed demo session journaled every die's figures: the catalog's rows
    are those figures and no Touchstone file is opened for them; with the
    line-figures events gone (a journal from before them) the same figures are
    computed from the kept sweeps, to 1e-9 (the two paths agree)."""
    import msgspec
    import skrf

    from probelog.catalog import source
    from probelog.state import SessionState

    opened = []
    real = skrf.Network

    def counting(*args, **kwargs):
        opened.append(args[0] if args else None)
        return real(*args, **kwargs)

    monkeypatch.setattr(skrf, "Network", counting)
    rec = source.read_session(demo_sessions[0])
    assert rec.line_figures and opened == []
    real_fold = source.fold

    def without_figures(events):
        state: SessionState = real_fold(events)
        return msgspec.structs.replace(state, line_figures={})

    monkeypatch.setattr(source, "fold", without_figures)
    again = source.read_session(demo_sessions[0])
    assert len(opened) > 0  # now the sweeps are read

    def keyed(rows):
        return {(r["die_col"], r["die_row"], r["family"], r["f_hz"]): r for r in rows}

    a, b = keyed(rec.line_figures), keyed(again.line_figures)
    assert set(a) == set(b)
    for k, row in a.items():
        for name, value in row.items():
            want = b[k][name]
            assert value == (pytest.approx(want, rel=1e-9) if isinstance(want, float) else want), (k, name)
