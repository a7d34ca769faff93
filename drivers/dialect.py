"""Dialect files: which command string an instrument expects for each of our operations.

A dialect is a TOML file. The generic ones ship in ``drivers/dialects/``
(``generic-vna.toml``, ``generic-prober.toml``); the simulated bench speaks them.
To drive your own instrument, copy the generic file of the same kind, keep every
key, and change only the strings to what your instrument's programming manual
says. Pass the file's path wherever a dialect name is accepted.

Layout (every section and key is checked; a missing or unknown key is an error
naming the file, the section and the line)::

    [dialect]
    name = "my-vna"                 # required, any text
    description = "..."             # optional

    [io]                            # all optional
    read_termination = "\\n"         # reply terminator; "\\n" is usual for SCPI
    write_termination = "\\n"
    timeout_ms = 10000              # I/O timeout in ms
    byte_order = "little"           # VNA only: byte order of REAL,64 blocks

    [commands]                      # operation = "command string"
    set_start_hz = "SENSe:FREQuency:STARt {hz:.12g}"

    [data]                          # VNA only
    order_1port = ["S11"]
    order_2port = ["S11", "S21", "S12", "S22"]

Command strings are Python format strings. Each operation takes exactly the
placeholders listed in :data:`VNA_COMMANDS` / :data:`PROBER_COMMANDS` (e.g.
``{hz}`` in Hz, ``{dbm}`` in dBm, ``{n}`` points, ``{ports}`` such as "1,2",
``{col}``, ``{row}`` die address, ``{x_um}``, ``{y_um}`` site offset in um); a
format spec after the colon is yours to choose. Operations marked optional may
be left out: the driver then does without (e.g. no ``fetch_frequencies`` means
the frequencies are computed from the sweep settings as a linear sweep).

Every command string is ONE command: printable ASCII without ``;`` (the SCPI
separator of several commands on a line), newline or other control characters,
before and after its placeholders are filled. A string that would send a second
command (e.g. ``"SOURce:POWer {dbm:.4g}\nSOURce:POWer 4"``) could bypass the
plan's power limit, so the file is refused when it loads. VNA setters (``set_*``
and the other commands that expect no reply) must not hold a ``?`` either: an
unread reply would shift every later answer. Terminations are ``"\n"``,
``"\r\n"`` or ``"\r"``.

Reply conventions the drivers expect (our generic ones; adapt your instrument's
replies by choosing the right query): ``next_error`` answers ``<code>,"<text>"``
with code 0 for an empty queue (SCPI-1999); ``wait_complete`` answers ``1``;
the ``query_*`` read-backs answer one number (Hz, points, dBm) such as
``1e9``, ``+1.0000E+09`` or ``201``; ``fetch_sparams`` answers float64 values as a REAL,64 block (or comma-separated
ASCII), for each frequency point the parameters in ``[data]`` order, real then
imaginary; ``query_position`` answers ``col,row,x_um,y_um``; ``query_z``
answers one of the words in ``[replies]`` ``contact`` / ``separated`` (prober;
defaults ``CONT`` and ``SEP``).
"""

from __future__ import annotations

import string
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from probelog.drivers.errors import DialectError

DIALECT_DIR = Path(__file__).resolve().parent / "dialects"

Kind = Literal["vna", "prober"]

# operation -> (placeholders, required)
VNA_COMMANDS: dict[str, tuple[frozenset[str], bool]] = {
    "identify": (frozenset(), True),
    "reset": (frozenset(), True),
    "clear_status": (frozenset(), False),
    "wait_complete": (frozenset(), True),
    "next_error": (frozenset(), True),
    "set_start_hz": (frozenset({"hz"}), True),
    "set_stop_hz": (frozenset({"hz"}), True),
    "set_points": (frozenset({"n"}), True),
    "set_ifbw_hz": (frozenset({"hz"}), True),
    "set_power_dbm": (frozenset({"dbm"}), True),
    # Read-back of what the instrument really set (see drivers/vna.py): a VNA that
    # clamps, rounds or ignores a setting is caught before it sweeps.
    "query_start_hz": (frozenset(), True),
    "query_stop_hz": (frozenset(), True),
    "query_points": (frozenset(), True),
    "query_ifbw_hz": (frozenset(), False),
    "query_power_dbm": (frozenset(), True),
    "set_ports": (frozenset({"ports"}), False),
    "trigger_single": (frozenset(), True),
    "format_binary": (frozenset(), False),
    "format_ascii": (frozenset(), False),
    "byte_order_little": (frozenset(), False),
    "byte_order_big": (frozenset(), False),
    "fetch_sparams": (frozenset(), True),
    "fetch_frequencies": (frozenset(), False),
    "fetch_switch_terms": (frozenset(), False),
}

PROBER_COMMANDS: dict[str, tuple[frozenset[str], bool]] = {
    "identify": (frozenset(), True),
    "wait_complete": (frozenset(), True),
    "next_error": (frozenset(), True),
    "move_site": (frozenset({"col", "row", "x_um", "y_um"}), True),
    "contact": (frozenset(), True),
    "separate": (frozenset(), True),
    "query_position": (frozenset(), True),
    "query_z": (frozenset(), True),
}

# Sample values used to try every command string once while validating.
_SAMPLES = {"hz": 1.0e9, "dbm": -10.0, "n": 201, "ports": "1,2", "col": 3, "row": 4, "x_um": 200.0, "y_um": 600.0}

# Operations that expect a reply; every other VNA operation is a setter or an action.
_QUERY_PREFIXES = ("identify", "wait_complete", "next_error", "query_", "fetch_")
_TERMINATIONS = ("\n", "\r\n", "\r")

_SECTIONS = {
    "vna": {"dialect", "io", "commands", "data"},
    "prober": {"dialect", "io", "commands", "replies"},
}
_IO_KEYS = {
    "vna": {"read_termination", "write_termination", "timeout_ms", "byte_order"},
    "prober": {"read_termination", "write_termination", "timeout_ms"},
}
_PORT_SETS = {"order_1port": {"S11"}, "order_2port": {"S11", "S21", "S12", "S22"}}


@dataclass(frozen=True)
class Dialect:
    """A loaded, validated dialect.

    ``commands`` maps operation -> format string (only those present);
    ``data_order`` maps port count (1, 2) -> parameter names in reply order.
    """

    name: str
    kind: Kind
    path: Path
    commands: dict[str, str]
    description: str = ""
    read_termination: str = "\n"
    write_termination: str = "\n"
    timeout_ms: int = 10000
    byte_order: str = "little"
    data_order: dict[int, list[str]] = field(default_factory=dict)
    replies: dict[str, str] = field(default_factory=dict)

    def has(self, operation: str) -> bool:
        return operation in self.commands

    def command(self, operation: str, **values: Any) -> str:
        """The command string of ``operation`` with its placeholders filled."""
        try:
            template = self.commands[operation]
        except KeyError:
            raise DialectError(
                f"{self.path.name}: [commands] has no {operation!r}, which this step needs"
            ) from None
        out = template.format(**values)
        problem = one_command_problem(out)
        if problem:  # a Dialect built without load_dialect(), or a value carrying text
            raise DialectError(f"{self.path.name}: [commands] {operation} would send {out!r}, which {problem}; "
                               "refusing to send it", resource=str(self.path))
        return out


def one_command_problem(text: str) -> str | None:
    """Why ``text`` is not exactly one instrument command, or None when it is.

    One command is printable ASCII (0x20..0x7e) without ``;``: a newline, a
    carriage return or a ``;`` would let one dialect string send a second command
    (SCPI-1999 vol. 1 ch. 6: ``;`` separates program message units, the newline
    ends the message).
    """
    for ch in text:
        if ch == "\n":
            return "holds a newline (a second command)"
        if ch == "\r":
            return "holds a carriage return (a second command)"
        if ch == ";":
            return "holds ';' (a second command)"
        if not " " <= ch <= "~":
            return f"holds the character {ch!r} (only printable ASCII is sent)"
    return None


def resolve(name_or_path: str | Path, kind: Kind) -> Path:
    """A dialect name ("generic-vna") or a path -> the TOML file's path."""
    p = Path(name_or_path)
    if p.suffix == ".toml" or p.exists():
        return p
    return DIALECT_DIR / f"{name_or_path}.toml"


def load_dialect(name_or_path: str | Path, kind: Kind) -> Dialect:
    """Load and validate a dialect file of ``kind`` ("vna" or "prober").

    Raises :class:`DialectError` naming the file (and section, key and line)
    for anything wrong: unreadable TOML, missing or unknown sections and keys,
    wrong placeholders, bad value types.
    """
    path = resolve(name_or_path, kind)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise DialectError(f"{path}: cannot read dialect file ({exc.strerror})", resource=str(path)) from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise DialectError(f"{path}: not valid TOML: {exc}", resource=str(path)) from None
    return _validate(doc, text, path, kind)


def _line_of(text: str, key: str) -> str:
    for i, line in enumerate(text.splitlines(), 1):
        if line.strip().startswith(f"{key} ") or line.strip().startswith(f"{key}="):
            return f" (line {i})"
    return ""


def _fail(path: Path, message: str) -> DialectError:
    return DialectError(f"{path}: {message}", resource=str(path))


def _validate(doc: dict[str, Any], text: str, path: Path, kind: Kind) -> Dialect:  # Any: parsed TOML
    table = VNA_COMMANDS if kind == "vna" else PROBER_COMMANDS
    unknown = set(doc) - _SECTIONS[kind]
    if unknown:
        s = sorted(unknown)[0]
        raise _fail(path, f"unknown section [{s}]{_line_of(text, '[' + s)}; a {kind} dialect has "
                    f"{', '.join('[' + x + ']' for x in sorted(_SECTIONS[kind]))}")
    for section in ("dialect", "commands"):
        if not isinstance(doc.get(section), dict):
            raise _fail(path, f"missing section [{section}]")

    head = doc["dialect"]
    extra = set(head) - {"name", "description"}
    if extra:
        k = sorted(extra)[0]
        raise _fail(path, f"[dialect] has unknown key {k!r}{_line_of(text, k)}; allowed: name, description")
    if not isinstance(head.get("name"), str) or not head["name"].strip():
        raise _fail(path, "[dialect] needs name = \"...\"")

    io = doc.get("io", {})
    extra = set(io) - _IO_KEYS[kind]
    if extra:
        k = sorted(extra)[0]
        raise _fail(path, f"[io] has unknown key {k!r}{_line_of(text, k)}; allowed: {', '.join(sorted(_IO_KEYS[kind]))}")
    for k in ("read_termination", "write_termination"):
        if k in io and not isinstance(io[k], str):
            raise _fail(path, f"[io] {k}{_line_of(text, k)} must be a string such as \"\\n\"")
    for k in ("read_termination", "write_termination"):
        if k in io and io[k] not in _TERMINATIONS:
            raise _fail(path, f"[io] {k}{_line_of(text, k)} must be \"\\n\", \"\\r\\n\" or \"\\r\", got {io[k]!r}")
    timeout = io.get("timeout_ms", 10000)
    if isinstance(timeout, bool) or not isinstance(timeout, int) or timeout <= 0:
        raise _fail(path, f"[io] timeout_ms{_line_of(text, 'timeout_ms')} must be a positive integer (ms), got {timeout!r}")
    order = io.get("byte_order", "little")
    if order not in ("little", "big"):
        raise _fail(path, f"[io] byte_order{_line_of(text, 'byte_order')} must be \"little\" or \"big\", got {order!r}")

    commands = doc["commands"]
    unknown = set(commands) - set(table)
    if unknown:
        k = sorted(unknown)[0]
        raise _fail(path, f"[commands] has unknown operation {k!r}{_line_of(text, k)}; known: {', '.join(table)}")
    missing = [k for k, (_, req) in table.items() if req and k not in commands]
    if missing:
        raise _fail(path, f"[commands] is missing {', '.join(repr(m) for m in missing)}")
    for op, template in commands.items():
        where = f"[commands] {op}{_line_of(text, op)}"
        if not isinstance(template, str) or not template.strip():
            raise _fail(path, f"{where} must be a non-empty string")
        want = table[op][0]
        try:
            got = {f for _, f, _, _ in string.Formatter().parse(template) if f is not None}
        except ValueError as exc:
            raise _fail(path, f"{where}: bad placeholder syntax ({exc})") from None
        if got != want:
            raise _fail(path, f"{where} must use placeholders {sorted(want) or 'none'}, found {sorted(got) or 'none'}")
        try:
            filled = template.format(**_SAMPLES)
        except (ValueError, TypeError, KeyError) as exc:
            raise _fail(path, f"{where}: placeholder format does not fit the value ({exc})") from None
        # the template and what it sends (a format spec's fill could add a ';')
        problem = one_command_problem(template) or one_command_problem(filled)
        if problem:
            raise _fail(path, f"{where} {problem}: one command a string (a second one could bypass "
                        "the plan's limits)")
        if kind == "vna" and not op.startswith(_QUERY_PREFIXES) and "?" in template:
            raise _fail(path, f"{where} expects no reply but holds '?': a query here would leave its "
                        "answer unread and shift every later reply")

    data_order: dict[int, list[str]] = {}
    if kind == "vna":
        data = doc.get("data")
        if not isinstance(data, dict):
            raise _fail(path, "missing section [data] (order_1port, order_2port)")
        extra = set(data) - set(_PORT_SETS)
        if extra:
            k = sorted(extra)[0]
            raise _fail(path, f"[data] has unknown key {k!r}{_line_of(text, k)}; allowed: order_1port, order_2port")
        for k, names in _PORT_SETS.items():
            value = data.get(k)
            if not isinstance(value, list) or sorted(value) != sorted(names):
                raise _fail(path, f"[data] {k}{_line_of(text, k)} must list each of {sorted(names)} once, got {value!r}")
        data_order = {1: list(data["order_1port"]), 2: list(data["order_2port"])}

    replies: dict[str, str] = {}
    if kind == "prober":
        rep = doc.get("replies", {})
        extra = set(rep) - {"contact", "separated"}
        if extra:
            k = sorted(extra)[0]
            raise _fail(path, f"[replies] has unknown key {k!r}{_line_of(text, k)}; allowed: contact, separated")
        replies = {"contact": str(rep.get("contact", "CONT")), "separated": str(rep.get("separated", "SEP"))}

    return Dialect(
        name=head["name"],
        kind=kind,
        path=path,
        commands=dict(commands),
        description=str(head.get("description", "")),
        read_termination=io.get("read_termination", "\n"),
        write_termination=io.get("write_termination", "\n"),
        timeout_ms=timeout,
        byte_order=order,
        data_order=data_order,
        replies=replies,
    )
