"""The lab report: one self-contained page, text escaped, damaged sessions flagged."""

from __future__ import annotations

import html.parser

from probelog.catalog.db import open_catalog
from probelog.catalog.ingest import add_session, write_record
from probelog.catalog.report import write_report
from probelog.catalog.source import read_session


class _Collect(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.text, self.srcs = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.srcs += [v for k, v in attrs if k in ("src", "href")]

    def handle_data(self, data):
        self.text.append(data)


def test_report_is_self_contained_and_escapes_text(db_url, demo_sessions, tmp_path):
    cat = open_catalog(db_url)
    add_session(cat, demo_sessions[0])
    rec = read_session(demo_sessions[1], line_figures=False)
    rec.session["operator"] = "<script>alert(1)</script>"
    rec.session["status"], rec.session["problem"] = "damaged", "data/x.s2p: data file differs & more"
    write_record(cat, rec)
    page = write_report(cat, tmp_path / "r.html").read_text(encoding="utf-8")
    p = _Collect()
    p.feed(page)
    assert "script" not in p.tags  # the operator's text is shown, not run
    assert "<script>alert(1)</script>" in "".join(p.text)
    assert all(s.startswith("data:image/png;base64,") for s in p.srcs) and len(p.srcs) >= 4
    assert "1 damaged session(s)" in page and "data file differs &amp; more" in page
    for heading in ("Wafer maps", "Pad-free line figures", "Yield per site and wafer", "Probe wear",
                    "Calibration agreement over time"):
        assert heading in page
    cat.close()
