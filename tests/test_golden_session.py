"""The golden-file check in a session: journaled hash, resume that trusts
nothing, and the verdict of a first-die landing on the benches.

Outside references: the fake bench's device is an ideal series 300 pH inductor
(tests/_engine_fakes.py); its S between two 50-ohm ports is 2 Z0 / (2 Z0 + j w L)
for S21 (Pozar, Microwave Engineering, 4th ed., table 4.2, from memory). The
simulated bench's dev-ind is the two-turn spiral of drivers/simbench/chip.toml
(300 pH, 1.2 ohm, 10 fF to ground at each end), its true S given by the
bench's own device model (SimBench.site_network).
"""

from __future__ import annotations

import io
import sys
from contextlib import redirect_stdout
from pathlib import Path

import msgspec
import numpy as np
import pytest

import probelog.session as S
from probelog import events as ev
from probelog.journal import Journal
from probelog.plan import load_plan
from probelog.verdicts import Verdict
from tests._engine_fakes import fake_bench, plan_text
from tests.test_golden import series_l, write_golden

F_GOLDEN = np.linspace(1e9, 67e9, 34)  # the fake plan sweeps 1-67 GHz in 41 points


def plan_file(tmp_path: Path, l_h: float = 300e-12, extra: str = "") -> Path:
    """The fake plan in ``tmp_path`` with a golden file (a series ``l_h`` inductor) for dev-ind."""
    write_golden(tmp_path / "dev-ind.s2p", F_GOLDEN, series_l(F_GOLDEN, l_h))
    marker = 'name = "dev-ind"\n'
    p = tmp_path / "plan.toml"
    p.write_text(plan_text().replace(marker, marker + 'golden_file = "dev-ind.s2p"\n' + extra), encoding="utf-8")
    return p


def calibrated(tmp_path: Path, plan: Path) -> S.Engine:
    e = S.Engine(load_plan(plan), fake_bench(), Journal.create(tmp_path, "s1"), operator="tester")
    while e.next_step is not None:
        e.measure()
    e.compute_calibration()
    e.accept_calibration()
    return e


def landing_of(e: S.Engine, site: str):
    """Measure (accepting) until ``site`` is landed; its outcome."""
    while True:
        out = e.measure()
        if out.step.site == site:
            return out
        e.accept()


def golden_of(out) -> object:
    return next(c for c in out.checks if c.name == "golden")


def test_the_right_golden_passes_on_the_first_die_and_its_hash_is_journaled(tmp_path):
    e = calibrated(tmp_path, plan_file(tmp_path))
    out = landing_of(e, "dev-ind")
    assert out.step.die == (1, 1)  # the first die: nothing earlier to compare with
    g = golden_of(out)
    assert g.verdict is Verdict.PASS, g.message
    opened = e.state.opened
    assert opened is not None
    import hashlib

    assert opened.golden_sha256 == {"dev-ind": hashlib.sha256((tmp_path / "dev-ind.s2p").read_bytes()).hexdigest()}
    e.journal.close()


def test_a_golden_of_another_device_fails_on_the_first_die_naming_port_pair_and_frequency(tmp_path):
    # golden says 200 pH, the die has 300 pH: S21 phase -atan(wL / 2 Z0) differs by 9 degrees
    # at 67 GHz (Pozar table 4.2), |S11| by 3.5 dB where it is small
    e = calibrated(tmp_path, plan_file(tmp_path, 200e-12))
    g = golden_of(landing_of(e, "dev-ind"))
    assert g.verdict is Verdict.FAIL
    assert "S11 |S|" in g.message and "GHz" in g.message and "dev-ind.s2p" in g.message
    e.journal.close()


def test_resume_refuses_a_changed_golden_file_with_one_line_naming_it(tmp_path):
    plan = plan_file(tmp_path)
    e = calibrated(tmp_path, plan)
    landing_of(e, "dev-ind")
    e.checkpoint()  # the resume starts from the snapshot: the journaled hash must survive it
    e.journal.close()  # a crash
    ok = S.Engine.resume(tmp_path / "s1", fake_bench())  # unchanged: resumes
    ok.journal.close()
    write_golden(tmp_path / "dev-ind.s2p", F_GOLDEN, series_l(F_GOLDEN, 310e-12))  # someone re-saved it
    with pytest.raises(S.EngineError) as info:
        S.Engine.resume(tmp_path / "s1", fake_bench())
    msg = str(info.value)
    assert "\n" not in msg and str((tmp_path / "dev-ind.s2p").resolve()) in msg and "changed" in msg
    (tmp_path / "dev-ind.s2p").unlink()
    with pytest.raises(S.EngineError) as gone:
        S.Engine.resume(tmp_path / "s1", fake_bench())
    assert "dev-ind.s2p: no such file" in str(gone.value) and "golden_file" in str(gone.value)


def test_a_journal_written_before_golden_files_still_decodes():
    # a session-opened payload of schema 3 as written before the field existed
    raw = {"schema": 3, "session_id": "s", "plan_text": "x", "probes": ["P1"], "bench": {}, "settings": {}}
    opened = msgspec.convert(raw, ev.SessionOpened)
    assert opened.golden_sha256 == {}


# ---------------------------------------------------------------- the simulated bench, headless


def sim_run(tmp_path: Path, faults: list[str], golden_site: str = "dev-ind") -> tuple[int, list[dict]]:
    """The demo plan on its first 2 dies with a golden file for dev-ind: its true S
    on another die (4, 5) of another wafer (seed 99) from the bench's device model,
    on 56 points (the sweep has 201); dev-ind's pre-check off so a lifted tip
    reaches the full sweep. Returns the exit code and dev-ind's first landings."""
    sys.path.insert(0, str(Path(__file__).parent))
    import _fault_matrix as fm
    from probelog.drivers.simbench.bench import SimBench
    from probelog.tui.cli import main

    f = np.linspace(1e9, 110e9, 56)
    SimBench(seed=99).site_network((4, 5), golden_site, f).write_touchstone(str(tmp_path / "golden"),
                                                                          skrf_comment=False)
    text, _, _ = fm.plan_text(2)
    marker = 'name = "dev-ind"\n'
    text = text.replace(marker, marker + 'golden_file = "golden.s2p"\nprecheck = false\n')
    (tmp_path / "plan.toml").write_text(text, encoding="utf-8")
    argv = ["run", str(tmp_path / "plan.toml"), "--headless", "--dir", str(tmp_path / "s"), "--seed", "7",
            "--fault-rate", "0", "--retries", "0"] + [a for x in faults for a in ("--fault", x)]
    with redirect_stdout(io.StringIO()):
        code = main(argv)
    folder = next((tmp_path / "s").iterdir())
    return code, [e.payload for e in Journal.open(folder).events()
                  if e.type == "landing" and e.payload["site"] == "dev-ind" and e.payload["landing"] == 1]


def test_simbench_clean_dev_ind_matches_a_golden_from_its_device_model(tmp_path):
    _, landings = sim_run(tmp_path, [])
    assert len(landings) == 2
    for p in landings:
        g = next(c for c in p["checks"] if c["name"] == "golden")
        assert g["verdict"] == "pass", g["message"]


def test_simbench_lifted_tip_on_the_first_die_fails_the_golden_check(tmp_path):
    _, landings = sim_run(tmp_path, ["lifted-1@2,1:dev-ind#all"])
    first = landings[0]
    assert first["die"] == [2, 1]
    g = next(c for c in first["checks"] if c["name"] == "golden")
    assert g["verdict"] == "fail" and "S21" in g["message"] and "golden.s2p" in g["message"], g["message"]


def test_simbench_golden_of_the_wrong_device_fails(tmp_path):
    # dev-mim's model as dev-ind's golden: a series capacitor is not an inductor
    _, landings = sim_run(tmp_path, [], golden_site="dev-mim")
    g = next(c for c in landings[0]["checks"] if c["name"] == "golden")
    assert g["verdict"] == "fail", g["message"]


def test_a_bad_golden_file_stops_the_run_before_any_session_folder(tmp_path):
    from probelog.tui.cli import main

    p = plan_file(tmp_path)
    (tmp_path / "dev-ind.s2p").write_text("# GHz S RI R 50\n1 0 0 1 0 1 0 0 0\n", encoding="utf-8")  # one point
    err = io.StringIO()
    from contextlib import redirect_stderr

    with redirect_stdout(io.StringIO()), redirect_stderr(err):
        code = main(["run", str(p), "--headless", "--dir", str(tmp_path / "s")])
    assert code == 2
    assert "site[8].golden_file" in err.getvalue() and "one frequency point" in err.getvalue()
    assert not (tmp_path / "s").exists() or not any((tmp_path / "s").iterdir())
