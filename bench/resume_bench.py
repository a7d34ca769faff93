"""`make bench` row: resuming a 100,000-event session from a state checkpoint,
against folding every event, both measured here in one run.

The session is a real one to start with (the simulated bench, calibrated, a few
landings, then killed: no session-closed), grown to the target size with
landing / re-land / accept events written in the journal's own line format (hash
chain, canonical JSON) rather than through 100,000 fsyncs; they name the real
data files of the first landings. The engine writes a checkpoint every
probelog.engine.checkpoint.EVERY events; here the last one is written where the
engine would have written it (the best case: no event after it), and in a copy
EVERY - 1 events further back (the worst case: killed just before the next).

The resume reads the snapshot (the journal prefix it was folded from and the
state without the landings' bulk), hashes that prefix of the journal once,
walks only the lines after it and folds their events; the reference walks the
whole hash chain and folds every event.
"""

from __future__ import annotations

import gc
import hashlib
import time
from pathlib import Path
from typing import Callable

from probelog import events as ev
from probelog import state as st
from probelog.journal import JOURNAL_NAME, Journal, canonical_json


def grow_journal(session_dir: Path, target: int, checkpoint_at: int | None = None) -> int:
    """Append events to ``session_dir``'s journal until it holds ``target`` events:
    per (die, site) four failed landings re-landed, then one kept. Returns the count.

    ``checkpoint_at``: after that event, write the state snapshot and journal the
    ``checkpoint`` event that vouches for it, as the engine does."""
    path = session_dir / JOURNAL_NAME
    data = path.read_bytes()
    events = ev.decode_lines(data, str(path))
    landing = next(e.data for e in events if isinstance(e.data, ev.Landing))
    prev = events[-1].hash
    seq = events[-1].seq
    out = bytearray()

    def line(data: ev.Payload) -> None:
        nonlocal prev, seq
        seq += 1
        rec = {"seq": seq, "ts": "2026-12-02T05:00:00.000Z", "type": data.TYPE, "payload": ev.encode(data),
               "prev": prev}
        raw = canonical_json(rec)
        out.extend(raw + b"\n")
        prev = hashlib.sha256(raw).hexdigest()
        if seq == checkpoint_at:
            from probelog.engine.checkpoint import save_state

            with open(path, "ab") as fh:
                fh.write(out)
            out.clear()
            sha = save_state(session_dir, st.fold(ev.read_session(session_dir)))
            line(ev.Checkpoint(seq=seq, sha256=sha))

    # a 40 x 40 die grid off the plan's wafer (the walk does not reach it; the state
    # counts it), six sites a die: 1,600 dies, as on a large wafer
    visit = 0
    while seq < target:
        die, site = (100 + visit % 40, (visit // 40) % 40), f"{landing.site}-{visit // 1600}"
        visit += 1
        for n in range(1, 6):
            if seq >= target:
                break
            line(ev.Landing(die=die, site=site, landing=n, kind=landing.kind, cal_id=landing.cal_id,
                            raw=landing.raw, corrected=landing.corrected, checks=landing.checks,
                            verdict=landing.verdict, metrics=landing.metrics, touchdowns=landing.touchdowns))
            if seq < target:
                line(ev.Decision(die=die, site=site, landing=n, action=ev.RELAND if n < 5 else ev.ACCEPT,
                                 reason="bench" if n < 5 else ""))
    with open(path, "ab") as fh:
        fh.write(out)
    return seq


def measure(report: Callable[..., None], make_session: Callable[[Path], tuple[Path, object]], quick: bool) -> None:
    """Resume with and without the checkpoint; report time and ratio."""
    import shutil
    import tempfile

    from probelog.engine import Engine
    from probelog.engine.checkpoint import EVERY, SNAPSHOT_NAME, snapshot_prefix

    target = 20_000 if quick else 100_000
    at = (target // EVERY) * EVERY  # where the engine checkpoints (its checkpoint event follows)
    at_worst = at - (EVERY - 1)  # killed just before the next checkpoint: EVERY - 1 events to fold
    with tempfile.TemporaryDirectory() as tmp:
        session, bench = make_session(Path(tmp))
        worst = Path(tmp) / "worst"
        shutil.copytree(session, worst)
        n = grow_journal(session, target, checkpoint_at=at)
        grow_journal(worst, target, checkpoint_at=at_worst)
        full = Path(tmp) / "full"
        shutil.copytree(session, full)
        (full / SNAPSHOT_NAME).unlink()

        def resume(folder: Path) -> tuple[float, float]:
            (folder / JOURNAL_NAME).read_bytes()  # both runs start with the file in the page cache
            gc.disable()  # as Engine.resume does
            t0 = time.perf_counter()
            Journal.open(folder, snapshot_prefix(folder)).close()  # the journal's own part: read, chain, recovery
            t1 = time.perf_counter()
            gc.enable()
            engine = Engine.resume(folder, bench)
            t2 = time.perf_counter()
            engine.journal.close()  # as if killed again: the folder as it was plus session-resumed
            return t2 - t1, t1 - t0

        t_ckpt, t_open = resume(session)
        t_worst, _ = resume(worst)
        t_full, _ = resume(full)
    report(f"resume a {n}-event session (checkpoint at {at})", f"{t_ckpt:.2f} s", f"{t_full:.2f} s folding all",
           t_ckpt / t_full, "< 0.5 s", t_ckpt < 0.5)
    report("  of which Journal.open (hashes the snapshot's prefix, walks the lines after it)", f"{t_open:.2f} s",
           f"{t_ckpt:.2f} s resume", t_open / t_ckpt, "", None)
    report(f"resume it with the checkpoint {n - at_worst} events back (killed just before the next)",
           f"{t_worst:.2f} s", f"{t_full:.2f} s folding all", t_worst / t_full, "< 0.5 s", t_worst < 0.5)
