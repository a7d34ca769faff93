"""Messages that say what is true, and names that never collide (issue 13,
item 5, the journal side): ``--dir`` naming a file, an unreadable journal, a
session still being written, two sessions of one wafer in the same second.

References: POSIX errno meanings (EACCES is "permission denied", not a
read-only file system); flock(2) semantics for the lock held by another process.
"""

from __future__ import annotations

import errno
import os
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path

import pytest

from probelog.journal import Journal, JournalError, SessionInUseError, new_session_id, verify, writer_pid
from test_journal import ROOT, _session
from probelog.tui.cli import main as cli


def test_dir_naming_a_regular_file_says_so(tmp_path, capsys):
    target = tmp_path / "sessions"
    target.write_text("not a folder\n")
    with pytest.raises(JournalError) as info:
        Journal.create(target, "20261201-224501-QF2611-W07")
    assert "is a file, not a folder" in str(info.value) and "exists already" not in str(info.value)
    assert target.read_text() == "not a folder\n"  # untouched
    # the same through the command line: one line, exit 2, before any landing
    rc = cli(["run", "demo", "--headless", "--dir", str(target), "--fault-rate", "0"])
    err = capsys.readouterr().err.strip()
    assert rc == 2 and len(err.splitlines()) == 1 and f"{target}: is a file, not a folder" in err


def test_existing_session_folder_still_says_it_exists(tmp_path):
    _session(tmp_path, n=1)
    with pytest.raises(JournalError, match="a session folder of that name exists already"):
        Journal.create(tmp_path, "20261201-224501-QF2611-W07")


def test_a_start_killed_mid_creation_leaves_no_session_folder_without_a_journal(tmp_path, monkeypatch):
    """Found by the kill trials: a kill between making the session folder and
    making its journal left a folder that resume calls 'not a session'. The
    folder is now built under a hidden name and renamed into place whole; a
    kill at the rename (simulated by an exception there) leaves no visible
    folder, and the start picker ignores the hidden one."""
    from probelog.tui.screens.intake import find_unfinished

    class Killed(BaseException):
        pass

    def killed(src, dst):
        raise Killed

    monkeypatch.setattr(os, "rename", killed)
    with pytest.raises(Killed):
        Journal.create(tmp_path, "20261201-224501-QF2611-W07")
    monkeypatch.undo()
    visible = [p.name for p in tmp_path.iterdir() if not p.name.startswith(".")]
    assert visible == []
    assert find_unfinished(tmp_path) == []  # the staging folder does not show up to resume
    # the next start takes the name and gets a complete folder
    with Journal.create(tmp_path, "20261201-224501-QF2611-W07") as j:
        assert j.path.is_file() and j.root.name == "20261201-224501-QF2611-W07"
        assert (j.root / "data").is_dir()


def test_unreadable_journal_is_called_unreadable_not_read_only(tmp_path, monkeypatch, capsys):
    folder = _session(tmp_path, n=2)
    real = Path.read_bytes

    def denied(self):
        if self.name == "journal.jsonl":  # what open() raises for a file without read permission
            raise PermissionError(errno.EACCES, "Permission denied", str(self))
        return real(self)

    real_open = Path.open

    def denied_open(self, *args, **kwargs):
        if self.name == "journal.jsonl":
            raise PermissionError(errno.EACCES, "Permission denied", str(self))
        return real_open(self, *args, **kwargs)

    monkeypatch.setattr(Path, "read_bytes", denied)
    monkeypatch.setattr(Path, "open", denied_open)  # Journal.open reads through Path.open
    assert cli(["verify", str(folder)]) == 1
    err = capsys.readouterr().err
    assert "unreadable (permission denied)" in err and "read-only" not in err
    with pytest.raises(JournalError, match="unreadable"):
        Journal.open(folder)


@pytest.mark.skipif(os.geteuid() == 0 if hasattr(os, "geteuid") else True,
                    reason="root reads a file without read permission")
def test_unreadable_journal_on_disk(tmp_path, capsys):
    folder = _session(tmp_path, n=2)
    (folder / "journal.jsonl").chmod(0o000)
    try:
        assert cli(["verify", str(folder)]) == 1
        assert "unreadable (permission denied)" in capsys.readouterr().err
    finally:
        (folder / "journal.jsonl").chmod(0o644)


def test_verify_of_a_running_session_says_in_use(tmp_path, capsys):
    """A second process holds the session open (as a running bench does) and has
    written a data file whose event is not written yet."""
    folder = _session(tmp_path, n=3)
    code = ("import sys, time\nfrom probelog.journal import Journal\n"
            "j = Journal.open(sys.argv[1])\n"
            "j.write_file('data/d0_0/x/L1-raw.s2p', b'! half a landing\\n')\n"
            "print('ready', flush=True)\nsys.stdin.readline()\n")
    proc = subprocess.Popen([sys.executable, "-c", code, str(folder)], cwd=ROOT, stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        assert writer_pid(folder) == str(proc.pid)
        with pytest.raises(SessionInUseError):
            verify(folder)
        assert cli(["verify", str(folder)]) == 3
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1 and f"in use (open for writing by pid {proc.pid})" in err
        assert "missing" not in err and "unreferenced" not in err
    finally:
        proc.stdin.close()
        proc.wait(timeout=60)
    # the writer is gone: verify walks it and reports the file it left without an event
    assert writer_pid(folder) is None
    report = verify(folder)
    assert not report.ok and [p.file for p in report.problems] == ["data/d0_0/x/L1-raw.s2p"]


def test_same_wafer_twice_in_one_second_gets_a_suffix(tmp_path):
    when = datetime(2026, 12, 1, 22, 45, 1, tzinfo=timezone.utc)
    sid = new_session_id("QF2611-W07", when)
    with Journal.create(tmp_path, sid, unique=True) as a, Journal.create(tmp_path, sid, unique=True) as b, \
            Journal.create(tmp_path, sid, unique=True) as c:
        assert [a.root.name, b.root.name, c.root.name] == [sid, f"{sid}-2", f"{sid}-3"]


def test_two_ids_that_clean_to_the_same_text_do_not_collide(tmp_path):
    when = datetime(2026, 12, 1, 22, 45, 1, tzinfo=timezone.utc)
    ids = [new_session_id(w, when) for w in ("QF2611/W07", "QF2611:W07", "QF2611 W07")]
    assert len(set(ids)) == 1  # the cleaning maps all three to one name ...
    roots = []
    for sid in ids:
        with Journal.create(tmp_path, sid, unique=True) as j:
            roots.append(j.root)
    assert len(set(roots)) == 3  # ... and each session still gets its own folder
    assert len(new_session_id("W" * 500, when)) <= 16 + 100


def test_two_headless_runs_of_one_plan_in_the_same_second(tmp_path):
    """Two engines started by two processes at once on the same wafer: two folders."""
    code = ("import sys\nfrom datetime import datetime, timezone\nimport probelog.journal as J\n"
            "when = datetime(2026, 12, 1, 22, 45, 1, tzinfo=timezone.utc)\n"
            "j = J.Journal.create(sys.argv[1], J.new_session_id('QF2611-W07', when), unique=True)\n"
            "print(j.root.name)\n")
    procs = [subprocess.Popen([sys.executable, "-c", code, str(tmp_path)], cwd=ROOT, stdout=subprocess.PIPE,
                              text=True) for _ in range(4)]
    names = sorted(p.communicate(timeout=60)[0].strip() for p in procs)
    assert all(p.returncode == 0 for p in procs)
    assert names == sorted(["20261201-224501-QF2611-W07"] + [f"20261201-224501-QF2611-W07-{n}" for n in (2, 3, 4)])


# ---------------------------------------------------------------- item 6: integrity


def _forge_append(folder: Path, type_: str, payload: dict) -> None:
    """Append an event exactly as the writer would (right seq, prev = SHA-256 of
    the line before): the forgery a bare hash chain cannot see."""
    import hashlib
    import json

    path = folder / "journal.jsonl"
    lines = path.read_bytes().split(b"\n")[:-1]
    last = json.loads(lines[-1])
    rec = {"seq": last["seq"] + 1, "ts": "2026-12-01T23:59:59.000Z", "type": type_, "payload": payload,
           "prev": hashlib.sha256(lines[-1]).hexdigest()}
    with open(path, "ab") as fh:
        fh.write(json.dumps(rec, sort_keys=True, separators=(",", ":")).encode() + b"\n")


def test_anchor_catches_a_forged_event_appended_after_it(tmp_path, capsys):
    folder = _session(tmp_path, n=5)
    assert cli(["verify", str(folder)]) == 0
    anchor = capsys.readouterr().out.split("anchor ")[1].split()[0]  # as printed: SEQ:SHA256
    assert cli(["verify", str(folder), "--anchor", anchor]) == 0
    capsys.readouterr()
    _forge_append(folder, "decision", {"die": [1, 1], "site": "ln-cpw-m9-r2-l500", "landing": 4, "action": "accept"})
    assert verify(folder).ok  # the chain alone cannot tell ...
    assert cli(["verify", str(folder), "--anchor", anchor]) == 1  # ... the anchor's count can
    out = capsys.readouterr().out
    assert "line 6" in out and "1 event(s) after the anchored last one" in out


def test_adopted_foreign_file_is_listed_and_flagged(tmp_path, capsys):
    folder = _session(tmp_path, n=3)
    foreign = folder / "data/d0_0/ln-x/L1-cor.s2p"
    foreign.parent.mkdir(parents=True)
    foreign.write_bytes(b"! not measured here\n1e9 0.5 0 0.5 0 0.5 0 0.5 0\n")
    copy = folder / "data/d1_1/ln-cpw-m9-r2-l500/L9-raw.s2p"  # the bytes of a journaled file
    copy.parent.mkdir(parents=True, exist_ok=True)
    copy.write_bytes((folder / "data/d1_1/ln-cpw-m9-r2-l500/L1-raw.s2p").read_bytes())
    with Journal.open(folder) as j:
        adopted = {ref["path"] for ref in j.recovered.payload["adopted"]}
    assert adopted == {"data/d0_0/ln-x/L1-cor.s2p", "data/d1_1/ln-cpw-m9-r2-l500/L9-raw.s2p"}
    report = verify(folder)
    assert report.ok and [w.file for w in report.warnings] == ["data/d0_0/ln-x/L1-cor.s2p"]
    assert cli(["verify", str(folder)]) == 0
    out = capsys.readouterr().out
    assert "warning: line 4, data/d0_0/ln-x/L1-cor.s2p: no event vouches for this file" in out
    assert "1 warning(s)" in out and "L9-raw" not in out
    # an adopted file changed after its adoption is damage, as any other file is
    foreign.write_bytes(b"! edited later\n")
    (p,) = verify(folder).problems
    assert p.file == "data/d0_0/ln-x/L1-cor.s2p" and "differs" in p.message
