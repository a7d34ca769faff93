import subprocess
import sys

import pytest

from probelog.tui.cli import COMMANDS, main


def test_help_lists_every_subcommand(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--help"])
    assert exc.value.code == 0
    out = capsys.readouterr().out
    for name in ("demo", "run", "check", "lines", "verify", "export", "simbench"):
        assert name in out


@pytest.mark.parametrize("name", COMMANDS)
def test_every_subcommand_has_help(name, capsys):
    with pytest.raises(SystemExit) as exc:
        main([name, "--help"])
    assert exc.value.code == 0
    assert "usage: probelog " + name in capsys.readouterr().out


def test_console_entry_point_runs():
    proc = subprocess.run([sys.executable, "-m", "probelog.tui", "--help"], capture_output=True, text=True)
    assert proc.returncode == 0
    assert "simbench" in proc.stdout
