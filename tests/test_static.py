"""Lint and types are part of the test command: ruff on the whole tree, mypy in
strict mode on probelog/ and drivers/ and basic mode on tui/ (pyproject.toml)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tools"))
import static_tree  # noqa: E402  (tools/ is not a package)


def _run(*args: str) -> subprocess.CompletedProcess[str]:
    # ruff and mypy come from requirements.lock (`make .venv/.installed` installs them)
    return subprocess.run([sys.executable, "-m", *args], cwd=ROOT, capture_output=True, text=True, timeout=600)


def test_ruff_finds_nothing():
    out = _run("ruff", "check", "--no-cache", "probelog", "drivers", "tui", "tests", "bench")
    assert out.returncode == 0, out.stdout[-4000:] + out.stderr[-2000:]


def test_mypy_passes():
    static_tree.build()  # mypy reads the package as the wheel lays it out
    out = _run("mypy")
    assert out.returncode == 0, static_tree.to_repo_path(out.stdout[-6000:] + out.stderr[-2000:])


def test_mypy_is_strict_where_it_should_be(tmp_path):
    """The gate can fail: an untyped function in a strict package is reported."""
    pkg = tmp_path / "probelog"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "untyped.py").write_text("def f(x):\n    return x\n")
    out = subprocess.run([sys.executable, "-m", "mypy", "--config-file", str(ROOT / "pyproject.toml"),
                          str(pkg / "untyped.py")], cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert out.returncode == 1 and "no-untyped-def" in out.stdout, out.stdout
