"""Lay the installed package out as one tree for the static tools.

The repository keeps drivers/ and tui/ at the top (the layout users asked for)
and the wheel installs them as probelog.drivers and probelog.tui
(pyproject.toml's package-dir). mypy and import-linter read folders, not
setuptools' mapping, so they are run over a copy of the sources laid out as the
wheel lays them out: build/static/probelog/{..., drivers/, tui/}. Copying the
~100 source files takes a few milliseconds; `to_repo_path` turns the copy's
paths in a tool's output back into repository paths.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TREE = ROOT / "build" / "static"
MAPPING = {"probelog": ROOT / "probelog", "probelog/drivers": ROOT / "drivers", "probelog/tui": ROOT / "tui"}


def build() -> Path:
    """Copy every .py file (and py.typed) into TREE; return the folder to put on sys.path."""
    if TREE.exists():
        shutil.rmtree(TREE)
    for dest, src in MAPPING.items():
        for path in src.rglob("*.py"):
            if "__pycache__" in path.parts:
                continue
            target = TREE / dest / path.relative_to(src)
            target.parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(path, target)
    return TREE


def to_repo_path(text: str) -> str:
    """Rewrite paths inside the copied tree back to repository-relative paths."""
    for dest, src in sorted(MAPPING.items(), key=lambda kv: -len(kv[0])):
        for prefix in (f"{TREE}/{dest}/", f"build/static/{dest}/"):
            text = text.replace(prefix, f"{src.relative_to(ROOT)}/")
    return text


if __name__ == "__main__":
    print(build())
    sys.exit(0)
