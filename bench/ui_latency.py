"""What the bench UI adds to the operator's wait (called by bench/run.py's ``ui``).

(a) keypress to verdict: the real engine on the simulated bench (zero sweep time,
    real ScpiVna / ScpiProber over loopback), driven through Textual's Pilot. The
    simulated bench runs in its own process (``python -m probelog.tui simbench``), as real
    instruments do: in-process, its replies would queue for the UI's GIL. The
    clock starts when the measure key is pressed and stops when the message that
    follows the verdict board's update is dispatched (``message_hook``: the board
    is updated synchronously inside the ChecksFinished handler, so the next
    message of any kind comes after it). The reference is the same
    ``engine.measure()`` call run headless in this process on the same
    out-of-process bench.
    Medians over ~20 landings, with an accept between landings.
(b) start-up: ``python -m probelog.tui demo`` in a subprocess under a pty, from spawn to
    the first screen's text on the terminal.

Timing targets live here, never in tests (STYLE.md / the brief).
"""

from __future__ import annotations

import asyncio
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

DIES = "[[2, 1], [4, 1], [6, 1], [1, 3], [4, 3], [7, 3], [1, 5], [4, 5], [7, 5], [2, 7], [4, 7], [6, 7]]"
SITES = ["ln-cpw-m9-r2-l500", "ln-cpw-m9-r2-l1500"]


def _plan():
    from rig import demo_plan  # bench/ is on sys.path (python puts the script's folder there)

    return demo_plan(201, sites=SITES, dies=DIES, drift_every=100000)


def headless_landings(rig, root: Path, n: int) -> list[float]:
    """Seconds per ``engine.measure()`` on a calibrated engine, accept untimed."""
    from rig import calibrated_engine

    engine = calibrated_engine(rig, _plan(), root)
    times = []
    try:
        engine.measure()  # warm-up (site model, imports)
        engine.accept()
        for _ in range(n):
            t0 = time.perf_counter()
            engine.measure()
            times.append(time.perf_counter() - t0)
            engine.accept()
    finally:
        engine.close(completed=False)
    return times


def ui_landings(rig, root: Path, n: int) -> list[float]:
    """Seconds from pressing the measure key to the message after the verdict board update."""
    from rig import calibrated_engine
    from textual.worker import WorkerState

    from probelog.tui.app import build_app
    from probelog.tui.messages import ChecksFinished
    from probelog.tui.screens.probe import Probe

    engine = calibrated_engine(rig, _plan(), root)
    marks: dict[str, float | None] = {"checks": None, "after": None}

    def hook(message) -> None:
        if marks["checks"] is not None and marks["after"] is None:
            marks["after"] = time.perf_counter()
        elif isinstance(message, ChecksFinished) and marks["checks"] is None:
            marks["checks"] = time.perf_counter()

    async def idle_bench(pilot) -> None:
        """Wait for the named bench and journal workers, no fixed pauses."""
        app = pilot.app
        while True:
            busy = [w for w in app.workers if w.group in ("bench", "journal")
                    and w.state in (WorkerState.PENDING, WorkerState.RUNNING)]
            if not busy:
                await pilot.pause()
                return
            for w in busy:
                await w.wait()

    async def go() -> list[float]:
        app = build_app(lambda: engine, show_cautions=False)
        times: list[float] = []
        async with app.run_test(size=(120, 40), message_hook=hook) as pilot:
            while not isinstance(app.screen, Probe):
                for w in [w for w in app.workers if w.group == "open"]:
                    await w.wait()
                await pilot.pause()
            for i in range(n + 1):
                marks["checks"] = marks["after"] = None
                # simulate_key posts the key event as a terminal would; Pilot.press
                # would also force repaints while the worker runs and bill them here
                t0 = time.perf_counter()
                app.simulate_key("space")
                while not [w for w in app.workers if w.group == "bench"] and marks["checks"] is None:
                    await asyncio.sleep(0)
                await idle_bench(pilot)
                while marks["after"] is None:  # the message after the board update
                    await pilot.pause()
                board = app.screen.query_one("#board")
                assert board.verdict is not None, board.shown_text  # the board shows a verdict
                if i:  # the first landing warms the plots
                    times.append(marks["after"] - t0)
                await pilot.press("a")
                await idle_bench(pilot)
        return times

    try:
        return asyncio.run(go())
    finally:
        engine.close(completed=False)


def startup_seconds(root: Path, repeat: int) -> list[float]:
    """Spawn ``python -m probelog.tui demo`` under a pty; seconds until the intake screen's text appears."""
    import pty
    import select
    import signal
    import subprocess

    out = []
    for _ in range(repeat):
        master, slave = pty.openpty()
        os.set_blocking(master, False)
        import fcntl
        import struct
        import termios

        fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 40, 120, 0, 0))
        env = dict(os.environ, TERM="xterm-256color", COLUMNS="120", LINES="40")
        t0 = time.perf_counter()
        proc = subprocess.Popen([sys.executable, "-m", "probelog.tui", "demo", "--dir", str(root)], cwd=ROOT,
                                stdin=slave, stdout=slave, stderr=slave, env=env, start_new_session=True)
        os.close(slave)
        seen = b""
        t_first = None
        deadline = t0 + 20.0
        try:
            while time.perf_counter() < deadline:
                ready, _, _ = select.select([master], [], [], 0.05)
                if ready:
                    try:
                        seen += os.read(master, 65536)
                    except OSError:
                        break
                    if b"NEW SESSION" in seen:
                        t_first = time.perf_counter() - t0
                        break
                if proc.poll() is not None:
                    break
        finally:
            os.killpg(proc.pid, signal.SIGTERM)  # the process group we started
            try:
                proc.wait(5)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait()
            os.close(master)
        if t_first is None:
            raise RuntimeError(f"probelog demo showed no intake screen within 20 s; output tail: {seen[-400:]!r}")
        out.append(t_first)
    return out


class ProcessRig:
    """The simulated bench in its own process (``python -m probelog.tui simbench``), as a
    real VNA and prober are: their replies never wait for this process's GIL.
    Same attributes as bench/rig.py's SimRig that the engine needs (``bench``)."""

    def __init__(self, seed: int = 5):
        import subprocess

        from probelog.drivers.prober import ScpiProber
        from probelog.drivers.vna import ScpiVna
        from probelog.bench import Bench

        self.proc = subprocess.Popen([sys.executable, "-m", "probelog.tui", "simbench", "--seed", str(seed),
                                      "--fault-rate", "0"], cwd=ROOT, stdout=subprocess.PIPE,
                                     stderr=subprocess.PIPE, text=True)
        try:
            found: dict[str, str] = {}
            while len(found) < 2:
                line = self.proc.stdout.readline()
                if not line:
                    raise RuntimeError(f"simbench exited before naming its resources: {self.proc.stderr.read()[-400:]}")
                word, _, res = line.partition(" ")
                if word in ("vna", "prober"):
                    found[word] = res.strip()
            self.vna_res, self.prober_res = found["vna"], found["prober"]
            self.vna = ScpiVna(self.vna_res)
            self.prober = ScpiProber(self.prober_res, probe_ids=["GSG100-A17", "GSG100-B04"])
            self.bench = Bench(vna=self.vna, prober=self.prober, description="bench rig (own process)")
        except BaseException:
            self._stop()
            raise

    def _stop(self) -> None:
        import signal
        import subprocess

        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)  # simbench stops its servers on Ctrl-C
            try:
                self.proc.wait(5)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self.proc.stdout.close()
        self.proc.stderr.close()

    def close(self) -> None:
        try:
            self.bench.close()
        finally:
            self._stop()


def measure_ui(report, quick: bool) -> None:
    n = 8 if quick else 20
    rig = ProcessRig()
    try:
        with tempfile.TemporaryDirectory() as tmp:
            tmp = Path(tmp)
            t_head = headless_landings(rig, tmp / "headless", n)
            t_ui = ui_landings(rig, tmp / "ui", n)
    finally:
        rig.close()
    ui_med, head_med = statistics.median(t_ui), statistics.median(t_head)
    ratio = ui_med / head_med
    report(f"keypress to verdict, {n} landings (median)", f"{ui_med * 1e3:.1f} ms in the UI",
           f"{head_med * 1e3:.1f} ms engine.measure() headless", ratio, "<= 1.3x", ratio <= 1.3)
    with tempfile.TemporaryDirectory() as tmp:
        starts = startup_seconds(Path(tmp), 2 if quick else 3)
    best = min(starts)
    report("start-up to the first screen (python -m probelog.tui demo, pty)", f"{best:.2f} s (best of {len(starts)})",
           "1.5 s budget", best / 1.5, "< 1.5 s", best < 1.5)
