"""docs/journal-events.md, generated from the event classes in probelog.event_types.

Regenerate with ``python -m probelog.events_doc > docs/journal-events.md``;
tests/test_events.py fails when the file and the classes disagree.
"""

from __future__ import annotations

import re
import typing
from typing import Any

import msgspec

from probelog.events import EVENT_CLASSES, SCHEMA

def _type_name(tp: Any) -> str:
    text = getattr(tp, "__name__", None) if not hasattr(tp, "__args__") else None
    text = text or re.sub(r"\b(?:\w+\.)+(\w+)", r"\1", str(tp))
    return text.replace(" | ", " or ")


def events_markdown() -> str:
    """docs/journal-events.md, generated from the classes (tests keep the file in sync)."""
    out = [_DOC_HEAD.format(schema=SCHEMA)]
    out.append("| type | class | payload fields (type, default) |")
    out.append("|---|---|---|")
    for cls in EVENT_CLASSES:
        hints = typing.get_type_hints(cls)
        fields = []
        for f in msgspec.structs.fields(cls):
            text = f"`{f.name}`: {_type_name(hints[f.name])}"
            if f.required:
                text += " (required)"
            fields.append(text)
        doc = " ".join((cls.__doc__ or "").split()).replace("|", "\\|")
        out.append(f"| `{cls.TYPE}` | {cls.__name__} | {'; '.join(fields)}" + (f". {doc}" if doc else "") + " |")
    out.append("")
    out.append(_DOC_TAIL)
    return "\n".join(out)


_DOC_HEAD = """# Journal events

Generated from `probelog/event_types.py` by `python -m probelog.events_doc > docs/journal-events.md`;
`tests/test_events.py` fails when this file and the classes disagree.

One JSON object a line in `sessions/<id>/journal.jsonl`:
`{{"seq": n, "ts": "2026-12-01T22:41:07.123Z", "type": "...", "payload": {{...}}, "prev": "..."}}`,
`prev` being the SHA-256 hex of the previous line's bytes without its newline (64 zeros for seq 1).
Keys are written sorted, separators `(",", ":")`, UTF-8, no NaN (NaN/inf become null).

Schema: `session-opened` carries `schema` (now {schema}; a journal without it is schema 1).
A payload of our schema must match its class (an unknown key is refused, naming line
and field); fields a newer schema added are dropped, and event types it added are
kept as `UnknownEvent` (never a crash). Missing optional fields take the default shown.

File references inside payloads are objects `{{"path": "data/...", "sha256": "..."}}`
(FileRef), paths relative to the session folder, always written (temp, fsync, rename,
fsync dir) before the event that names them. Check: `{{"name", "verdict", "value",
"limit", "at_hz", "message", "unit"}}`. `die` is `[column, row]`. Decision actions:
`accept`, `accept-despite-fail` (a FAIL landing kept, with the operator's reason),
`reland`, `skip`, `give-up`.
"""

_DOC_TAIL = """Data layout: `data/cal/<cal_id>/<site>-raw.s2p` (`<site>-L<n>-raw.s2p` when re-landed),
`data/cal/<cal_id>/calset/`, `data/cal/<cal_id>/verify/<site>-L<landing>-raw.s2p`,
`data/d<col>_<row>/<site>/L<landing>-raw.s2p` and `...-cor.s2p`. A name a crash left
behind (file written, event lost, adopted on reopen) is not reused: the redone step
writes `<name>-r2`, `-r3`, ...; events always name the file they mean.

Writer rules (probelog/journal.py): one writer per session (an exclusive `flock` on
`<session>/.lock`); data files are never overwritten. On reopen, bytes after the
last newline are the torn tail (moved aside); a complete line that is not a
readable event is damage wherever it is and refuses to open (run `probelog verify`).
A hash chain cannot see an edit of its last line, a cut at a line boundary or an
event appended with a correct `prev`: `probelog verify` prints `anchor SEQ:SHA256`
(the event count and the last line's hash); keep it elsewhere and pass it back as
`--anchor SEQ:SHA256`. Files adopted in a `recovered` event are verify warnings
unless another event recorded the same SHA-256. What each level protects
against: docs/integrity.md.
"""


if __name__ == "__main__":
    print(events_markdown(), end="")
