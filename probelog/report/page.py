"""The whole report as one self-contained HTML page: navigation, style and
every section in order."""

from __future__ import annotations

import html
import re

from matplotlib import rc_context

from probelog.pad_free_bundle import section as pad_free_section
from probelog.report.cal_section import calibration_section
from probelog.report.common import ReportInputs
from probelog.report.header import header_section, integrity_section, summary_section
from probelog.report.sweeps import line_trends_section, overlays_section
from probelog.report.tables import checks_section, retries_and_notes_section
from probelog.report.wafer_map import wafer_map_section

CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:24px auto;max-width:1180px;color:#212121}
h1{font-size:22px}h2{font-size:18px;border-bottom:1px solid #ccc;padding-top:10px}h3{font-size:15px}
table{border-collapse:collapse;font-size:13px;margin:6px 0 14px}td,th{border:1px solid #ddd;padding:3px 7px;text-align:left;vertical-align:top}
th{background:#f3f3f3}table.kv td:first-child{font-weight:600;white-space:nowrap}
img{max-width:100%}code{font-size:12px;word-break:break-all}
.chain{padding:8px 12px;margin:10px 0;border-radius:4px}.chain.ok{background:#e8f5e9}.chain.bad,.bad{background:#ffebee;color:#b71c1c}
.v-pass{color:#2e7d32}.v-warn{color:#ef8f00;font-weight:600}.v-fail{color:#c62828;font-weight:600}.v-na{color:#9e9e9e}
.none{color:#757575;font-style:italic}nav a{margin-right:12px}
"""


def build_report(inp: ReportInputs) -> str:
    """The whole report as one self-contained HTML string (no external links)."""
    nav = "".join(f'<a href="#{a}">{t}</a>' for a, t in (
        ("summary", "Summary"), ("wafer", "Wafer map"), ("calibration", "Calibration"),
        ("overlays", "Overlays"), ("lines", "Line metrics"), ("padfree", "Pad-free lines"), ("checks", "Checks"),
        ("retries", "Retries"), ("notes", "Notes")))
    # A user's matplotlibrc with text.usetex would hand '$', '_' or '%' in a label to TeX.
    with rc_context({"text.usetex": False, "text.parse_math": False}):
        body = "".join((header_section(inp), f"<nav>{nav}</nav>", summary_section(inp), integrity_section(inp), wafer_map_section(inp),
                        calibration_section(inp), overlays_section(inp), line_trends_section(inp),
                        pad_free_section(inp.index, inp.networks), checks_section(inp),
                        retries_and_notes_section(inp)))
    title = html.escape(f"probelog report {inp.index.opened.session_id}")
    return (f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'><title>{title}</title>"
            f"<style>{CSS}</style></head><body>{body}</body></html>")


def self_contained(page: str) -> bool:
    """True when no src/href points outside the file (http, https or protocol-relative)."""
    return re.search(r"""(?:src|href)\s*=\s*["']?\s*(?:https?:|//)""", page, re.I) is None
