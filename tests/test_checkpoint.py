"""State snapshots: resume folds only the events after a snapshot that matches
the chain, and ignores one that does not (the journal stays the record)."""

from __future__ import annotations

import shutil

import probelog.session as S
from probelog import events as ev
from probelog import state as st
from probelog.engine import checkpoint
from probelog.journal import Journal
from probelog.plan import load_plan_text
from tests._engine_fakes import fake_bench, plan_text


def _session(tmp_path):
    e = S.Engine(load_plan_text(plan_text(), "fake.toml"), fake_bench(), Journal.create(tmp_path, "s1"), "t")
    while e.next_step is not None:
        e.measure()
    e.compute_calibration()
    e.accept_calibration("ok")
    e.measure()
    e.accept()
    return e


def _records(folder):
    with Journal.open(folder) as j:
        return j.events()


def test_close_writes_a_snapshot_that_resume_uses_and_that_equals_the_fold(tmp_path):
    e = _session(tmp_path)
    e.close(False)
    folder = tmp_path / "s1"
    records = _records(folder)
    snap = checkpoint.snapshot_of(folder, records)
    assert snap is not None and snap.seq == len(records)
    assert snap == st.fold(ev.read_session(folder))
    r = S.Engine.resume(folder, fake_bench())
    r.measure()
    r.accept()
    r.journal.close()  # killed: the snapshot is now behind the journal
    records = _records(folder)
    assert checkpoint.snapshot_of(folder, records).seq < len(records)
    assert checkpoint.load_state(folder, records) == st.fold(ev.read_session(folder))


def test_a_snapshot_that_does_not_match_the_chain_is_ignored(tmp_path):
    e = _session(tmp_path)
    e.close(False)
    folder = tmp_path / "s1"
    other = tmp_path / "other"
    shutil.copytree(folder, other)
    # another session's history at the same seq: same seq, different line hash
    lines = (other / "journal.jsonl").read_bytes().split(b"\n")
    lines[-2] = lines[-2].replace(b'"completed":false', b'"completed":true')
    (other / "journal.jsonl").write_bytes(b"\n".join(lines))
    records = _records(other)
    assert checkpoint.snapshot_of(other, records) is None
    assert checkpoint.load_state(other, records).closed.completed is True  # folded from the journal
    (folder / checkpoint.SNAPSHOT_NAME).write_bytes(b"not msgpack")
    assert checkpoint.snapshot_of(folder, _records(folder)) is None
