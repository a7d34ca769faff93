"""Widget computations checked against published formulas and physics."""

from __future__ import annotations

import numpy as np
import pytest
import skrf
from skrf.media import DefinedGammaZ0

from probelog.verdicts import CheckResult, Verdict
from probelog.tui.widgets.bigtext import GLYPHS, render_big
from probelog.tui.widgets.die_map import SHADES, shade_index
from probelog.tui.widgets.logbook import JournalTail, describe
from probelog.tui.widgets.smith import Canvas, densify, polar_grid, rotation_sense, smith_grid, z_to_gamma
from probelog.tui.widgets.sweep_plot import cap_points, magnitude_db
from probelog.tui.widgets.tip_wear import wear_state
from probelog.tui.widgets.verdict_board import checks_table, format_figure


@pytest.mark.parametrize("r", [0.2, 0.5, 1.0, 2.0, 5.0])
def test_constant_resistance_points_lie_on_their_smith_circle(r):
    # Pozar, Microwave Engineering, section 2.4 (from memory): the r = const circle has
    # centre (r/(1+r), 0) and radius 1/(1+r) in the Gamma plane.
    x = np.linspace(-20, 20, 201)
    g = z_to_gamma(r + 1j * x)
    assert np.allclose(np.abs(g - r / (1 + r)), 1 / (1 + r))


@pytest.mark.parametrize("x", [0.5, 1.0, 2.0])
def test_constant_reactance_points_lie_on_their_smith_arc(x):
    # Pozar section 2.4 (from memory): x = const circles have centre (1, 1/x), radius 1/x.
    r = np.linspace(0, 30, 201)
    g = z_to_gamma(r + 1j * x)
    assert np.allclose(np.abs(g - (1 + 1j / x)), 1 / x)


def test_grids_stay_inside_the_unit_circle():
    # A passive load has |Gamma| <= 1 (physical law: no power gain).
    assert np.abs(smith_grid()).max() <= 1 + 1e-9
    assert np.abs(polar_grid()).max() <= 1 + 1e-9


def test_open_stub_turns_clockwise_and_a_time_reversed_trace_does_not():
    # Foster's reactance theorem: the reactance of a lossless one-port rises with
    # frequency, so its reflection moves clockwise on the Smith chart.
    freq = skrf.Frequency(1, 60, 121, unit="GHz")
    beta = 2 * np.pi * freq.f / 299_792_458.0  # lossless air line, rad/m
    media = DefinedGammaZ0(freq, z0_port=50, z0=50, gamma=1j * beta)
    stub = media.line(1.5e-3, "m") ** media.open()
    gamma = stub.s[:, 0, 0]
    assert rotation_sense(gamma) < 0
    assert rotation_sense(gamma[::-1]) > 0
    # round-trip phase 2*beta*l at 60 GHz minus at 1 GHz
    expected = -np.rad2deg(2 * (beta[-1] - beta[0]) * 1.5e-3)
    assert rotation_sense(gamma) == pytest.approx(expected, rel=1e-6)


def test_canvas_keeps_circles_round():
    # braille dots are 2 x 4 per cell and a terminal cell is about 1:2, so the unit
    # circle must span the same number of dots across and down (common practice, no source).
    canvas = Canvas(30, 15)
    col, row = canvas.to_dots(np.exp(1j * np.linspace(0, 2 * np.pi, 2000)))
    assert abs((col.max() - col.min()) - (row.max() - row.min())) <= 1


def test_canvas_sets_the_braille_bit_of_each_point():
    # Unicode braille patterns: dot 1 (top-left) is bit 0x01, dot 8 (bottom-right) is 0x80.
    canvas = Canvas(1, 1)
    canvas.radius = 1.0
    bits = canvas.layer(np.array([-0.5 + 1.5j]))  # top-left dot of the only cell
    assert bits[0, 0] == 0x01


def test_densify_keeps_ends_and_interpolates_linearly():
    g = densify(np.array([0 + 0j, 1 + 1j]), per_step=4)
    assert g[0] == 0 and g[-1] == 1 + 1j
    assert np.allclose(g, np.linspace(0, 1, 5) * (1 + 1j))


def test_magnitude_in_db_is_twenty_log():
    # dB = 20 log10 |S| (IEEE Std 100 definition of the decibel for field quantities).
    assert magnitude_db(np.array([0.1, 1.0, 1j * 0.5])) == pytest.approx([-20.0, 0.0, -6.0206], abs=1e-4)
    assert magnitude_db(np.array([0.0]))[0] == -120.0


def test_point_cap_keeps_first_point_and_at_most_the_cap():
    keep = cap_points(10_001, 401)
    picked = np.arange(10_001)[keep]
    assert picked[0] == 0 and picked.size <= 401
    assert np.arange(200)[cap_points(200, 401)].size == 200


def test_shades_span_the_range():
    assert shade_index(0.0, 0.0, 1.0) == 0
    assert shade_index(1.0, 0.0, 1.0) == len(SHADES) - 1
    assert shade_index(0.5, 0.0, 1.0) == 2
    assert shade_index(float("nan"), 0.0, 1.0) == 0


def test_wear_states():
    assert wear_state(10, 100) == "ok"
    assert wear_state(80, 100) == "worn"
    assert wear_state(100, 100) == "spent"


def test_big_glyph_rows_are_even_and_words_render():
    for ch, rows in GLYPHS.items():
        assert len({len(r) for r in rows}) == 1, ch
    rows = render_big("FAIL")
    assert len(rows) == 3 and len({len(r) for r in rows}) == 1


def test_check_rows_carry_word_symbol_figure_and_limit():
    from rich.console import Console

    c = CheckResult("contact", Verdict.FAIL, -0.4, -10.0, 6e9, "port 1 looks open", "dB")
    console = Console(width=120, record=True)
    console.print(checks_table([c]))
    text = console.export_text()
    assert "✖ FAIL" in text and "-0.4 dB" in text and "-10 dB" in text and "6.0 GHz" in text
    assert format_figure(None, "dB") == "—"


def test_journal_tail_waits_for_a_torn_line(tmp_path):
    path = tmp_path / "journal.jsonl"
    path.write_bytes(b'{"seq":1,"type":"note","payload":{"text":"a"}}\n{"seq":2,"ty')
    tail = JournalTail(path)
    assert [e.seq for e in tail.read_new()] == [1]
    with path.open("ab") as fh:
        fh.write(b'pe":"note","payload":{"text":"b"}}\n')
    events = tail.read_new()
    assert [e.seq for e in events] == [2]
    assert "“b”" in describe(events[0]).plain


def test_cautions_reflow_joins_continuations_and_keeps_every_word():
    from probelog.engine.types import CAUTIONS
    from probelog.tui.screens.cautions import reflow

    out = reflow(CAUTIONS)
    assert out.split() == CAUTIONS.split()  # nothing lost or reordered
    assert not any(line.startswith(" ") for line in out.splitlines())
    assert len(out.splitlines()) == sum(1 for ln in CAUTIONS.splitlines() if not ln.startswith("  "))
    assert reflow("- one\n  two\n- three") == "- one two\n- three"


def test_the_board_names_what_each_contact_figure_measures():
    """Found in tmux on the demo: a raw thru's contact row read '|Sii| worst port
    -0.668 dB, limit -10 dB' (it is the thru's transmission), and the physics
    check's '7.22 x allowance, limit 1' read as failing (higher passes there)."""
    from probelog.checks import Limits
    from probelog.standard_checks import transmission_contact
    from probelog.tui.widgets.verdict_board import quantity_of

    freq = skrf.Frequency(1, 110, 56, unit="GHz")
    media = DefinedGammaZ0(freq, z0_port=50, z0=50, gamma=1j * 2 * np.pi * freq.f / 299_792_458.0)
    thru = media.line(1e-3, "m")  # a lossless matched line: |S21| = 0 dB (physics)
    result = transmission_contact(thru, Limits())
    assert result.verdict is Verdict.PASS and result.unit == "dB"
    assert quantity_of(result) == "raw |S21| ≥ limit"
    # the physics contact check's wording (probelog.contact, copied here): higher passes
    phys = CheckResult("contact", Verdict.PASS, 7.22, 1.0, 1.5e9,
                       "port 1 departs from the probe short (7.22 x the allowance at 1.5 GHz)", "x allowance")
    assert quantity_of(phys) == "off the probe short ≥ limit"
    # a corrected line's transmission signature (probelog.checks.signature wording)
    line = CheckResult("contact", Verdict.PASS, -1.2, -10.0, 2e9, "signal passes (lowest |S21| -1.20 dB up to 10 GHz)",
                       "dB")
    assert quantity_of(line) == "|S21| ≥ limit"
    # a matched site's reflection signature is still a reflection (lower passes)
    refl = CheckResult("contact", Verdict.PASS, -25.0, -10.0, 2e9, "worst |Sii| -25.0 dB: landed", "dB")
    assert quantity_of(refl) == "|Sii| worst port"


def test_a_die_finished_with_a_kept_fail_is_finished_for_goto_and_skip():
    """Die status has six values (probelog.state); the go-to refusal and the
    die-skip guard each listed three finished ones by hand and missed
    'accepted-despite-fail', so the engine was asked to land on, or skip, a die
    with nothing left (its refusal ended in an error dialog)."""
    from types import SimpleNamespace

    from probelog import state as st
    from probelog.tui.screens.probe_text import goto_refusal

    for status in (st.DONE, st.SKIPPED, st.FAILED, st.ACCEPTED_DESPITE_FAIL):
        engine = SimpleNamespace(phase="PROBING", wafer_status={(2, 3): status})
        assert goto_refusal(engine, (2, 3), busy=False) == f"die 2,3 is {status}: nothing left to land on"
    for status in (st.NOT_STARTED, st.PARTIAL):
        engine = SimpleNamespace(phase="PROBING", wafer_status={(2, 3): status})
        assert goto_refusal(engine, (2, 3), busy=False) is None
