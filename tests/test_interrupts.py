"""Interrupting a headless run leaves the bench safe (issue 13, item 1).

The simulated bench runs in its own process (as real instruments would) and the
run reaches it through pyvisa-py over loopback TCP. A signal (SIGINT, SIGTERM,
SIGHUP) or a reader that goes away (``| head -n 2``) must: finish the current
step, separate the probes, journal ``session-closed`` with the cause, print one
line to stderr and exit non-zero. The prober itself is asked afterwards
(``STAGe:Z?``, drivers/dialects/generic-prober.toml's query_z) whether the
probes are up. Exit codes follow the shell convention 128 + signal number
(POSIX shells, from memory; SIGPIPE is 13 on Linux).
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import pytest

from probelog.journal import JOURNAL_NAME, verify
from test_crash_resume import small_plan

ROOT = Path(__file__).resolve().parents[1]
PROBER = tomllib.loads((ROOT / "drivers/dialects/generic-prober.toml").read_text())["commands"]
WAIT_S = 60.0  # one small headless run takes a few seconds; bounded, generous on a loaded machine
pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGHUP"), reason="POSIX signals")


@pytest.fixture
def simbench():
    """`probelog simbench` in its own process; yields (vna, prober) VISA resources.
    Sweeps take their realistic time (points / IF bandwidth), so a signal can
    fall while the probes are down."""
    proc = subprocess.Popen([sys.executable, "-m", "probelog.tui", "simbench", "--seed", "3", "--sweep-time-scale", "1"],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        vna = proc.stdout.readline().split()[1]
        prober = proc.stdout.readline().split()[1]
        yield vna, prober
    finally:
        proc.send_signal(signal.SIGINT)
        try:
            proc.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.communicate()


def ask_prober(resource: str, query: str) -> str:
    """One SCPI query over a plain socket (TCPIP::host::port::SOCKET), newline terminated."""
    _, host, port, _ = resource.split("::")
    with socket.create_connection((host, int(port)), timeout=10) as s:
        s.sendall(query.encode() + b"\n")
        reply = b""
        while not reply.endswith(b"\n"):
            chunk = s.recv(4096)
            assert chunk, f"the prober closed the connection on {query!r}"
            reply += chunk
    return reply.decode().strip()


def start_run(tmp_path: Path, bench: tuple[str, str], stdout=subprocess.PIPE) -> subprocess.Popen:
    plan, _ = small_plan(tmp_path)
    vna, prober = bench
    return subprocess.Popen(
        [sys.executable, "-m", "probelog.tui", "run", str(plan), "--headless", "--dir", str(tmp_path / "s"),
         "--bench", "visa", "--vna", vna, "--prober", prober],
        cwd=ROOT, stdout=stdout, stderr=subprocess.PIPE, text=True, env=dict(os.environ, PYTHONPATH=str(ROOT)))


def wait_until_probing(proc: subprocess.Popen) -> list[str]:
    """Read the run's output until its first site landing is printed."""
    seen = []
    deadline = time.monotonic() + WAIT_S
    while time.monotonic() < deadline:
        line = proc.stdout.readline()
        assert line, f"the run ended before probing: {seen} {proc.stderr.read()[-2000:]}"
        seen.append(line)
        if line.startswith("[1/"):
            return seen
    raise AssertionError(f"no site landing within {WAIT_S} s: {seen}")


def closed_event(tmp_path: Path) -> dict:
    (session,) = [p for p in (tmp_path / "s").iterdir() if p.is_dir()]
    assert verify(session).ok, verify(session).problems
    last = json.loads((session / JOURNAL_NAME).read_bytes().splitlines()[-1])
    assert last["type"] == "session-closed"
    return last["payload"]


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM, signal.SIGHUP], ids=lambda s: s.name)
def test_signal_separates_the_probes_and_journals_the_cause(tmp_path, simbench, sig):
    proc = start_run(tmp_path, simbench)
    try:
        wait_until_probing(proc)
        proc.send_signal(sig)
        _, err = proc.communicate(timeout=WAIT_S)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == 128 + sig, err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith(f"probelog run: stopped by {sig.name}"), err
    assert "probes separated" in lines[0]
    assert ask_prober(simbench[1], PROBER["query_z"]) == "SEP"
    closed = closed_event(tmp_path)
    assert closed["cause"] == sig.name and closed["completed"] is False


def test_broken_pipe_stops_like_a_signal(tmp_path, simbench):
    """`probelog run ... | head -n 2`: the reader takes two lines and leaves."""
    proc = start_run(tmp_path, simbench)
    try:
        first_two = [proc.stdout.readline(), proc.stdout.readline()]
        proc.stdout.close()  # what head does after its second line
        proc.wait(timeout=WAIT_S)
        err = proc.stderr.read()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert all(first_two)
    assert proc.returncode == 141, err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("probelog run: stopped by broken pipe"), err
    assert ask_prober(simbench[1], PROBER["query_z"]) == "SEP"
    assert closed_event(tmp_path)["cause"] == "broken pipe"


def test_run_without_interrupt_has_no_cause(tmp_path, simbench):
    """The passing case: an uninterrupted run ends complete, with no cause, exit 0 or 1."""
    proc = start_run(tmp_path, simbench, stdout=subprocess.DEVNULL)
    _, err = proc.communicate(timeout=WAIT_S * 2)
    assert proc.returncode in (0, 1) and "stopped by" not in err, err
    closed = closed_event(tmp_path)
    assert closed.get("cause") is None and closed["completed"] is (proc.returncode == 0)
    assert ask_prober(simbench[1], PROBER["query_z"]) == "SEP"


# ---------------------------------------------------------------- the bench UI


def _ui(tmp_path: Path, bench: tuple[str, str]):
    """The bench UI in a pseudo-terminal of its own (pty.fork: the run is the session
    leader, so closing the terminal sends it SIGHUP as a closed window would)."""
    import pty
    import threading

    plan, _ = small_plan(tmp_path)
    argv = [sys.executable, "-m", "probelog.tui", "run", str(plan), "--dir", str(tmp_path / "s"),
            "--bench", "visa", "--vna", bench[0], "--prober", bench[1]]
    pid, fd = pty.fork()
    if pid == 0:  # the child: become the UI
        os.chdir(ROOT)
        os.environ.update(TERM="xterm-256color", PYTHONPATH=str(ROOT))
        os.execv(sys.executable, argv)
    screen = bytearray()
    done = threading.Event()

    def drain() -> None:  # the UI blocks when nobody reads its terminal
        import select

        while not done.is_set():
            if select.select([fd], [], [], 0.1)[0]:
                try:
                    screen.extend(os.read(fd, 65536) or b"")
                except OSError:
                    return

    reader = threading.Thread(target=drain, daemon=True)
    reader.start()

    def stop_reading() -> None:
        done.set()
        reader.join()

    return pid, fd, screen, stop_reading


def _journal_types(tmp_path: Path) -> list[str]:
    folders = list((tmp_path / "s").glob("*/journal.jsonl")) if (tmp_path / "s").is_dir() else []
    return [json.loads(x)["type"] for x in folders[0].read_bytes().splitlines()] if folders else []


def _wait_for(what, timeout: float = WAIT_S) -> None:
    deadline = time.monotonic() + timeout
    while not what():
        assert time.monotonic() < deadline, "timed out"
        time.sleep(0.1)


def _exit_code(pid: int, timeout: float = WAIT_S) -> int:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        done, status = os.waitpid(pid, os.WNOHANG)
        if done:
            return os.waitstatus_to_exitcode(status)
        time.sleep(0.1)
    os.kill(pid, signal.SIGKILL)
    os.waitpid(pid, 0)
    raise AssertionError("the UI did not exit")


@pytest.mark.parametrize("how", ["terminal closed", "Ctrl-C"])
def test_ui_closes_the_session_on_hangup_and_ctrl_c(tmp_path, simbench, how):
    pid, fd, screen, stop_reading = _ui(tmp_path, simbench)
    try:
        _wait_for(lambda: "cautions-shown" in _journal_types(tmp_path))
        _wait_for(lambda: b"understood" in screen)
        os.write(fd, b"y")  # cautions read
        _wait_for(lambda: b"land std" in screen[-20000:])
        os.write(fd, b" ")  # land the first cal standard: the probes go down
        _wait_for(lambda: "cal-standard" in _journal_types(tmp_path))
        assert ask_prober(simbench[1], PROBER["query_z"]) == "CONT"  # down on the standard
        if how == "Ctrl-C":
            os.write(fd, b"\x03")
            code = _exit_code(pid)
            stop_reading()
            os.close(fd)
        else:
            stop_reading()
            os.close(fd)  # the window closes: the kernel hangs up the terminal
            code = _exit_code(pid)
    finally:
        try:
            os.kill(pid, 0)
        except OSError:
            pass
        else:
            os.kill(pid, signal.SIGKILL)
    assert code == (129 if how == "terminal closed" else 130)
    assert ask_prober(simbench[1], PROBER["query_z"]) == "SEP"
    closed = closed_event(tmp_path)
    assert closed["cause"] == ("SIGHUP" if how == "terminal closed" else "Ctrl-C") and closed["completed"] is False
