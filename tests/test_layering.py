"""The layering contract of DESIGN.md, checked by import-linter (pyproject.toml)."""

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_import_contracts_hold():
    exe = shutil.which("lint-imports") or str(Path(sys.executable).with_name("lint-imports"))
    proc = subprocess.run([exe, "--no-cache"], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "Contracts: 3 kept, 0 broken" in proc.stdout, proc.stdout


def test_core_imports_without_textual():
    code = (
        "import sys, probelog.verdicts, probelog.bench, drivers; "
        "assert 'textual' not in sys.modules, 'textual imported by the core'"
    )
    subprocess.run([sys.executable, "-c", code], cwd=ROOT, check=True)
