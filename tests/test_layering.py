"""The layering contract of DESIGN.md.

- the core (probelog minus probelog.drivers and probelog.tui) never imports the
  UI (probelog.tui, textual), the instrument layer (probelog.drivers) or pyvisa;
- probelog.drivers never imports the UI (import-linter contract, pyproject.toml).

Both read the package as the wheel lays it out (tools/static_tree.py), so the
checks see the same module names the code imports.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import grimp

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tools"))
import static_tree  # noqa: E402  (tools/ is not a package)

FORBIDDEN_FOR_CORE = ("probelog.tui", "probelog.drivers", "textual", "textual_plotext", "pyvisa", "pyvisa_py")


def _graph_env() -> dict[str, str]:
    tree = static_tree.build()
    return {**os.environ, "PYTHONPATH": str(tree)}


def _core_violations(tree: Path) -> list[str]:
    code = f"""
import grimp, json
g = grimp.build_graph("probelog", include_external_packages=True)
core = sorted(m for m in g.modules if m.startswith("probelog")
              and not m.startswith(("probelog.tui", "probelog.drivers")))
bad = []
for target in {FORBIDDEN_FOR_CORE!r}:
    if target not in g.modules:
        continue
    importers = g.find_downstream_modules(target, as_package=True)  # modules that import it
    bad += [m + " -> ... -> " + target for m in core if m in importers]
print(json.dumps(bad))
"""
    out = subprocess.run([sys.executable, "-c", code], cwd=tree, env={**os.environ, "PYTHONPATH": str(tree)},
                         capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr[-3000:]
    import json

    return list(json.loads(out.stdout))


def test_the_core_never_reaches_the_ui_instruments_or_visa():
    tree = static_tree.build()
    bad = _core_violations(tree)
    assert not bad, "the core imports what it must not:\n" + "\n".join(bad)


def test_the_core_check_can_fail(tmp_path):
    """A core module that imports the UI is reported (the check is not vacuous)."""
    tree = static_tree.build()
    (tree / "probelog" / "zz_leak.py").write_text("import probelog.tui.app\n")
    try:
        bad = _core_violations(tree)
    finally:
        (tree / "probelog" / "zz_leak.py").unlink()
    assert any(b.startswith("probelog.zz_leak") for b in bad), bad


def test_import_contracts_hold():
    exe = shutil.which("lint-imports") or str(Path(sys.executable).with_name("lint-imports"))
    proc = subprocess.run([exe, "--no-cache", "--config", str(ROOT / "pyproject.toml")], cwd=static_tree.TREE.parent,
                          env=_graph_env(), capture_output=True, text=True)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "Contracts: 1 kept, 0 broken" in proc.stdout, proc.stdout


def test_core_imports_without_textual():
    code = (
        "import sys, probelog.verdicts, probelog.bench, probelog.drivers; "
        "assert 'textual' not in sys.modules, 'textual imported by the core'"
    )
    subprocess.run([sys.executable, "-c", code], cwd=ROOT, check=True)


def test_grimp_is_the_library_we_think():
    assert hasattr(grimp, "build_graph")
