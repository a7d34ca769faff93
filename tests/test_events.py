"""Typed journal events: every class round-trips, old journals read, a newer
schema never crashes, the generated docs stay in sync."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from probelog import events as ev
from probelog.events_doc import events_markdown
from probelog.journal import Journal, canonical_json
from probelog.verdicts import Verdict

REF = ev.FileRef(path="data/d1_1/ln/L1-raw.s2p", sha256="ab" * 32)
CHECK = ev.Check(name="passivity", verdict=Verdict.WARN, value=1.001, limit=1.0, at_hz=40e9,
                 message="|S| above 1", unit="")

# One filled-in instance per class: every field away from its default, so a
# field the encoder or decoder drops shows up.
SAMPLES: list[ev.Payload] = [
    ev.SessionOpened(schema=ev.SCHEMA, session_id="s1", probelog_version="0.1.0", plan_name="p",
                     plan_file="p.toml", plan_sha256="cd" * 32, plan_text="name='p'", operator="ana",
                     wafer="QF2611-W07", lot="QF2611", chip="PLX-7", probes=["west", "east"],
                     bench={"kind": "sim", "description": "simulated"},
                     settings=ev.Settings(start_hz=1e9, stop_hz=110e9, points=201, ifbw_hz=100.0, power_dbm=-10.0)),
    ev.SessionResumed(operator="ana", login="lab", probelog_version="0.1.0", checked_files=3),
    ev.CautionsShown(text="ESD"),
    ev.CalStandard(cal_id="cal1", standard="thru", die=(0, 0), site="cal-thru", kind="thru", landing=2, raw=REF,
                   checks=[CHECK], verdict=Verdict.WARN, touchdowns={"west": 3}, switch_terms=[REF, REF]),
    ev.CalComputed(cal_id="cal1", method="solt", standards=["cal-open"], file=REF, files=[REF], ok=True,
                   message="solved", summary={"points": 201}, kit_name="k", kit_text="[kit]", kit_sha256="ef" * 32),
    ev.CalVerification(cal_id="cal1", site="ver", die=(0, 0), landing=3, raw=REF, corrected=REF, checks=[CHECK],
                       verdict=Verdict.FAIL, touchdowns={"west": 4}),
    ev.CalAgreement(cal_id="cal1", method="solt", other_method="lrrm", worst=0.01, at_hz=67e9, file=REF,
                    verdict=Verdict.WARN),
    ev.CalAccepted(cal_id="cal1", reason="ok"),
    ev.CalRejected(cal_id="cal1", reason="bad thru"),
    ev.RecalRequested(reason="drift", cal_id="cal2", advised_by="drift", drift_seq=7),
    ev.Landing(die=(1, 2), site="ln", landing=2, kind="line", cal_id="cal1", raw=REF, corrected=REF, checks=[CHECK],
               verdict=Verdict.FAIL, metrics={"f_hz": [1e9, 2e9], "alpha_db_per_mm": [0.1, None]},
               touchdowns={"west": 5}),
    ev.Drift(die=(0, 0), site="thru", landing=4, cal_id="cal1", reference_seq=9, raw=REF, corrected=REF,
             checks=[CHECK], verdict=Verdict.PASS, touchdowns={"west": 6}),
    ev.Decision(die=(1, 2), site="ln", action=ev.ACCEPT_DESPITE_FAIL, landing=2, reason="known defect",
                standard="thru", cal_id="cal1"),
    ev.DieSkipped(die=(3, 1), sites=["ln", "thru"], reason="cracked"),
    ev.Note(text="chuck at 25 C", die=(1, 2), site="ln"),
    ev.Goto(die=(2, 2), reason="customer asked"),
    ev.InstrumentError(where="vna", error="TimeoutError", message="no reply", touchdowns={"west": 1}),
    ev.Recovered(torn_line="journal.torn-1", torn_bytes=12, adopted=[REF], leftover_temp=["data/.x.tmp-1-1"],
                 message="m"),
    ev.SessionClosed(completed=True, summary={"accepted": 3}),
    ev.LineFigures(die=(2, 1), family="cpw/M9/10x6um", site_a="ln-a", site_b="ln-b", length_a_um=500.0,
                   length_b_um=1500.0, metrics={"f_hz": [4e10], "eps_eff": [6.61], "z0_re": [None]}),
    ev.Precheck(die=(1, 2), site="ln", landing=3, kind="line", cal_id="cal1", raw=REF,
                settings=ev.Settings(1e9, 110e9, 11, 1e5, -10.0), checks=[CHECK], verdict=Verdict.FAIL,
                touchdowns={"west": 7}),
    ev.Checkpoint(seq=2000, sha256="ab" * 32),
]


def test_every_event_class_has_a_sample():
    assert {type(s) for s in SAMPLES} == set(ev.EVENT_CLASSES)


@pytest.mark.parametrize("data", SAMPLES, ids=lambda d: d.TYPE)
def test_round_trip_through_the_journal_bytes(data, tmp_path):
    with Journal.create(tmp_path, "s1") as j:
        if not isinstance(data, ev.SessionOpened):
            j.append("session-opened", ev.encode(SAMPLES[0]))
        rec = j.append(data.TYPE, ev.encode(data))
    assert rec.type == data.TYPE
    from_bytes = ev.read_session(tmp_path / "s1")[-1]
    assert from_bytes.data == data and from_bytes.type == data.TYPE
    with Journal.open(tmp_path / "s1") as j:  # and from the dicts journal.py hands over
        assert list(ev.decode_events(j.events()))[-1].data == data


def test_unknown_field_of_our_schema_is_refused_with_line_and_field():
    dec = ev.Decoder("s1/journal.jsonl")
    with pytest.raises(ev.EventError, match=r"s1/journal.jsonl, line 4: 'goto' event: .*unknown field `speed`"):
        dec.payload("goto", {"die": [1, 2], "speed": 3}, line=4)
    with pytest.raises(ev.EventError, match=r"landing.*\$\.verdict"):
        dec.payload("landing", {"die": [1, 2], "site": "a", "landing": 1, "verdict": "great"})


def test_newer_schema_events_and_fields_are_kept_not_fatal():
    lines = [
        {"seq": 1, "ts": "t", "type": "session-opened", "payload": {"schema": ev.SCHEMA + 1, "wafer": "W", "x": 1},
         "prev": "0" * 64},
        {"seq": 2, "ts": "t", "type": "wafer-rotated", "payload": {"degrees": 90}, "prev": "1" * 64},
        {"seq": 3, "ts": "t", "type": "note", "payload": {"text": "hi", "mood": "good"}, "prev": "2" * 64},
    ]
    data = b"".join(canonical_json(x) + b"\n" for x in lines)
    got = ev.decode_lines(data)
    assert got[0].data.wafer == "W" and got[0].data.schema == ev.SCHEMA + 1
    assert got[1].data == ev.UnknownEvent("wafer-rotated", {"degrees": 90}) and got[1].type == "wafer-rotated"
    assert got[2].data == ev.Note(text="hi")
    # the same extra field in a journal of our own schema is an error
    lines[0]["payload"] = {"schema": ev.SCHEMA, "wafer": "W"}
    with pytest.raises(ev.EventError, match="line 3.*mood"):
        ev.decode_lines(b"".join(canonical_json(x) + b"\n" for x in lines))


def test_a_schema_1_journal_reads(tmp_path):
    """Lines exactly as probelog wrote them before typed events (payload shapes of
    docs/journal-events.md at that time): no schema key, no kit text, plain accept."""
    old = [
        ("session-opened", {"session_id": "s", "probelog_version": "0.1.0", "plan_name": "p", "plan_file": "p.toml",
                            "plan_sha256": "x", "plan_text": "t", "operator": "o", "wafer": "W", "lot": "L",
                            "chip": "C", "probes": ["west"], "bench": {"kind": "sim", "description": "d",
                                                                      "vna_idn": "v", "prober_idn": "p"},
                            "settings": {"start_hz": 1e9, "stop_hz": 2e9, "points": 11, "ifbw_hz": 100,
                                         "power_dbm": -10}}),
        ("cal-computed", {"cal_id": "cal1", "method": "solt", "standards": ["a"], "file": None, "files": [],
                          "ok": False, "message": "m", "summary": None}),
        ("decision", {"die": [1, 1], "site": "a", "landing": 1, "action": "accept", "reason": ""}),
        ("goto", {"die": [1, 1]}),
    ]
    data = b"".join(canonical_json({"seq": i, "ts": "t", "type": t, "payload": p, "prev": "0" * 64}) + b"\n"
                    for i, (t, p) in enumerate(old, 1))
    got = ev.decode_lines(data)
    assert got[0].data.schema == 1 and got[0].data.settings.points == 11
    assert got[2].data.action == ev.ACCEPT and got[3].data == ev.Goto(die=(1, 1))


def test_docs_are_generated_from_the_classes():
    doc = Path(__file__).resolve().parents[1] / "docs" / "journal-events.md"
    assert doc.read_text(encoding="utf-8") == events_markdown(), \
        "regenerate: python -m probelog.events_doc > docs/journal-events.md"
    for cls in ev.EVENT_CLASSES:
        assert f"| `{cls.TYPE}` |" in doc.read_text(encoding="utf-8")


def test_encode_writes_what_json_reads_back():
    d = ev.encode(SAMPLES[10])
    assert json.loads(canonical_json(d))["metrics"]["alpha_db_per_mm"] == [0.1, None]
    assert d["verdict"] == "fail" and d["die"] == (1, 2)
