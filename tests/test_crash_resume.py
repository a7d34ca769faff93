"""Crash trials of a whole headless run: kill -9 at random moments, then resume.

tests/test_journal.py kills bare journal appends; here the process killed is a
real ``probelog run --headless`` on the simulated bench (VNA and prober behind
pyvisa-py, random faults on), so a kill can fall anywhere: while the bench
starts, mid-sweep, between a landing's data files and its event, during a
calibration solve, while the session closes.

What must hold after every kill (the journal's contract, docs/journal-events.md):
every event the run acknowledged (its fsync returned) is still there byte for
byte; the only damage is a torn last line or data files no event names yet;
``probelog run --resume`` recovers them and finishes the plan with every
(die, site) decided exactly once; ``probelog verify`` then passes.

References outside the project: POSIX semantics of SIGKILL (no handler runs,
the kernel drops the process's flock) and of fsync; hashlib's SHA-256
(FIPS 180-4) for the line hashes the journal promises.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import random
import re
import signal
import subprocess
import sys
import time
from collections import Counter
from importlib import resources
from pathlib import Path

import pytest

import probelog.journal as jmod
from probelog.journal import JOURNAL_NAME, Journal, verify
from probelog.tui.cli import main as cli

ROOT = Path(__file__).resolve().parents[1]
TRIALS = 20
BUDGET_S = 150.0  # about 60 s on 2 cores; fail loudly rather than crawl on a slow machine
RUN_TIMEOUT_S = 60.0  # one headless run of the small plan takes about 2 s
ACK_RE = re.compile(r"^ack (\d+) ([0-9a-f]{64})$")
# "[4/6] die 4,5 ln-cpw-m9-r2-l500 L1 fail -> re-land (...)": printed after the decision
SITE_LINE_RE = re.compile(r"^\[\d+/\d+\] die (\d+),(\d+) (\S+) L(\d+) (\w+)(?: -> (re-land|given up))?")


def small_plan(folder: Path) -> tuple[Path, list[tuple[tuple[int, int], str]]]:
    """The built-in demo plan cut down to 2 dies x 3 sites at 51 points, drift
    re-measured every 3 landings; returns the file and its (die, site) list."""
    text = (resources.files("probelog") / "plans" / "demo.toml").read_text()
    kit = Path(str(resources.files("probelog") / "kits" / "plx7.toml"))
    subs = [
        (r"(?ms)^dies = \[.*?^\]", "dies = [[4, 3], [4, 5]]"),
        (r"(?ms)^sites = \[.*?^\]", 'sites = ["ln-cpw-m9-r2-l500", "ver-ostub", "dev-ind"]'),
        (r"(?m)^points = \d+", "points = 51"),
        (r"(?m)^drift_every_landings = \d+", "drift_every_landings = 3"),
        (r'(?m)^kit = "[^"]*"', f'kit = "{kit}"'),
    ]
    for pattern, repl in subs:
        text, n = re.subn(pattern, lambda _m, r=repl: r, text, count=1)
        assert n == 1, f"demo plan changed: {pattern!r} no longer matches"
    path = folder / "plan.toml"
    path.write_text(text)
    sites = ["ln-cpw-m9-r2-l500", "ver-ostub", "dev-ind"]
    return path, [((4, 3), s) for s in sites] + [((4, 5), s) for s in sites]


def _env() -> dict[str, str]:
    return dict(os.environ, PYTHONPATH=str(ROOT), PROBELOG_TRACE_ACKS="1")


def _cmd(*args: str) -> list[str]:
    return [sys.executable, "-m", "probelog.tui", *args]


def _bench_args(seed: int) -> list[str]:
    # Chance faults can land on a cal standard subtly enough to pass its contact
    # check; the calibration guard then refuses the cal (rightly) and headless redoes
    # it. Five redos make three refusals in a row, which ends a run with exit 1 and
    # no completed plan, too rare to matter to a trial about crashes.
    return ["--seed", str(seed), "--fault-rate", "0.05", "--retries", "5"]


def _complete_lines(folder: Path) -> list[bytes]:
    data = (folder / JOURNAL_NAME).read_bytes()
    return data[: data.rfind(b"\n") + 1].split(b"\n")[:-1]


def _acks(stderr: str) -> dict[int, str]:
    return {int(m.group(1)): m.group(2) for line in stderr.splitlines() if (m := ACK_RE.match(line))}


def _records(lines: list[bytes]) -> list[dict]:
    return [json.loads(raw) for raw in lines]


def _check_acked_present(acked: dict[int, str], lines: list[bytes], what: str) -> None:
    """Every acknowledged (seq, sha256) is the line at that seq, byte for byte."""
    for seq, want in sorted(acked.items()):
        assert seq <= len(lines), f"{what}: acknowledged event {seq} lost ({len(lines)} lines left)"
        got = hashlib.sha256(lines[seq - 1]).hexdigest()
        assert got == want, f"{what}: acknowledged event {seq} changed"


def _check_printed_decisions_present(stdout: str, records: list[dict], what: str) -> None:
    """The runner prints a site line only after the decision was journaled."""
    decided = {(tuple(r["payload"]["die"]), r["payload"]["site"], r["payload"]["landing"], r["payload"]["action"])
               for r in records if r["type"] == "decision" and not r["payload"].get("standard")}
    action_of = {None: "accept", "re-land": "reland", "given up": "give-up"}
    for line in stdout.split("\n")[:-1]:  # a line cut by the kill has no newline yet
        if m := SITE_LINE_RE.match(line):
            key = ((int(m.group(1)), int(m.group(2))), m.group(3), int(m.group(4)), action_of[m.group(6)])
            assert key in decided, f"{what}: printed {line[:60]!r} but its decision is not in the journal"


def _only_crash_damage(folder: Path, n_lines: int, what: str) -> None:
    """Read-only verify right after a kill: the chain of complete lines holds; the
    only problems are a torn last line and data files whose event never came."""
    for p in verify(folder).problems:
        torn = p.line == n_lines + 1 and p.message.startswith("torn last line")
        orphan = p.line is None and p.message.startswith("unreferenced data file")
        assert torn or orphan, f"{what}: damage a kill cannot explain: {p}"


def _check_finished(folder: Path, plan_sites: list, what: str) -> list[dict]:
    """Closed as completed, every (die, site) decided once, verify passes (CLI)."""
    records = _records(_complete_lines(folder))
    assert records[-1]["type"] == "session-closed" and records[-1]["payload"]["completed"] is True, \
        f"{what}: last event is {records[-1]['type']} {records[-1]['payload']}"
    final = Counter((tuple(r["payload"]["die"]), r["payload"]["site"]) for r in records
                    if r["type"] == "decision" and not r["payload"].get("standard")
                    and r["payload"]["action"] != "reland")
    assert final == Counter(plan_sites), f"{what}: decided sites {dict(final)}"
    v = subprocess.run(_cmd("verify", str(folder)), cwd=ROOT, env=_env(), capture_output=True,
                       text=True, timeout=RUN_TIMEOUT_S)
    assert v.returncode == 0, f"{what}: verify after resume: {v.stdout}{v.stderr}"
    return records


def _wait_for_first_ack(proc: subprocess.Popen, err_path: Path) -> float:
    """Poll until the run acknowledged its first event; the time it did."""
    deadline = time.monotonic() + RUN_TIMEOUT_S
    while "ack " not in err_path.read_text():
        assert proc.poll() is None, f"the run exited ({proc.returncode}) before its first event: " \
                                    f"{err_path.read_text()}"
        assert time.monotonic() < deadline, "no first event within the run timeout"
        time.sleep(0.01)
    return time.monotonic()


@pytest.mark.slow
def test_kill_nine_during_headless_runs_then_resume_finishes(tmp_path):
    plan, plan_sites = small_plan(tmp_path)
    rng = random.Random(20261203)
    start = time.monotonic()

    # One run without a kill: it must finish, and its timing spreads the kills.
    base = tmp_path / "base"
    with open(tmp_path / "base.out", "wb") as out, open(tmp_path / "base.err", "wb") as err:
        t0 = time.monotonic()
        proc = subprocess.Popen(_cmd("run", str(plan), "--headless", "--dir", str(base), *_bench_args(1)),
                                cwd=ROOT, env=_env(), stdout=out, stderr=err)
        startup_s = _wait_for_first_ack(proc, tmp_path / "base.err") - t0
        proc.wait(timeout=RUN_TIMEOUT_S)
        session_s = time.monotonic() - t0 - startup_s
    stdout, stderr = (tmp_path / "base.out").read_text(), (tmp_path / "base.err").read_text()
    assert proc.returncode == 0, stdout + stderr
    (folder,) = base.iterdir()
    assert stdout.splitlines()[-1] == str(folder)
    _check_acked_present(_acks(stderr), _complete_lines(folder), "uninterrupted run")
    _check_finished(folder, plan_sites, "uninterrupted run")

    outcomes = Counter()
    for trial in range(TRIALS):
        elapsed = time.monotonic() - start
        if elapsed > BUDGET_S:
            pytest.fail(f"only {trial} of {TRIALS} kill trials in {elapsed:.0f} s (budget {BUDGET_S:.0f} s): "
                        "this machine is too slow for the crash trials")
        what = f"trial {trial}"
        root = tmp_path / f"t{trial}"
        seed = rng.randrange(1, 10_000)
        out_path, err_path = tmp_path / f"t{trial}.out", tmp_path / f"t{trial}.err"
        with open(out_path, "wb") as out, open(err_path, "wb") as err:
            proc = subprocess.Popen(_cmd("run", str(plan), "--headless", "--dir", str(root), *_bench_args(seed)),
                                    cwd=ROOT, env=_env(), stdout=out, stderr=err)
            if trial % 5 == 4:  # now and then while it starts: imports, the bench, the session folder
                delay = rng.uniform(0.3, startup_s + 0.2)
            else:  # mostly while the session runs, from its first event to its last
                _wait_for_first_ack(proc, err_path)
                delay = rng.uniform(0.0, session_s)
            try:
                proc.wait(timeout=delay)
            except subprocess.TimeoutExpired:
                proc.send_signal(signal.SIGKILL)
            proc.wait(timeout=RUN_TIMEOUT_S)
        stdout, stderr = out_path.read_text(), err_path.read_text()
        assert "Traceback" not in stderr, f"{what}: {stderr}"
        if proc.returncode == 0:  # finished before the kill came
            outcomes["finished"] += 1
            (folder,) = [p for p in root.iterdir() if not p.name.startswith(".")]
            _check_acked_present(_acks(stderr), _complete_lines(folder), what)
            _check_finished(folder, plan_sites, what)
            continue
        assert proc.returncode == -signal.SIGKILL, f"{what}: exit {proc.returncode}: {stderr}"
        acked = _acks(stderr)
        # A start killed while its folder is built leaves only a hidden staging folder.
        folders = [p for p in root.iterdir() if not p.name.startswith(".")] if root.exists() else []
        if not folders:  # killed while starting: nothing can have been acknowledged
            assert not acked
            outcomes["before the session folder"] += 1
            continue
        (folder,) = folders
        before = _complete_lines(folder)
        _check_acked_present(acked, before, what)
        _check_printed_decisions_present(stdout, _records(before), what)
        _only_crash_damage(folder, len(before), what)
        resume = _cmd("run", "--resume", str(folder), "--headless", *_bench_args(seed + 1))
        if not before:  # killed between creating the folder and its first event
            res = subprocess.run(resume, cwd=ROOT, env=_env(), capture_output=True, text=True,
                                 timeout=RUN_TIMEOUT_S)
            assert res.returncode == 2 and "Traceback" not in res.stderr, res.stderr
            assert len(res.stderr.strip().splitlines()) == 1 and str(folder) in res.stderr
            outcomes["before the first event"] += 1
            continue
        last = json.loads(before[-1])
        if last["type"] == "session-closed" and last["payload"]["completed"]:  # killed while exiting
            outcomes["after closing"] += 1
            _check_finished(folder, plan_sites, what)
            continue
        if trial % 2 == 0:
            # Recover with the journal alone (torn tail aside, orphans adopted), then
            # `probelog verify` must pass before anything else runs; the killed
            # process's lock was dropped by the kernel.
            Journal.open(folder).close()
            v = subprocess.run(_cmd("verify", str(folder)), cwd=ROOT, env=_env(), capture_output=True,
                               text=True, timeout=RUN_TIMEOUT_S)
            assert v.returncode == 0, f"{what}: verify after recovery: {v.stdout}{v.stderr}"
        res = subprocess.run(resume, cwd=ROOT, env=_env(), capture_output=True, text=True, timeout=RUN_TIMEOUT_S)
        assert res.returncode == 0, f"{what}: resume exit {res.returncode}: {res.stdout[-2000:]}{res.stderr[-2000:]}"
        assert res.stdout.splitlines()[-1] == str(folder)
        after = _complete_lines(folder)
        assert after[: len(before)] == before, f"{what}: resume rewrote lines written before the kill"
        _check_acked_present(_acks(res.stderr), after, f"{what} resume")
        _check_finished(folder, plan_sites, what)
        outcomes["killed and resumed"] += 1
    print("crash trials:", dict(outcomes))
    # the kills did fall mid-run, not only before or after it
    assert outcomes["killed and resumed"] >= TRIALS // 2, dict(outcomes)


# ------------------------------------------------------------------ file names


def test_verification_landing_does_not_collide_with_a_relanded_standard(tmp_path):
    """Found by the kill trials: cal2's thru standard re-landed once is stored as
    cal-thru-L2, and cal2's verification landing on the same thru site was
    landing 2 of that site too; both went to data/cal/cal2/cal-thru-L2-raw.s2p,
    which the journal refuses to overwrite."""
    import io

    import probelog.session as S
    from probelog.headless import run_headless
    from probelog.plan import load_plan_text
    from tests._engine_fakes import fake_bench, plan_text

    e = S.Engine(load_plan_text(plan_text(), "fake.toml"), fake_bench(), Journal.create(tmp_path, "s1"), "t")
    while e.next_step is not None:
        e.measure()
    e.compute_calibration()  # verification lands on cal-thru: its landing 1
    e.redo_calibration("test: measure the standards again")
    while e.next_step is not None:
        out = e.measure()
        if out.step.standard == "thru" and out.step.landing == 1:
            e.reland("test: thru landed badly")  # the standard's landing 2 is cal-thru-L2
    cal = e.compute_calibration()  # verification on cal-thru is its landing 2
    assert cal.cal_id == "cal2" and cal.ok
    ver_files = [o.files["raw"] for o in cal.verification]
    std_files = {ev.payload["raw"]["path"] for ev in e.journal.events() if ev.type == "cal-standard"}
    assert len(set(ver_files)) == 2 and not set(ver_files) & std_files
    e.accept_calibration("test")
    assert run_headless(e, retries=1, out=io.StringIO()).completed
    assert verify(tmp_path / "s1").ok


# ------------------------------------------------------------------ full disk


def test_full_disk_mid_run_stops_with_one_line_and_resume_finishes(tmp_path, monkeypatch, capsys):
    """The disk fills while a landing's event is written: its data files are on
    disk, its event is not. The CLI says so in one line and exits 1; every event
    written before stays; once there is space, --resume adopts the files and
    finishes the plan."""
    plan, plan_sites = small_plan(tmp_path)
    real_write_all = jmod._write_all
    landings = []

    def fills_up(fd, data):  # the journal module's only write path (events and data files)
        if b'"type":"landing"' in bytes(data):
            landings.append(1)
        if len(landings) >= 3:  # from the third landing event on, nothing fits
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real_write_all(fd, data)

    monkeypatch.setattr(jmod, "_write_all", fills_up)
    root = tmp_path / "s"
    rc = cli(["run", str(plan), "--headless", "--dir", str(root), "--seed", "5", "--fault-rate", "0"])
    out, err = capsys.readouterr()
    monkeypatch.undo()
    (folder,) = root.iterdir()
    assert rc == 1, out + err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    assert "disk is full" in err and f"--resume {folder}" in err
    before = _complete_lines(folder)
    records = _records(before)
    assert [r["type"] for r in records].count("landing") == 2  # the third one did not fit
    _check_printed_decisions_present(out, records, "full disk")
    _only_crash_damage(folder, len(before), "full disk")

    rc = cli(["run", "--resume", str(folder), "--headless", "--seed", "6", "--fault-rate", "0"])
    out, err = capsys.readouterr()
    assert rc == 0, out + err
    after = _complete_lines(folder)
    assert after[: len(before)] == before
    adopted = [p["path"] for r in _records(after) if r["type"] == "recovered" for p in r["payload"]["adopted"]]
    assert len(adopted) == 2 and all("/L1-" in p for p in adopted)  # raw and corrected of the lost landing
    _check_finished(folder, plan_sites, "full disk")
