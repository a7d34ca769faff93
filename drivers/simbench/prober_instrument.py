"""The simulated prober: speaks drivers/dialects/generic-prober.toml exactly.

It protects itself as a real prober would: an XY move while in contact is refused
with -221 in the error queue (the driver holds the real interlock). Offsets in um.
"""

from __future__ import annotations

import threading

from probelog.drivers.simbench.scpi import CommandTable, ErrorQueue, ScpiError
from probelog.drivers.simbench.server import Reply, run_line
from probelog.drivers.simbench.state import BenchState

IDN = "probelog,SimProber-200,PLX7-SIM-0002,0.1.0"


class SimProber:
    def __init__(self, state: BenchState) -> None:
        self.state = state
        self.errors = ErrorQueue()
        self._lock = threading.Lock()
        t = CommandTable()
        t.add("*IDN?", lambda a: IDN)
        t.add("*CLS", lambda a: self.errors.clear())
        t.add("*RST", lambda a: self.state.separate())
        t.add("*OPC?", lambda a: "1")
        t.add("*ESR?", lambda a: "0" if len(self.errors) == 0 else "32")
        t.add("SYSTem:ERRor[:NEXT]?", lambda a: self.errors.pop())
        t.add("STAGe:MOVE", self._cmd_move)
        t.add("STAGe:Z:CONTact", lambda a: self.state.contact())
        t.add("STAGe:Z:SEParate", lambda a: self.state.separate())
        t.add("STAGe:POSition?", lambda a: self.state.position_reply())
        t.add("STAGe:Z?", lambda a: "CONT" if self.state.in_contact else "SEP")
        self.table = t

    def _cmd_move(self, args: list[str]) -> None:
        if len(args) != 4:
            raise ScpiError(-109 if len(args) < 4 else -108,
                            f"STAGe:MOVE takes col,row,x_um,y_um; got {len(args)} values")
        try:
            col, row = int(args[0]), int(args[1])
            x, y = float(args[2]), float(args[3])
        except ValueError:
            raise ScpiError(-104, f"STAGe:MOVE {','.join(args)!r}: col,row whole numbers, x,y in um") from None
        self.state.move((col, row), x, y)

    def handle_line(self, line: str) -> Reply | None:
        return run_line(line, self.table, self.errors, self._lock)
