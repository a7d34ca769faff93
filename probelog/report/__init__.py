"""The self-contained HTML report of an analyst bundle.

Every plot is drawn with matplotlib's Agg canvas (no pyplot state, no display)
and embedded as a base64 PNG, so the single HTML file can be mailed or archived
and still shows everything. Magnitudes are dB = 20 log10 |S|; frequencies in GHz
on the axes; die rows counted from 0 at the top of the wafer map.

One module per part of the page; this package re-exports what callers use:

- :mod:`~probelog.report.common`: the inputs, verdict colours, HTML and PNG helpers;
- :mod:`~probelog.report.header`: session identity, hash chain, summary, integrity;
- :mod:`~probelog.report.wafer_map`: one number per die, the map and its metric;
- :mod:`~probelog.report.cal_section`: cal sets, verification, agreement, Smith chart;
- :mod:`~probelog.report.sweeps`: overlays per site and line metrics against geometry;
- :mod:`~probelog.report.tables`: checks, kept warn/fail rows, retries, notes, errors;
- :mod:`~probelog.report.page`: the page itself (:func:`build_report`).
"""

from __future__ import annotations

from probelog.report.cal_section import smith_background
from probelog.report.common import ReportInputs
from probelog.report.page import build_report, self_contained
from probelog.report.wafer_map import default_metric, die_values, numeric_columns

__all__ = [
    "ReportInputs",
    "build_report",
    "default_metric",
    "die_values",
    "numeric_columns",
    "self_contained",
    "smith_background",
]
