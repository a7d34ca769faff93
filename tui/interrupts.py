"""Interrupts of a run: SIGINT, SIGTERM, SIGHUP and a reader that went away.

A signal never cuts a step in half: the handler only records the cause, and
the run stops between two steps (the current sweep is finished and journaled),
separates the probes, journals ``session-closed`` with the cause, prints one
line to stderr and exits with 128 + the signal number (141 for a broken pipe,
as a shell reports a process that SIGPIPE ended). Instrument I/O is bounded by
the VISA timeout, so the wait for the current step is too.

Used by ``probelog run --headless`` (around the whole run) and by the UI
(``ui_signals``: a terminal that closes sends SIGHUP; Ctrl-C there is a key).
"""

from __future__ import annotations

import os
import signal
import sys
import threading
import time
from contextlib import contextmanager
from typing import IO, Any, Callable, Iterator

# Signals that ask a run to stop; SIGHUP does not exist on Windows.
STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, n))
BROKEN_PIPE = "broken pipe"
_EXIT_BROKEN_PIPE = 128 + 13  # SIGPIPE is 13 on Linux and the BSDs


class StopRequest:
    """Records the first reason to stop; call it to read it (None: go on)."""

    def __init__(self) -> None:
        self.cause: str | None = None
        self.signum: int | None = None

    def __call__(self) -> str | None:
        return self.cause

    def set(self, cause: str, signum: int | None = None) -> None:
        if self.cause is None:  # the first cause is the one journaled
            self.cause, self.signum = cause, signum

    @property
    def exit_code(self) -> int:
        if self.signum is not None:
            return 128 + self.signum
        return _EXIT_BROKEN_PIPE if self.cause == BROKEN_PIPE else 1

    def _on_signal(self, signum: int, _frame: Any) -> None:
        self.set(signal.Signals(signum).name, signum)


@contextmanager
def stop_on_signals(stop: StopRequest) -> Iterator[StopRequest]:
    """Route SIGINT, SIGTERM and SIGHUP to ``stop`` while the block runs (main
    thread only, as Python requires); the previous handlers come back after."""
    old = {sig: signal.signal(sig, stop._on_signal) for sig in STOP_SIGNALS}
    try:
        yield stop
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)


class GuardedOutput:
    """A text stream that turns a broken pipe (``probelog run ... | head``) into a
    stop request instead of an exception in the middle of the walk; output after
    that goes nowhere. Everything else is passed to the wrapped stream."""

    def __init__(self, stream: IO[str], stop: StopRequest) -> None:
        self._stream = stream
        self._stop = stop
        self._broken = False

    def _guard(self, action: Callable[[], Any]) -> None:
        if self._broken:
            return
        try:
            action()
        except BrokenPipeError:
            self._broken = True
            self._stop.set(BROKEN_PIPE)
            _silence(self._stream)

    def write(self, text: str) -> int:
        self._guard(lambda: self._stream.write(text))
        return len(text)

    def flush(self) -> None:
        self._guard(self._stream.flush)

    def isatty(self) -> bool:
        return not self._broken and self._stream.isatty()

    def fileno(self) -> int:
        return self._stream.fileno()

    @property
    def encoding(self) -> str:
        return getattr(self._stream, "encoding", "utf-8")


def _silence(stream: IO[str]) -> None:
    """Point the stream's descriptor at the null device, so the interpreter's own
    flush at exit does not report the broken pipe a second time (Python docs,
    "Note on SIGPIPE" in the signal module)."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, stream.fileno())
        os.close(devnull)
    except (OSError, ValueError):  # not a real descriptor (a test's StringIO)
        pass


def stopped_line(stop: StopRequest, session_dir: object, separated: bool) -> str:
    """The one line printed to stderr when a run stops on a signal or a broken pipe."""
    probes = "probes separated" if separated else "could NOT confirm the probes separated: check the prober"
    return (f"probelog run: stopped by {stop.cause} after the current step; {probes}; "
            f"session closed as interrupted, resume with --resume {session_dir}")


def report(line: str) -> None:
    try:
        print(line, file=sys.stderr, flush=True)
    except (BrokenPipeError, OSError):  # stderr gone too (terminal closed): the journal has it
        pass


# ---------------------------------------------------------------- the bench UI


@contextmanager
def ui_signals(app: Any) -> Iterator[StopRequest]:
    """While the bench UI runs: SIGTERM, SIGHUP (the terminal was closed) and
    SIGINT (``kill -INT``; Ctrl-C in the UI is a key) close the session the way
    the quit key does, without asking: after the bench step in progress, probes
    separated, the cause journaled. ``app.close_cause`` carries the cause to the
    closing worker; the caller prints :func:`stopped_line`-style news after the
    app has given the terminal back."""
    import asyncio

    stop = StopRequest()

    def on_signal(signum: int, frame: Any) -> None:
        first = stop.cause is None
        stop._on_signal(signum, frame)
        if not first:
            return
        if signum == getattr(signal, "SIGHUP", None):
            # The terminal is gone: the UI can draw nothing more, and Textual's own
            # shutdown blocks writing to it. Close from a plain thread, then leave.
            threading.Thread(target=_close_and_leave, args=(app, stop), daemon=True,
                             name="probelog-hangup").start()
            return
        try:
            loop = asyncio.get_running_loop()
        except RuntimeError:  # the app is not running (yet, or any more)
            return
        # a signal handler may interrupt the event loop anywhere: hand over safely
        loop.call_soon_threadsafe(lambda: asyncio.ensure_future(_close_for_signal(app, stop)))

    def on_ctrl_c() -> None:
        # In the UI Ctrl-C is a key (the terminal is in raw mode), not SIGINT; an
        # input that has the focus still takes it as copy (its own binding).
        if stop.cause is None:
            stop.set("Ctrl-C", signal.SIGINT)
            asyncio.ensure_future(_close_for_signal(app, stop))

    app.action_help_quit = on_ctrl_c  # Textual binds ctrl+c to help_quit on every app
    old = {sig: signal.signal(sig, on_signal) for sig in STOP_SIGNALS}
    try:
        yield stop
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)


async def _close_for_signal(app: Any, stop: StopRequest) -> None:
    app.close_cause = stop.cause
    # the instrument step (or the session opening) in progress finishes first:
    # engine calls are not reentrant and the probes must not move under a sweep
    busy = [w for w in app.workers if w.group in ("bench", "open") and w.is_running]
    if busy:
        await app.workers.wait_for_complete(busy)
    if getattr(app, "engine", None) is None:
        app.exit(stop.exit_code)
    elif not getattr(app, "_session_closing", False):
        app._start_closing()


def _running(app: Any, groups: tuple[str, ...]) -> bool:
    return any(w.group in groups and w.is_running for w in list(app.workers))


def _close_and_leave(app: Any, stop: StopRequest, wait_s: float = 120.0) -> None:
    """After SIGHUP: wait (bounded) for the session opening or the bench step in
    progress, close the session with the cause (probes separated), close the
    bench, end the process with 128 + SIGHUP."""
    deadline = time.monotonic() + wait_s
    while _running(app, ("open", "bench", "closing")) and time.monotonic() < deadline:
        time.sleep(0.05)
    engine = getattr(app, "engine", None)
    if engine is not None and not getattr(app, "_session_closing", False):
        try:
            engine.close(cause=stop.cause)
        except Exception:  # nothing can be shown any more; resume tells what is missing
            pass
        bench = getattr(engine, "bench", None)
        if bench is not None:
            try:
                bench.close()
            except Exception:
                pass
    os._exit(stop.exit_code)
