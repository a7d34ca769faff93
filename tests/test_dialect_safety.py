"""Issue 13 item 2: a dialect string cannot send a second command.

An embedded newline made the simulated VNA source +4 dBm against a -5 dBm limit
while the journal recorded -10 dBm. SCPI-1999 vol. 1 ch. 6 (from memory): ';'
separates program message units and the newline ends a program message, so
either one lets a single string carry two commands.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
import pyvisa

from probelog.drivers.dialect import Dialect, load_dialect
from probelog.drivers.errors import DialectError
from probelog.drivers.simbench import SimBench
from probelog.drivers.vna import ScpiVna
from probelog.bench import SweepSettings

ROOT = Path(__file__).resolve().parents[1]
GENERIC = (ROOT / "drivers/dialects/generic-vna.toml").read_text()
POWER_LINE = 'set_power_dbm = "SOURce:POWer {dbm:.4g}"'
INJECTION = "SOURce:POWer {dbm:.4g}\nSOURce:POWer 4"  # the hostile tester's string
PLAN = SweepSettings(1e9, 110e9, 21, 1e3, -10.0)


def _dialect_with(tmp_path: Path, old: str, new: str, kind: str = "vna") -> Path:
    text = GENERIC if kind == "vna" else (ROOT / "drivers/dialects/generic-prober.toml").read_text()
    assert old in text
    p = tmp_path / f"lab-{kind}.toml"
    p.write_text(text.replace(old, new))
    return p


@pytest.mark.parametrize("value, why", [
    (r'"SOURce:POWer {dbm:.4g}\nSOURce:POWer 4"', "holds a newline"),
    (r'"SOURce:POWer {dbm:.4g}\r\nSOURce:POWer 4"', "holds a carriage return"),
    ('"SOURce:POWer {dbm:.4g};:SOURce:POWer 4"', "holds ';'"),
    ('"SOURce:POWer {dbm:;>12.4g}"', "holds ';'"),  # a format fill that sends ';;;;;;-10'
    (r'"SOURce:POWer\t{dbm:.4g}"', "holds the character '\\\\t'"),
    ('"SOURce:POWer? {dbm:.4g}"', "expects no reply but holds '?'"),
])
def test_a_power_string_with_a_second_command_is_refused_naming_file_key_and_line(tmp_path, value, why):
    path = _dialect_with(tmp_path, POWER_LINE, f"set_power_dbm = {value}")
    line = next(i for i, t in enumerate(path.read_text().splitlines(), 1) if t.startswith("set_power_dbm"))
    with pytest.raises(DialectError) as info:
        load_dialect(path, "vna")
    message = str(info.value)
    assert "\n" not in message  # one clear line
    assert message.startswith(str(path)) and f"[commands] set_power_dbm (line {line})" in message
    assert re.search(why, message), message


def test_the_generic_strings_load_and_a_prober_newline_is_refused_too(tmp_path):
    assert load_dialect("generic-vna", "vna").command("set_power_dbm", dbm=-10.0) == "SOURce:POWer -10"
    assert load_dialect("generic-prober", "prober").command("contact") == "STAGe:Z:CONTact"
    path = _dialect_with(tmp_path, 'contact = "STAGe:Z:CONTact"', r'contact = "STAGe:Z:CONTact\nSTAGe:MOVE 0,0,0,0"',
                         "prober")
    with pytest.raises(DialectError, match=r"lab-prober\.toml: \[commands\] contact \(line \d+\) holds a newline"):
        load_dialect(path, "prober")


def test_a_termination_other_than_cr_lf_is_refused(tmp_path):
    path = _dialect_with(tmp_path, 'write_termination = "\\n"', 'write_termination = ";"')
    with pytest.raises(DialectError, match=r"\[io\] write_termination \(line \d+\) must be"):
        load_dialect(path, "vna")


def test_the_injection_reaches_the_simulated_vna_only_around_the_dialect_check():
    """Why the check matters (the failing case), and that the driver never sends it."""
    good = load_dialect("generic-vna", "vna")
    forged = Dialect(**{**good.__dict__, "commands": {**good.commands, "set_power_dbm": INJECTION}})
    with SimBench(seed=3) as bench:
        vna_res, _ = bench.resources
        # sent raw, the two lines make the instrument source +4 dBm
        rm = pyvisa.ResourceManager("@py")
        raw = rm.open_resource(vna_res, read_termination="\n", write_termination="\n", timeout=2000)
        raw.write(INJECTION.format(dbm=-10.0))
        assert float(raw.query("SOURce:POWer?")) == 4.0
        raw.write("SOURce:POWer -10")
        raw.close()
        # through the driver with a dialect that skipped load_dialect(): refused before sending
        vna = ScpiVna(vna_res, dialect=forged, timeout_ms=2000)
        with pytest.raises(DialectError, match=r"set_power_dbm would send .* holds a newline \(a second command\); refusing"):
            vna.configure(PLAN, power_limit_dbm=-5.0)
        assert bench.vna.power == -10.0
        vna.close()
