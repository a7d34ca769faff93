"""One import name: drivers/ and tui/ install as probelog.drivers and probelog.tui.

The wheel must not install generic top-level names (`drivers`, `tui` collide with
other distributions in an analyst's environment), so no code imports them by
those names, and every package folder is listed in pyproject.toml.
"""

from __future__ import annotations

import importlib
import re
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TOP_LEVEL_IMPORT = re.compile(r"^\s*(from|import)\s+(drivers|tui)(\.|\s|$)", re.M)


def _setuptools() -> dict:
    return tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]


def _package_folders() -> set[str]:
    names = set()
    for top, name in (("probelog", "probelog"), ("drivers", "probelog.drivers"), ("tui", "probelog.tui")):
        # a folder with Python files is a package, __init__.py or not (probelog/catalog/)
        for folder in {p.parent for p in (ROOT / top).rglob("*.py") if "__pycache__" not in p.parts}:
            rel = folder.relative_to(ROOT / top)
            names.add(".".join([name, *rel.parts]))
    return names


def test_every_package_folder_is_listed_for_the_wheel():
    listed = set(_setuptools()["packages"])
    missing = _package_folders() - listed
    assert not missing, f"add to [tool.setuptools] packages in pyproject.toml: {sorted(missing)}"
    assert _setuptools()["package-dir"] == {"probelog.drivers": "drivers", "probelog.tui": "tui"}


def test_no_code_imports_the_generic_top_level_names():
    offenders = []
    for folder in ("probelog", "drivers", "tui", "tests", "bench", "tools"):
        for path in (ROOT / folder).rglob("*.py"):
            for m in TOP_LEVEL_IMPORT.finditer(path.read_text(encoding="utf-8")):
                line = path.read_text(encoding="utf-8")[: m.start()].count("\n") + 1
                offenders.append(f"{path.relative_to(ROOT)}:{line}: {m.group(0).strip()} (use probelog.{m.group(2)})")
    assert not offenders, "\n".join(offenders)


def test_the_import_check_can_fail():
    assert TOP_LEVEL_IMPORT.search("from drivers.vna import ScpiVna\n")
    assert TOP_LEVEL_IMPORT.search("    import tui\n")
    assert not TOP_LEVEL_IMPORT.search("from probelog.drivers.vna import ScpiVna\n")


def test_the_mapped_packages_come_from_the_repository_folders():
    drivers = importlib.import_module("probelog.drivers")
    tui = importlib.import_module("probelog.tui")
    assert Path(drivers.__file__).resolve().parent == ROOT / "drivers"
    assert Path(tui.__file__).resolve().parent == ROOT / "tui"
