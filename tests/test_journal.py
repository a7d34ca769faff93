"""The session journal: canonical lines, hash chain, crash recovery, full disks,
and `probelog verify`.

References outside the project: hashlib's SHA-256 (FIPS 180-4) and the json
module as the reader of what the journal wrote; POSIX file semantics for the
kill -9 trials.
"""

import dataclasses
import errno
import hashlib
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from datetime import datetime, timezone
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import probelog.journal as jmod
from probelog.journal import (
    JOURNAL_NAME,
    ZERO_HASH,
    Journal,
    JournalError,
    NotASessionError,
    new_session_id,
    verify,
)
from probelog.tui.cli import main as cli

ROOT = Path(__file__).resolve().parents[1]


def _session(tmp_path, n=5, files=True) -> Path:
    """A closed session of ``n`` landing events, each with a data file."""
    with Journal.create(tmp_path, "20261201-224501-QF2611-W07") as j:
        j.append("session-opened", {"session_id": j.session_id, "wafer": "QF2611-W07"})
        for i in range(1, n):
            payload = {"die": [i % 3, 1], "site": "ln-cpw-m9-r2-l500", "landing": i, "verdict": "pass"}
            if files:
                payload["raw"] = j.write_file(f"data/d{i % 3}_1/ln-cpw-m9-r2-l500/L{i}-raw.s2p",
                                              f"! raw {i}\n".encode() * 10).to_json()
            j.append("landing", payload)
        return j.root


def _lines(folder: Path) -> list[bytes]:
    return (folder / JOURNAL_NAME).read_bytes().split(b"\n")[:-1]


# ------------------------------------------------------------------ format


def test_lines_are_canonical_json_chained_by_sha256(tmp_path):
    folder = _session(tmp_path)
    lines = _lines(folder)
    assert len(lines) == 5
    prev = ZERO_HASH
    for i, raw in enumerate(lines, start=1):
        rec = json.loads(raw)
        assert raw == json.dumps(rec, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode()
        assert rec["seq"] == i and rec["prev"] == prev
        assert rec["ts"].endswith("Z") and len(rec["ts"]) == len("2026-12-01T22:41:07.123Z")
        prev = hashlib.sha256(raw).hexdigest()
    with Journal.open(folder) as j:
        assert j.last.hash == prev and j.last.seq == 5
        assert [e.type for e in j.events()] == ["session-opened"] + ["landing"] * 4
        assert j.recovered is None


def test_nan_and_inf_become_null_and_numpy_values_are_written(tmp_path):
    import numpy as np

    with Journal.create(tmp_path, "s1") as j:
        ev = j.append("note", {"v": float("nan"), "w": [1.0, float("-inf")], "n": np.float32(0.5),
                               "a": np.arange(3), "p": Path("data/x")})
    rec = json.loads(_lines(tmp_path / "s1")[0])
    assert rec["payload"] == {"v": None, "w": [1.0, None], "n": 0.5, "a": [0, 1, 2], "p": "data/x"}
    assert ev.payload == rec["payload"]


def test_payload_that_is_not_json_is_refused_without_writing(tmp_path):
    with Journal.create(tmp_path, "s1") as j:
        with pytest.raises(JournalError, match="cannot be written as JSON"):
            j.append("note", {"x": object()})
        assert j.append("note", {"x": 1}).seq == 1
    assert len(_lines(tmp_path / "s1")) == 1


def test_session_id_is_utc_time_and_wafer():
    when = datetime(2026, 12, 1, 22, 45, 1, tzinfo=timezone.utc)
    assert new_session_id("QF2611-W07", when) == "20261201-224501-QF2611-W07"
    assert new_session_id("lot 7/w 3", when) == "20261201-224501-lot_7_w_3"


def test_write_file_is_atomic_and_never_overwrites(tmp_path):
    with Journal.create(tmp_path, "s1") as j:
        data = bytes(range(256)) * 100
        ref = j.write_file("data/cal/cal-1/cal-open-raw.s2p", data)
        assert ref.sha256 == hashlib.sha256(data).hexdigest()
        assert (j.root / ref.path).read_bytes() == data
        with pytest.raises(JournalError, match="never overwritten"):
            j.write_file(ref.path, b"other")
        for bad in ("../x.s2p", "/tmp/x.s2p", "data/.hidden", "notdata/x.s2p", "data", "data/../../x"):
            with pytest.raises(JournalError, match="relative path under data/"):
                j.write_file(bad, b"x")
    names = [p.name for p in (tmp_path / "s1").rglob("*")]
    assert not any(".tmp-" in n for n in names)


def test_one_writer_at_a_time(tmp_path):
    folder = _session(tmp_path, n=2)
    with Journal.open(folder):
        with pytest.raises(JournalError, match=r"open for writing in another process \(pid \d+\)"):
            Journal.open(folder)
    with Journal.open(folder) as j:  # the lock went with close()
        assert j.last.seq == 2


def test_lock_holds_across_processes(tmp_path):
    folder = _session(tmp_path, n=2)
    code = ("import sys; from probelog.journal import Journal, JournalError\n"
            "try:\n Journal.open(sys.argv[1])\nexcept JournalError as e:\n print(e); sys.exit(3)\n")
    with Journal.open(folder):
        proc = subprocess.run([sys.executable, "-c", code, str(folder)], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 3 and f"pid {os.getpid()}" in proc.stdout


def test_create_refuses_an_existing_session(tmp_path):
    _session(tmp_path, n=1)
    with pytest.raises(JournalError, match="exists already"):
        Journal.create(tmp_path, "20261201-224501-QF2611-W07")


def test_open_and_verify_need_a_session_folder(tmp_path):
    with pytest.raises(NotASessionError):
        Journal.open(tmp_path)
    with pytest.raises(NotASessionError):
        verify(tmp_path / "nowhere")


# ------------------------------------------------------------------ verify


def _problems(folder, **kw):
    report = verify(folder, **kw)
    assert report.ok == (not report.problems)
    return report.problems


def test_intact_session_verifies(tmp_path):
    folder = _session(tmp_path)
    report = verify(folder)
    assert report.ok and report.events == 5 and report.last_seq == 5
    assert report.last_hash == hashlib.sha256(_lines(folder)[-1]).hexdigest()


def test_edited_line_is_found(tmp_path):
    folder = _session(tmp_path)
    path = folder / JOURNAL_NAME
    path.write_bytes(path.read_bytes().replace(b'"verdict":"pass"', b'"verdict":"fail"', 1))
    (p,) = _problems(folder)
    assert p.line == 3 and p.file == JOURNAL_NAME and "line 2 was edited" in p.message
    assert p.expected == "prev " + hashlib.sha256(_lines(folder)[1]).hexdigest()


def test_deleted_line_is_found(tmp_path):
    folder = _session(tmp_path)
    lines = _lines(folder)
    (folder / JOURNAL_NAME).write_bytes(b"\n".join(lines[:2] + lines[3:]) + b"\n")
    probs = _problems(folder)
    assert {p.line for p in probs} >= {3}
    assert any(p.expected == "seq 3" and p.found == "seq 4" for p in probs)
    # The deleted event's data file is now named by no event.
    assert any(p.line is None and p.file.endswith("L2-raw.s2p") for p in probs)


def test_swapped_lines_are_found(tmp_path):
    folder = _session(tmp_path)
    lines = _lines(folder)
    lines[1], lines[2] = lines[2], lines[1]
    (folder / JOURNAL_NAME).write_bytes(b"\n".join(lines) + b"\n")
    probs = _problems(folder)
    assert any(p.line == 2 and "seq" in p.expected for p in probs)
    assert any(p.line == 3 and p.expected.startswith("prev") for p in probs)


def test_edited_data_file_is_found(tmp_path):
    folder = _session(tmp_path)
    target = folder / "data/d2_1/ln-cpw-m9-r2-l500/L2-raw.s2p"
    original = target.read_bytes()
    target.write_bytes(original.replace(b"raw 2", b"raw 9"))
    (p,) = _problems(folder)
    assert p.line == 3 and p.file == "data/d2_1/ln-cpw-m9-r2-l500/L2-raw.s2p"
    assert p.expected == "sha256 " + hashlib.sha256(original).hexdigest()
    assert p.found == "sha256 " + hashlib.sha256(target.read_bytes()).hexdigest()
    target.unlink()
    (p,) = _problems(folder)
    assert p.found == "missing"


def test_anchor_catches_an_edit_of_the_last_line(tmp_path):
    folder = _session(tmp_path)
    anchor = (5, hashlib.sha256(_lines(folder)[-1]).hexdigest())
    assert verify(folder, anchor=anchor).ok
    path = folder / JOURNAL_NAME
    data = path.read_bytes()
    head, last = data[:-1].rsplit(b"\n", 1)
    path.write_bytes(head + b"\n" + last.replace(b'"landing":4', b'"landing":5') + b"\n")
    assert verify(folder).ok  # a bare chain cannot see it ...
    (p,) = _problems(folder, anchor=anchor)  # ... the anchor can
    assert p.line == 5 and "anchored" in p.message


def test_verify_scans_ten_thousand_events(tmp_path, monkeypatch):
    # Build fast without fsync; the scan itself is what is exercised here.
    monkeypatch.setattr(jmod.os, "fsync", lambda fd: None)
    with Journal.create(tmp_path, "big") as j:
        for i in range(10_000):
            j.append("landing", {"i": i, "checks": [{"name": "passivity", "value": 0.99}]})
    report = verify(tmp_path / "big")
    assert report.ok and report.events == 10_000


# ------------------------------------------------------------------ recovery


def test_torn_last_line_is_moved_aside_and_recorded(tmp_path):
    folder = _session(tmp_path)
    before = sorted(p.relative_to(folder) for p in folder.rglob("*") if p.is_file())
    path = folder / JOURNAL_NAME
    torn = b'{"payload":{"die":[1,1],"site":"ln'
    path.write_bytes(path.read_bytes() + torn)
    assert any("torn last line" in p.message for p in _problems(folder))
    with Journal.open(folder) as j:
        ev = j.recovered
        assert ev is not None and ev.seq == 6 and ev.type == "recovered"
        assert ev.payload["torn_line"] == "journal.torn-1" and ev.payload["adopted"] == []
    assert (folder / "journal.torn-1").read_bytes() == torn
    after = sorted(p.relative_to(folder) for p in folder.rglob("*") if p.is_file())
    assert set(before) <= set(after)  # nothing deleted
    assert verify(folder).ok


def test_unreadable_complete_last_line_is_damage_not_torn(tmp_path):
    """A line is written with one write() ending in its newline: a crash leaves
    bytes without the newline, never a complete garbled line (issue 13, item 6)."""
    folder = _session(tmp_path, n=3)
    path = folder / JOURNAL_NAME
    damaged = path.read_bytes() + b"\x00\xffgarbage\n" + b"more"
    path.write_bytes(damaged)
    with pytest.raises(JournalError, match=r"line 4: not valid JSON.*damaged"):
        Journal.open(folder)
    assert path.read_bytes() == damaged and not (folder / "journal.torn-1").exists()  # nothing moved
    probs = _problems(folder)
    assert [(p.line, p.message.split(" (")[0]) for p in probs] == [(4, "not valid JSON"), (5, "torn last line")]
    # the same garbage without its newline is the torn tail, and only that is moved aside
    path.write_bytes(damaged[: damaged.index(b"\x00")] + b"\x00\xffgarbage")
    with Journal.open(folder) as j:
        assert j.recovered.payload["torn_bytes"] == len(b"\x00\xffgarbage") and j.last.seq == 4
    assert verify(folder).ok


def test_orphan_data_file_is_adopted(tmp_path):
    folder = _session(tmp_path, n=2)
    with Journal.open(folder) as j:
        ref = j.write_file("data/d0_0/x/L1-raw.s2p", b"written, then the process died")
    probs = _problems(folder)
    assert [p.file for p in probs] == [ref.path]
    with Journal.open(folder) as j:
        assert j.recovered.payload["adopted"] == [ref.to_json()]
        assert j.recovered.payload["torn_line"] is None
    assert verify(folder).ok


def test_leftover_temp_file_is_kept_and_reported_once(tmp_path):
    folder = _session(tmp_path, n=2)
    temp = folder / "data" / "d0_1" / ".L9-raw.s2p.tmp-4242-1"
    temp.parent.mkdir(parents=True, exist_ok=True)
    temp.write_bytes(b"half a file")
    with Journal.open(folder) as j:
        assert j.recovered.payload["leftover_temp"] == ["data/d0_1/.L9-raw.s2p.tmp-4242-1"]
        assert j.recovered.payload["adopted"] == []
    with Journal.open(folder) as j:
        assert j.recovered is None
    assert temp.read_bytes() == b"half a file"
    assert verify(folder).ok


def test_recovery_is_the_same_when_open_takes_a_snapshots_prefix_on_its_hash(tmp_path):
    """Torn tail, orphan adoption and the once-only temp report after a prefix
    taken on its hash (no line of it walked): the prefix carries what the walk
    would have found (data files named, temps reported)."""
    folder = _session(tmp_path, n=4)
    temp = folder / "data" / "d0_1" / ".L9-raw.s2p.tmp-4242-1"
    temp.write_bytes(b"half a file")
    with Journal.open(folder) as j:  # reports the temp file once
        assert j.recovered.payload["leftover_temp"] == ["data/d0_1/.L9-raw.s2p.tmp-4242-1"]
        prefix = j.prefix()
        orphan = j.write_file("data/d0_0/x/L1-raw.s2p", b"written, then the process died")
    path = folder / JOURNAL_NAME
    torn = b'{"payload":{"die":[1,1],"site":"ln'
    path.write_bytes(path.read_bytes() + torn)
    with Journal.open(folder, prefix) as j:
        assert j.trusted_seq == prefix.seq == 5
        rec = j.recovered.payload
        assert rec["torn_line"] == "journal.torn-1" and rec["torn_bytes"] == len(torn)
        assert rec["adopted"] == [orphan.to_json()]  # the files the prefix names are not orphans
        assert rec["leftover_temp"] == []  # reported once, by a line inside the prefix
        assert [e.seq for e in j.events(after=prefix.seq)] == [6]
        assert [e.seq for e in j.events()] == [1, 2, 3, 4, 5, 6]  # read back from the file
    assert (folder / "journal.torn-1").read_bytes() == torn
    assert verify(folder).ok


def test_a_prefix_that_does_not_match_the_file_is_walked_line_by_line(tmp_path):
    folder = _session(tmp_path, n=4)
    with Journal.open(folder) as j:
        prefix = j.prefix()
    assert prefix.sha256 != hashlib.sha256(b"").hexdigest()
    for wrong in (dataclasses.replace(prefix, sha256="0" * 64), dataclasses.replace(prefix, offsets=b""),
                  dataclasses.replace(prefix, size=prefix.size + 1)):
        with Journal.open(folder, wrong) as j:
            assert j.trusted_seq == 0 and j.last.seq == 4
    with Journal.open(folder, prefix) as j:  # the control: the right prefix is taken
        assert j.trusted_seq == 4 and j.last.seq == 4 and j.last.hash == prefix.last_hash
    path = folder / JOURNAL_NAME
    path.write_bytes(path.read_bytes().replace(b'"landing":2', b'"landing":7', 1))
    with pytest.raises(JournalError, match="line 4: prev does not match"):
        Journal.open(folder, prefix)  # an edited line: the hash differs, the walk names the line


def test_damage_in_the_middle_refuses_to_open(tmp_path):
    folder = _session(tmp_path)
    path = folder / JOURNAL_NAME
    path.write_bytes(path.read_bytes().replace(b'"landing":2', b'"landing":7', 1))
    with pytest.raises(JournalError, match=r"line 4: prev does not match.*probelog verify"):
        Journal.open(folder)
    # The failed open left the lock free and the file untouched.
    assert len(_lines(folder)) == 5
    with pytest.raises(JournalError, match="line 4"):
        Journal.open(folder)


# ------------------------------------------------------------------ full disk, read-only


def _enospc(*args, **kwargs):
    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


def test_full_disk_on_write_leaves_the_journal_intact(tmp_path, monkeypatch):
    folder = _session(tmp_path, n=2)
    with Journal.open(folder) as j:
        before = (folder / JOURNAL_NAME).read_bytes()
        real_write = os.write
        calls = []

        def half_then_full(fd, data):  # a partial write, then no space
            calls.append(len(data))
            if len(calls) == 1:
                return real_write(fd, bytes(data)[: len(data) // 2])
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

        monkeypatch.setattr(jmod.os, "write", half_then_full)
        with pytest.raises(JournalError, match=r"disk is full.*intact up to event 2"):
            j.append("note", {"text": "x" * 500})
        assert (folder / JOURNAL_NAME).read_bytes() == before
        monkeypatch.setattr(jmod.os, "write", real_write)
        assert j.append("note", {"text": "space again"}).seq == 3  # retry works
    assert verify(folder).ok


def test_full_disk_on_fsync_stops_the_journal(tmp_path, monkeypatch):
    folder = _session(tmp_path, n=2)
    before = (folder / JOURNAL_NAME).read_bytes()
    with Journal.open(folder) as j:
        monkeypatch.setattr(jmod.os, "fsync", _enospc)
        with pytest.raises(JournalError, match="fsync failed: the disk is full"):
            j.append("note", {"text": "x"})
        monkeypatch.undo()
        with pytest.raises(JournalError, match="reopen the session"):
            j.append("note", {"text": "y"})
    assert (folder / JOURNAL_NAME).read_bytes() == before
    with Journal.open(folder) as j:
        assert j.last.seq == 2 and j.recovered is None


def test_full_disk_on_data_file_leaves_no_file(tmp_path, monkeypatch):
    with Journal.create(tmp_path, "s1") as j:
        monkeypatch.setattr(jmod.os, "fsync", _enospc)
        with pytest.raises(JournalError, match=r"L1-raw\.s2p: not written: the disk is full"):
            j.write_file("data/d0_0/a/L1-raw.s2p", b"x" * 1000)
    monkeypatch.undo()
    assert [p for p in (tmp_path / "s1" / "data").rglob("*") if p.is_file()] == []
    assert verify(tmp_path / "s1").ok


def test_read_only_folder_gives_a_clear_error(tmp_path, monkeypatch):
    folder = _session(tmp_path, n=2)
    real_open = os.open

    def read_only(path, flags, *a, **kw):
        if flags & (os.O_WRONLY | os.O_RDWR | os.O_CREAT):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(path))
        return real_open(path, flags, *a, **kw)

    monkeypatch.setattr(jmod.os, "open", read_only)
    with pytest.raises(JournalError, match="read-only or not writable"):
        Journal.open(folder)
    with pytest.raises(JournalError, match="read-only or not writable"):
        Journal.create(tmp_path, "s2")
    monkeypatch.undo()
    assert verify(folder).ok  # verify only reads


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root ignores folder permissions")
def test_chmod_read_only_folder(tmp_path):
    folder = _session(tmp_path, n=2)
    (folder / ".lock").unlink()
    os.chmod(folder, 0o555)
    try:
        with pytest.raises(JournalError, match="read-only or not writable"):
            Journal.open(folder)
    finally:
        os.chmod(folder, 0o755)


# ------------------------------------------------------------------ fuzzing


@pytest.fixture(scope="module")
def base_session(tmp_path_factory):
    return _session(tmp_path_factory.mktemp("base"), n=6)


@settings(max_examples=150, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(op=st.sampled_from(["append", "truncate", "flip", "insert"]), data=st.data())
def test_fuzz_reader_recovers_or_refuses(base_session, tmp_path_factory, op, data):
    folder = tmp_path_factory.mktemp("fz") / "s"
    shutil.copytree(base_session, folder)
    path = folder / JOURNAL_NAME
    original = path.read_bytes()
    anchor = (6, hashlib.sha256(original.split(b"\n")[-2]).hexdigest())
    raw = bytearray(original)
    if op == "append":
        raw += data.draw(st.binary(min_size=1, max_size=200))
    elif op == "truncate":
        del raw[data.draw(st.integers(0, len(raw) - 1)):]
    elif op == "flip":
        i = data.draw(st.integers(0, len(raw) - 1))
        raw[i] ^= data.draw(st.integers(1, 255))
    else:
        i = data.draw(st.integers(0, len(raw)))
        raw[i:i] = data.draw(st.binary(min_size=1, max_size=50))
    mutated = bytes(raw)
    path.write_bytes(mutated)

    # With the hash of the last line kept elsewhere, any change is seen.
    assert verify(folder, anchor=anchor).ok == (mutated == original)
    # Without it, only a change confined to the end can pass: the chain covers
    # every line but the last.
    if verify(folder).ok and mutated != original:
        kept = mutated.split(b"\n")[:-2]
        assert original.split(b"\n")[: len(kept)] == kept
    try:
        j = Journal.open(folder)
    except JournalError:
        assert path.read_bytes() == mutated  # refused without touching it
        return
    j.close()
    # After recovery the chain is whole; only data-file references edited inside
    # a still-valid last line can remain wrong.
    assert all(p.file != JOURNAL_NAME for p in verify(folder).problems)


# ------------------------------------------------------------------ kill -9 trials

CHILD = r"""
import os, sys
from probelog.journal import Journal
folder = sys.argv[1]
j = Journal.open(folder)
i = 0
while True:
    i += 1
    ref = j.write_file(f"data/k/{os.getpid()}-{i}.bin", os.urandom(3000))
    ev = j.append("landing", {"raw": ref.to_json(), "i": i, "pid": os.getpid()})
    sys.stdout.write(f"{ev.seq} {ev.hash}\n")
    sys.stdout.flush()
"""


@pytest.mark.slow
def test_kill_nine_trials_lose_no_acknowledged_event(tmp_path):
    rng = random.Random(20261201)
    folder = _session(tmp_path, n=1, files=False)
    acked: dict[int, str] = {}
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    for trial in range(24):
        proc = subprocess.Popen([sys.executable, "-c", CHILD, str(folder)], cwd=ROOT, env=env,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        time.sleep(rng.uniform(0.05, 0.3))
        proc.send_signal(signal.SIGKILL)
        out, err = proc.communicate(timeout=10)
        assert proc.returncode == -signal.SIGKILL, err.decode()
        for line in out.decode().split("\n")[:-1]:  # a cut-off last line is ignored
            seq, h = line.split()
            acked[int(seq)] = h
        with Journal.open(folder) as j:
            have = {e.seq: e.hash for e in j.events()}
        missing = {s: h for s, h in acked.items() if have.get(s) != h}
        assert not missing, f"trial {trial}: acknowledged events lost: {sorted(missing)}"
        report = verify(folder)
        assert report.ok, f"trial {trial}: {report.problems[:3]}"
    assert len(acked) > 24  # the children did get work done


# ------------------------------------------------------------------ probelog verify


def test_cli_verify_intact_damaged_and_not_a_session(tmp_path, capsys):
    folder = _session(tmp_path)
    assert cli(["verify", str(folder)]) == 0
    out = capsys.readouterr().out
    assert "intact" in out and "5 events" in out
    target = folder / "data/d1_1/ln-cpw-m9-r2-l500/L1-raw.s2p"
    target.write_bytes(b"changed")
    assert cli(["verify", str(folder)]) == 1
    out = capsys.readouterr().out
    assert "line 2" in out and "data/d1_1/ln-cpw-m9-r2-l500/L1-raw.s2p" in out
    assert "expected sha256" in out and "found sha256 " + hashlib.sha256(b"changed").hexdigest() in out
    assert cli(["verify", str(tmp_path / "nope")]) == 2
    assert "not a session folder" in capsys.readouterr().err


def test_cli_verify_anchor(tmp_path, capsys):
    folder = _session(tmp_path)
    h = hashlib.sha256(_lines(folder)[-1]).hexdigest()
    assert cli(["verify", str(folder), "--anchor", f"5:{h}"]) == 0
    assert cli(["verify", str(folder), "--anchor", f"5:{'0' * 64}"]) == 1
    capsys.readouterr()
    assert cli(["verify", str(folder), "--anchor", "five"]) == 2
    assert "--anchor" in capsys.readouterr().err


def test_fast_reference_scan_agrees_with_the_payload_walk(tmp_path):
    # The recovery scan reads file references straight from the journal bytes;
    # the reference is the generic walk over every parsed payload.
    from probelog.journal_format import file_refs_in as _refs
    from probelog.journal_format import referenced_paths as _referenced_paths

    j = Journal.create(tmp_path, "refs")
    for i in range(30):
        refs = j.write_files([(f"data/d{i}/L1-raw.s2p", b"x" * i), (f"data/d{i}/L1-cor.s2p", b"y")])
        j.append("landing", {"raw": refs[0].to_json(), "corrected": refs[1].to_json(),
                             "checks": [{"name": "contact", "value": 1.0}], "metrics": {"f_hz": [1.0, 2.0]},
                             "nested": [{"files": [refs[1].to_json()]}], "note": '"path":"data/fake"'})
    j.close()
    data = (tmp_path / "refs" / "journal.jsonl").read_bytes()
    walked = set()
    for line in data.splitlines():
        walked |= {p for p, _ in _refs(json.loads(line)["payload"])}
    assert _referenced_paths(data) == walked and len(walked) == 60


# ------------------------------------------------------------------ reading on open


def test_open_reads_the_same_events_as_a_full_parse(tmp_path):
    """Journal.open takes seq, prev, ts and type from each line's canonical tail and
    parses payloads only when asked; what it hands over equals json.loads of each line."""
    folder = _session(tmp_path, n=8)
    prev = ZERO_HASH
    with Journal.open(folder) as j:
        got = j.events()
    for e, raw in zip(got, _lines(folder), strict=True):
        rec = json.loads(raw)
        assert (e.seq, e.ts, e.type, e.payload, e.prev) == (rec["seq"], rec["ts"], rec["type"], rec["payload"], prev)
        prev = hashlib.sha256(raw).hexdigest()
        assert e.hash == prev


def test_a_rechained_middle_line_that_does_not_parse_is_refused_when_read(tmp_path):
    """A middle line with a good tail but a broken payload, its chain recomputed by
    hand, passes open (the chain vouches for bytes, not meaning) and is refused, with
    its line, the moment its payload is read; `verify` parses every line."""
    folder = _session(tmp_path, n=4)
    lines = _lines(folder)
    bad = lines[1].replace(b'"verdict":"pass"', b'"verdict":pass"', 1)
    assert bad != lines[1]
    fixed, prev = [], ZERO_HASH
    for i, raw in enumerate([lines[0], bad, *lines[2:]], start=1):
        if i > 1:
            raw = raw[: raw.index(b',"prev":"') + 9] + prev.encode() + raw[raw.index(b',"prev":"') + 9 + 64:]
        fixed.append(raw)
        prev = hashlib.sha256(raw).hexdigest()
    (folder / JOURNAL_NAME).write_bytes(b"\n".join(fixed) + b"\n")
    with Journal.open(folder) as j:
        events = j.events()
        assert events[0].payload["wafer"] == "QF2611-W07"
        with pytest.raises(JournalError, match="journal line 2: not valid JSON"):
            _ = events[1].payload
