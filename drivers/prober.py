"""Wafer prober drivers and the contact interlock they all share.

The interlock (:class:`InterlockedProber`): no XY move while the probes are, or
may be, in contact, whatever the caller does. ``move_to`` raises
:class:`~probelog.drivers.errors.InterlockError` unless the last completed operation was a
successful ``separate``; a ``contact`` or ``separate`` that fails part-way
leaves the driver assuming contact (the safe side), so only a successful
``separate`` unlocks XY moves again. Drivers that can ask the stage (SCPI) also
ask it before every move, so a stage lowered behind the driver's back is caught.

Touchdowns are counted per probe id (ids passed in, e.g. ["P1-GSG150", "P2-GSG150"])
when a contact is commanded from separation, before the command is sent: a
failed contact still counts, so wear is never under-counted.

Drivers:

- :class:`ManualProber`: the operator moves the stage; the driver prompts through
  a ``confirm(prompt) -> bool`` callable supplied by the TUI or CLI and records
  what was confirmed (:attr:`ManualProber.history`). "No" raises OperatorDeclined.
- :class:`ScpiProber`: a prober over VISA speaking a dialect file
  (``drivers/dialects/generic-prober.toml`` by default). The simulated bench's
  prober is reached with this same driver, pointed at its resource string.
"""

from __future__ import annotations

import time
from abc import ABC, abstractmethod
from pathlib import Path
from typing import TYPE_CHECKING, Callable, Sequence

from probelog.drivers.dialect import Dialect, load_dialect
from probelog.drivers.errors import DriverError, InterlockError, OperatorDeclined, ReplyError
from probelog.drivers.visa import Link, LinkSettings, open_resource
from probelog.bench import Die

Offset = tuple[float, float]


class InterlockedProber(ABC):
    """Base of every prober driver: interlock, position and touchdown bookkeeping.

    Subclasses implement ``_do_move``, ``_do_contact``, ``_do_separate``,
    ``identify`` and ``close``; they may override ``_stage_in_contact`` to report
    the stage's own Z state (True / False, or None when it cannot tell).
    """

    def __init__(self, probe_ids: Sequence[str]) -> None:
        ids = tuple(str(p) for p in probe_ids)
        if not ids or len(set(ids)) != len(ids):
            raise ValueError(f"probe ids must be a non-empty list of distinct names, got {list(probe_ids)!r}")
        self._touchdowns = dict.fromkeys(ids, 0)
        self._in_contact = False
        self._position: tuple[Die, Offset] | None = None

    # -- hooks

    @abstractmethod
    def _do_move(self, die: Die, offset_um: Offset) -> None: ...

    @abstractmethod
    def _do_contact(self) -> None: ...

    @abstractmethod
    def _do_separate(self) -> None: ...

    @abstractmethod
    def identify(self) -> str: ...

    @abstractmethod
    def close(self) -> None: ...

    def _stage_in_contact(self) -> bool | None:
        return None

    # -- protocol

    def move_to(self, die: Die, offset_um: Offset) -> None:
        """Move at separation height to ``offset_um`` (x, y in um) on ``die`` (col, row)."""
        die = (int(die[0]), int(die[1]))
        offset = (float(offset_um[0]), float(offset_um[1]))
        if self._in_contact:
            raise InterlockError(
                f"refused to move to die {die} while the probes are in contact; separate first"
            )
        if self._stage_in_contact():
            self._in_contact = True
            raise InterlockError(
                f"refused to move to die {die}: the stage reports contact although the driver "
                "separated; separate first"
            )
        self._position = None  # unknown until the move completes
        self._do_move(die, offset)
        self._position = (die, offset)

    def contact(self) -> None:
        """Lower the probes onto the current site; counts one touchdown per probe."""
        if self._in_contact:
            return  # already down: do not press again, do not count again
        self._in_contact = True  # from here on assume contact until separated
        for p in self._touchdowns:
            self._touchdowns[p] += 1
        self._do_contact()

    def separate(self) -> None:
        """Raise the probes to separation height; only success unlocks XY moves."""
        self._do_separate()
        self._in_contact = False

    @property
    def in_contact(self) -> bool:
        return self._in_contact

    @property
    def position(self) -> tuple[Die, Offset] | None:
        return self._position

    @property
    def touchdowns(self) -> dict[str, int]:
        return dict(self._touchdowns)


class ManualProber(InterlockedProber):
    """The operator is the prober: every step is a prompt answered with yes/no.

    ``confirm(prompt)`` shows ``prompt`` and returns True when the operator has
    done it. :attr:`history` records (unix time s, action, die, offset um).
    """

    def __init__(self, confirm: Callable[[str], bool], probe_ids: Sequence[str]) -> None:
        super().__init__(probe_ids)
        self._confirm = confirm
        self.history: list[tuple[float, str, Die | None, Offset | None]] = []

    def _ask(self, prompt: str, action: str, die: Die | None = None, offset: Offset | None = None) -> None:
        if not self._confirm(prompt):
            raise OperatorDeclined(f"operator did not confirm: {prompt}")
        self.history.append((time.time(), action, die, offset))

    def _do_move(self, die: Die, offset_um: Offset) -> None:
        self._ask(
            f"Move to die ({die[0]}, {die[1]}), site at x = {offset_um[0]:.1f} um, "
            f"y = {offset_um[1]:.1f} um, at separation height. Done?",
            "move",
            die,
            offset_um,
        )

    def _do_contact(self) -> None:
        self._ask("Lower the probes into contact. Done?", "contact", *self._where())

    def _do_separate(self) -> None:
        self._ask("Raise the probes to separation height. Done?", "separate", *self._where())

    def _where(self) -> tuple[Die | None, Offset | None]:
        return (self._position[0], self._position[1]) if self._position else (None, None)

    def identify(self) -> str:
        return "manual prober (operator confirms each step)"

    def close(self) -> None:
        pass


class ScpiProber(InterlockedProber):
    """A prober over VISA speaking a dialect file's commands.

    Every command is followed by ``wait_complete`` and an error-queue read; the
    stage's Z state is queried before each move. ``link`` may be given instead
    of ``resource`` (anything with write/query/command/check_errors/reopen/close).
    """

    def __init__(
        self,
        resource: str | None,
        probe_ids: Sequence[str],
        *,
        backend: str | None = "@py",
        dialect: str | Path | Dialect = "generic-prober",
        timeout_ms: int | None = None,
        link: Link | None = None,
    ) -> None:
        super().__init__(probe_ids)
        self.dialect = dialect if isinstance(dialect, Dialect) else load_dialect(dialect, "prober")
        d = self.dialect
        if link is None:
            if resource is None:
                raise ValueError("ScpiProber needs a resource string or a link")
            settings = LinkSettings(d.read_termination, d.write_termination, timeout_ms or d.timeout_ms)
            link = open_resource(resource, backend, settings, error_query=d.commands["next_error"])
        self.link = link
        try:
            self.idn = self.identify()
            self._in_contact = self._stage_in_contact() is not False  # unknown -> assume down
        except Exception:
            self.link.close()
            raise

    def _run(self, operation: str, **values: float) -> None:
        cmd = self.dialect.command(operation, **values)
        # one error-queue read after *OPC? covers the command too: a rejected
        # command still completes, and its error is waiting in the queue
        self.link.write(cmd)
        done = self.dialect.command("wait_complete")
        reply = self.link.query(done)
        if reply.strip() not in ("1", "+1"):
            raise ReplyError(f"prober answered {reply!r} to {done!r} after {cmd!r}, expected 1")
        self.link.check_errors(cmd)

    def _do_move(self, die: Die, offset_um: Offset) -> None:
        self._run("move_site", col=die[0], row=die[1], x_um=offset_um[0], y_um=offset_um[1])

    def _do_contact(self) -> None:
        self._run("contact")

    def _do_separate(self) -> None:
        self._run("separate")
        if self._stage_in_contact():
            raise DriverError("the prober still reports contact after the separate command")

    def _stage_in_contact(self) -> bool | None:
        cmd = self.dialect.command("query_z")
        reply = self.link.query(cmd).strip()
        if reply == self.dialect.replies["contact"]:
            return True
        if reply == self.dialect.replies["separated"]:
            return False
        raise ReplyError(
            f"prober answered {reply!r} to {cmd!r}; expected {self.dialect.replies['contact']!r} "
            f"or {self.dialect.replies['separated']!r}"
        )

    def read_position(self) -> tuple[Die, Offset]:
        """Ask the stage where it is: ((col, row), (x_um, y_um))."""
        cmd = self.dialect.command("query_position")
        reply = self.link.query(cmd)
        parts = [p.strip() for p in reply.split(",")]
        try:
            col, row, x, y = int(parts[0]), int(parts[1]), float(parts[2]), float(parts[3])
        except (ValueError, IndexError):
            raise ReplyError(f"prober answered {reply!r} to {cmd!r}; expected col,row,x_um,y_um") from None
        return (col, row), (x, y)

    def identify(self) -> str:
        return self.link.query(self.dialect.command("identify"))

    def reopen(self) -> None:
        """Reconnect; the contact state is read back from the stage."""
        self.link.reopen()
        self.idn = self.identify()
        self._in_contact = self._stage_in_contact() is not False

    def close(self) -> None:
        self.link.close()


if TYPE_CHECKING:  # both probers are a probelog.bench.Prober (checked by mypy, costs nothing at run time)
    from probelog.bench import Prober

    def _manual_prober_is_a_prober(prober: ManualProber) -> Prober:
        return prober

    def _scpi_prober_is_a_prober(prober: ScpiProber) -> Prober:
        return prober
