"""Fixtures of the catalog tests: every catalog test runs on SQLite and on a real
PostgreSQL server started here in a temporary folder (skipped with a reason when
the server binaries are missing, a failure when CI=true: CI must not skip)."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from tests.catalog.pgserver import TempPostgres, find_bin

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="session")
def pg_server():
    bindir = find_bin()
    if bindir is None:
        why = ("PostgreSQL server binaries not found (/usr/lib/postgresql/<major>/bin): "
               "install the 'postgresql' package to run the catalog tests on PostgreSQL")
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(why + " (CI=true: not skipping)")
        pytest.skip(why)
    server = TempPostgres(bindir).start()
    yield server
    server.stop()


@pytest.fixture(params=["sqlite", "postgresql"])
def db_url(request, tmp_path):
    """A fresh empty catalog URL on each database."""
    if request.param == "sqlite":
        return str(tmp_path / "catalog.sqlite")
    return request.getfixturevalue("pg_server").new_database()


def _run_demo(out: Path, *extra: str) -> Path:
    out.mkdir(parents=True, exist_ok=True)
    before = set(out.iterdir())
    res = subprocess.run([sys.executable, "-m", "probelog.tui", "run", "demo", "--headless", "--dir", str(out),
                          "--fault-rate", "0", *extra], capture_output=True, text=True, cwd=ROOT, timeout=300)
    assert res.returncode == 0, res.stderr[-2000:]
    (new,) = set(out.iterdir()) - before
    return new


@pytest.fixture(scope="session")
def run_catalog(tmp_path_factory):
    """The SQLite catalog the first demo run adds itself to (``run --catalog``)."""
    return tmp_path_factory.mktemp("run-catalog") / "catalog.sqlite"


@pytest.fixture(scope="session")
def demo_sessions(tmp_path_factory, run_catalog):
    """Two demo sessions of the simulated bench (seeds 7 and 8), written once per
    test run; tests copy them before changing anything. The first run adds
    itself to ``run_catalog`` as it closes."""
    root = tmp_path_factory.mktemp("demo-sessions")
    return [_run_demo(root, "--seed", "7", "--catalog", str(run_catalog)), _run_demo(root, "--seed", "8")]


@pytest.fixture
def session_copy(demo_sessions, tmp_path):
    """A private copy of the first demo session (tests that damage or extend it)."""
    dst = tmp_path / "sessions" / demo_sessions[0].name
    shutil.copytree(demo_sessions[0], dst)
    return dst
