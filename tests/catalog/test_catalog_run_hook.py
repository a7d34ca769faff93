"""``probelog run --catalog``: the session is in the catalog once the run closes;
a catalog that does not answer is said in one line before any probing."""

from __future__ import annotations

import json
import socket
import subprocess
import sys
from pathlib import Path

from probelog.catalog.db import open_catalog
from probelog.catalog.queries import list_sessions
ROOT = Path(__file__).resolve().parents[2]


def test_a_headless_run_adds_its_session_as_it_closes(demo_sessions, run_catalog):
    cat = open_catalog(str(run_catalog))
    rows = list_sessions(cat)
    cat.close()
    first = json.loads((demo_sessions[0] / "journal.jsonl").read_text().splitlines()[0])
    last = json.loads((demo_sessions[0] / "journal.jsonl").read_text().splitlines()[-1])
    assert [r["session_id"] for r in rows] == [first["payload"]["session_id"]]
    assert last["type"] == "session-closed"
    assert rows[0]["completed"] is True and rows[0]["n_events"] == last["seq"]  # added after session-closed


def test_a_catalog_that_does_not_answer_stops_the_run_before_probing(tmp_path):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    res = subprocess.run([sys.executable, "-m", "probelog.tui", "run", "demo", "--headless", "--dir", str(tmp_path),
                          "--catalog", f"postgresql://lab@127.0.0.1:{port}/lab"],
                         capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert res.returncode == 2
    assert res.stderr.strip().count("\n") == 0 and "--catalog" in res.stderr and "cannot connect" in res.stderr
    assert list(tmp_path.iterdir()) == []  # no session was opened
