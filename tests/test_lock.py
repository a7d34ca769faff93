"""The lock file (requirements.lock) covers pyproject.toml and is what is installed.

`make demo` / `make test` install exactly requirements.lock, then probelog itself
with --no-deps, so a fresh clone gets the same versions everywhere. After a change
to pyproject.toml's dependencies, `make lock` refreshes the lock (DEVELOPERS.md).
"""

from __future__ import annotations

import tomllib
from importlib import metadata
from pathlib import Path

import pytest
from packaging.requirements import Requirement
from packaging.utils import canonicalize_name

ROOT = Path(__file__).resolve().parents[1]


def _project_requirements() -> list[Requirement]:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    reqs = [Requirement(r) for r in project["dependencies"]]
    for extra in project.get("optional-dependencies", {}).values():
        reqs += [Requirement(r) for r in extra]
    return reqs


def _locked() -> dict[str, str]:
    pins: dict[str, str] = {}
    for n, line in enumerate((ROOT / "requirements.lock").read_text(encoding="utf-8").splitlines(), 1):
        line = line.split("#", 1)[0].strip()
        if not line or line.startswith("-"):
            continue
        req = Requirement(line)
        specs = list(req.specifier)
        assert len(specs) == 1 and specs[0].operator == "==", f"requirements.lock line {n}: not an exact pin: {line}"
        pins[canonicalize_name(req.name)] = specs[0].version
    return pins


def test_every_dependency_of_pyproject_is_pinned_in_the_lock_within_its_range():
    pins = _locked()
    problems = []
    for req in _project_requirements():
        name = canonicalize_name(req.name)
        if name not in pins:
            problems.append(f"{req.name}: in pyproject.toml, missing from requirements.lock (run `make lock`)")
        elif not req.specifier.contains(pins[name], prereleases=True):
            problems.append(f"{req.name}: lock pins {pins[name]}, pyproject.toml asks {req.specifier} (run `make lock`)")
    assert not problems, "\n".join(problems)


def test_the_environment_was_installed_from_the_lock():
    pins = _locked()
    wrong = []
    for name, version in pins.items():
        try:
            installed = metadata.version(name)
        except metadata.PackageNotFoundError:
            wrong.append(f"{name}: locked {version}, not installed")
            continue
        if canonicalize_name(installed) != canonicalize_name(version) and installed != version:
            wrong.append(f"{name}: locked {version}, installed {installed}")
    if wrong and not (ROOT / ".venv" / ".installed").exists():
        pytest.skip("not running in the make-built .venv: " + "; ".join(wrong[:3]))
    assert not wrong, "the venv differs from requirements.lock; reinstall it with `make .venv/.installed`:\n" + "\n".join(wrong)


def test_a_range_the_lock_breaks_is_reported():
    """The check above can fail: a requirement outside the pinned version is caught."""
    pins = _locked()
    req = Requirement(f"numpy<{pins['numpy']}")
    assert not req.specifier.contains(pins["numpy"], prereleases=True)
