"""State snapshots: resume takes the journal prefix a snapshot names on one
SHA-256 and folds only the events after it; a prefix that differs is walked
line by line (so an edited line is still caught) and a snapshot whose own
bytes do not hash as recorded is ignored. The journal stays the record.

Reference outside the project: hashlib's SHA-256 (FIPS 180-4) over the journal
file's bytes, and the full fold of every event (``st.fold`` over
``ev.read_session``) as what a restored state must equal.
"""

from __future__ import annotations

import hashlib
import random
import shutil

import msgspec
import pytest

import probelog.session as S
from probelog import events as ev
from probelog import state as st
from probelog.engine import checkpoint
from probelog.journal import JOURNAL_NAME, Journal, JournalError
from probelog.journal_read import PrefixHash, read_prefix
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


def _full_fold(folder):
    return st.fold(ev.read_session(folder))


def _block_sha256(data: bytes, block: int = 4 << 20) -> str:
    """The prefix hash as documented: SHA-256 of the 4 MiB blocks' SHA-256 digests."""
    return hashlib.sha256(b"".join(hashlib.sha256(data[i:i + block]).digest()
                                   for i in range(0, len(data), block))).hexdigest()


def test_the_prefix_hash_is_the_hash_of_the_block_hashes_however_it_is_fed(tmp_path):
    rng = random.Random(7)
    data = rng.randbytes(9 * (1 << 20) + 12345)  # two full blocks and a partial one
    (tmp_path / "f").write_bytes(data)
    want = _block_sha256(data)
    assert PrefixHash.of_file(tmp_path / "f", len(data)).hexdigest() == want
    fed = PrefixHash()
    pos = 0
    while pos < len(data):  # appended in odd pieces, as journal lines are
        n = rng.randrange(1, 3 << 20)
        fed.update(data[pos:pos + n])
        pos += n
    assert fed.hexdigest() == want
    assert PrefixHash.of_file(tmp_path / "f", len(data) - 1).hexdigest() != want  # one byte short
    assert PrefixHash.of_file(tmp_path / "f", len(data) + 1) is None  # the file is shorter
    flipped = bytearray(data)
    flipped[5 << 20] ^= 1  # one bit inside the second block
    (tmp_path / "f").write_bytes(bytes(flipped))
    assert PrefixHash.of_file(tmp_path / "f", len(data)).hexdigest() != want


def test_the_live_journal_keeps_the_prefix_that_hashing_the_file_gives(tmp_path):
    e = _session(tmp_path)
    folder = e.session_dir
    live = e.journal.prefix()
    data = (folder / JOURNAL_NAME).read_bytes()
    assert live.size == len(data) and live.sha256 == _block_sha256(data)
    assert live == read_prefix(folder, live.seq)
    e.close(False)
    # reopened by walking the chain (no snapshot): the same prefix, hashed on demand
    (folder / checkpoint.SNAPSHOT_NAME).unlink()
    with Journal.open(folder) as j:
        assert j.trusted_seq == 0 and j.prefix() == read_prefix(folder, j.prefix().seq)


def test_resume_takes_the_prefix_on_its_hash_and_equals_the_full_fold(tmp_path):
    e = _session(tmp_path)
    e.close(False)
    folder = tmp_path / "s1"
    n = len(ev.read_session(folder))
    journal, state = checkpoint.open_session(folder)
    with journal:
        # one hash for every line but the last two: the checkpoint event that
        # vouches for the snapshot, and session-closed
        assert journal.trusted_seq == n - 2
        rec = next(x for by in state.sites.values() for r in by.values() for x in r.landings if x.what == "landing")
        assert not rec.bulk.loaded  # checks and metrics still in the journal
        assert state == _full_fold(folder)
        assert rec.bulk.loaded and rec.metrics and rec.checks
    r = S.Engine.resume(folder, fake_bench())
    r.measure()
    r.accept()
    r.journal.close()  # killed: the snapshot is now behind the journal
    journal, state = checkpoint.open_session(folder)
    with journal:
        assert 0 < journal.trusted_seq < state.seq
        assert state == _full_fold(folder)


def test_an_edited_line_inside_the_prefix_is_caught(tmp_path):
    e = _session(tmp_path)
    e.close(False)
    folder = tmp_path / "s1"
    path = folder / JOURNAL_NAME
    lines = path.read_bytes().split(b"\n")
    k = next(i for i, raw in enumerate(lines) if b'"type":"landing"' in raw)
    lines[k] = lines[k].replace(b'"landing":1', b'"landing":7')
    path.write_bytes(b"\n".join(lines))
    with pytest.raises(JournalError, match=f"line {k + 2}: prev does not match"):
        checkpoint.open_session(folder)


def test_a_snapshot_of_another_history_is_ignored(tmp_path):
    e = _session(tmp_path)
    e.close(False)
    folder = tmp_path / "s1"
    other = tmp_path / "other"
    shutil.copytree(folder, other)
    # the same seq, a different last covered line: the journal cut after the line
    # before the checkpoint event, that line edited (its hash no longer the prefix's)
    lines = (other / JOURNAL_NAME).read_bytes().split(b"\n")[:-3]
    lines[-1] = lines[-1].replace(b'"reason":""', b'"reason":"edited"', 1)
    assert lines[-1] != (folder / JOURNAL_NAME).read_bytes().split(b"\n")[-4]
    (other / JOURNAL_NAME).write_bytes(b"\n".join(lines) + b"\n")
    journal, state = checkpoint.open_session(other)
    with journal:
        assert journal.trusted_seq == 0
        assert state == _full_fold(other)  # folded from the journal


def _rewrite_state(folder, rehash, **changes):
    """Rewrite the snapshot with ``changes`` in its state, keeping the recorded
    hash of the state bytes (a tampered snapshot) or recomputing it (the control)."""
    path = folder / checkpoint.SNAPSHOT_NAME
    snap = checkpoint._HEAD.decode(path.read_bytes())
    lines = checkpoint._Lines(folder, snap.prefix)
    state = msgspec.msgpack.decode(snap.state, type=st.SessionState, dec_hook=lines.dec_hook)
    body = checkpoint._ENCODER.encode(msgspec.structs.replace(state, **changes))
    sha = hashlib.sha256(body).hexdigest() if rehash else snap.state_sha256
    path.write_bytes(checkpoint._ENCODER.encode(checkpoint._Snapshot(snap.version, snap.prefix, sha,
                                                                     msgspec.Raw(body))))


def test_a_snapshot_whose_state_bytes_were_changed_is_ignored(tmp_path):
    e = _session(tmp_path)
    e.close(False)
    folder = tmp_path / "s1"
    saved = (folder / checkpoint.SNAPSHOT_NAME).read_bytes()
    _rewrite_state(folder, rehash=False, n_landings=9)
    journal, state = checkpoint.open_session(folder)
    with journal:
        assert state.n_landings == 1 and state == _full_fold(folder)
    # the same change with the state's hash recomputed (a deliberate edit): the
    # journal's checkpoint event names the file's SHA-256, so it is ignored too
    _rewrite_state(folder, rehash=True, n_landings=9)
    journal, state = checkpoint.open_session(folder)
    with journal:
        assert state.n_landings == 1 and state == _full_fold(folder)
    # the control: the engine's own snapshot, vouched for by its event, is taken
    (folder / checkpoint.SNAPSHOT_NAME).write_bytes(saved)
    journal, state = checkpoint.open_session(folder)
    with journal:
        rec = next(x for by in state.sites.values() for r in by.values() for x in r.landings if x.what == "landing")
        assert not rec.bulk.loaded  # restored from the snapshot, not folded
        assert state == _full_fold(folder)
    (folder / checkpoint.SNAPSHOT_NAME).write_bytes(b"not msgpack")
    journal, state = checkpoint.open_session(folder)
    with journal:
        assert journal.trusted_seq == 0 and state == _full_fold(folder)


def test_a_snapshot_no_checkpoint_event_vouches_for_is_ignored(tmp_path):
    """A snapshot written without its checkpoint event (a kill between the two,
    or a file dropped in by hand) is not taken: the journal does not vouch for it."""
    e = _session(tmp_path)
    folder = tmp_path / "s1"
    checkpoint.save_state(folder, e.state, e.journal.prefix())  # the file alone, no event
    e.journal.close()
    journal, state = checkpoint.open_session(folder)
    with journal:
        landing = next(x for by in state.sites.values() for r in by.values() for x in r.landings
                       if x.what == "landing")
        assert landing.bulk.loaded  # folded from the journal
        assert state == _full_fold(folder)
    # the engine's checkpoint writes the file and the event: then it is taken
    r = S.Engine.resume(folder, fake_bench())
    r.checkpoint()
    r.journal.close()
    events = ev.read_session(folder)
    assert isinstance(events[-1].data, ev.Checkpoint) and events[-1].data.seq == events[-2].seq
    journal, state = checkpoint.open_session(folder)
    with journal:
        landing = next(x for by in state.sites.values() for r in by.values() for x in r.landings
                       if x.what == "landing")
        assert not landing.bulk.loaded and state == _full_fold(folder)


def test_a_snapshot_whose_landing_reference_is_not_a_line_number_is_ignored(tmp_path):
    """A landing's bulk is stored as its journal line number; anything else there
    (a damaged snapshot) is a snapshot that does not decode: every event is folded
    (the decode hook raised NotImplementedError, which escaped resume)."""
    e = _session(tmp_path)
    folder = tmp_path / "s1"
    with pytest.raises(msgspec.ValidationError, match="no snapshot form"):
        msgspec.msgpack.decode(msgspec.msgpack.encode("not a line"), type=st.Bulk,
                               dec_hook=checkpoint._Lines(folder, e.journal.prefix()).dec_hook)
    e.close(False)
