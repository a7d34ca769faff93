"""The calibration section: cal sets and their decisions, verification
structures, agreement between algorithms and the verification stubs on a
Smith chart (|Sii| in dB beside it)."""

from __future__ import annotations

from collections import Counter
from typing import Any

import numpy as np
from matplotlib.figure import Figure

from probelog import events as ev
from probelog.report.common import ReportInputs, die_label, ghz, png, table


def calibration_section(inp: ReportInputs) -> str:
    idx = inp.index
    rows: list[list[Any]] = []
    ver_rows: list[list[Any]] = []
    agr_rows: list[list[Any]] = []
    std_count: Counter[str] = Counter()
    status: dict[str, str] = {}
    for e in idx.cal_events:
        d = e.data
        if isinstance(d, ev.CalStandard):
            std_count[d.cal_id] += 1
        elif isinstance(d, ev.CalComputed):
            kit = f" (kit SHA-256 {d.kit_sha256[:12]}...)" if d.kit_sha256 else ""
            rows.append([d.cal_id, d.method + kit, ", ".join(d.standards),
                         d.file.path if d.file else "", "yes" if d.ok else "no", d.message])
        elif isinstance(d, ev.CalVerification):
            ver_rows.append([d.cal_id, d.site, die_label(d), d.verdict.value,
                             "; ".join(f"{c.name}: {c.verdict.value}" for c in d.checks)])
        elif isinstance(d, ev.CalAgreement):
            agr_rows.append([d.cal_id, f"{d.method} vs {d.other_method}",
                             d.worst, ghz(d.at_hz), d.verdict.value])
        elif isinstance(d, (ev.CalAccepted, ev.CalRejected)):
            status[str(d.cal_id)] = f"{e.type[4:]}: {d.reason}"
    for r in rows:
        r.insert(3, std_count.get(r[0], 0))
        r.append(status.get(r[0], "no decision"))
    out = ["<h2 id='calibration'>Calibration</h2>",
           table(("cal set", "method", "standards", "standard sweeps", "file", "solved", "message", "decision"), rows),
           "<h3>Verification structures</h3>",
           table(("cal set", "site", "die", "verdict", "checks"), ver_rows),
           "<h3>Agreement between algorithms (worst-case bound over passive DUTs)</h3>",
           table(("cal set", "methods", "worst |dS|", "at GHz", "verdict"), agr_rows)]
    smith = _smith(inp)
    if smith:
        out.append("<h3>Verification stubs on the Smith chart</h3>" + smith)
    return "".join(out)


STUB_KINDS = {"open-stub", "short-stub"}


def smith_background(ax: Any) -> None:
    """scikit-rf's Smith chart grid with plain-text labels: it writes infinity in
    mathtext, and every label of the report is drawn as plain text (see _png)."""
    import skrf

    skrf.plotting.smith(ax=ax, chart_type="z", draw_labels=True)
    for text in ax.texts:
        if text.get_text() == r"$\infty$":
            text.set_text("\u221e")


def _smith(inp: ReportInputs) -> str:
    """Verification stubs (plan kind open-stub / short-stub; every verification
    structure when the plan does not say) on a Smith chart, with |Sii| in dB
    beside it: a passive stub stays inside the chart and below 0 dB."""
    traces = []
    for e in inp.index.cal_events:
        d = e.data
        if not isinstance(d, ev.CalVerification):
            continue
        kind = inp.index.sites.get(d.site, {}).get("kind")
        if kind is not None and kind not in STUB_KINDS:
            continue
        ref = d.corrected or d.raw
        ntwk = inp.cal_networks.get(ref.path) if ref is not None else None
        if ntwk is not None:
            traces.append((f"{d.cal_id} {d.site} {die_label(d)}", ntwk, d.verdict.value))
    if not traces:
        return ""
    fig = Figure(figsize=(12, 5.6))
    ax = fig.add_subplot(1, 2, 1)
    mag = fig.add_subplot(1, 2, 2)
    smith_background(ax)
    for label, ntwk, verdict in traces:
        for port, style in ((0, "-"), (1, "--")):
            if ntwk.s.shape[1] <= port:
                continue
            g = ntwk.s[:, port, port]
            name = f"{label} S{port + 1}{port + 1}" + (f" ({verdict})" if port == 0 else "")
            line = ax.plot(g.real, g.imag, style, lw=1.1, label=name)[0]
            ax.plot(g.real[:1], g.imag[:1], "o", ms=4, color=line.get_color())
            mag.plot(ntwk.f / 1e9, 20 * np.log10(np.maximum(np.abs(g), 1e-12)), style, lw=1.1,
                     color=line.get_color(), label=name)
    ax.legend(fontsize=7, loc="lower left")
    ax.set_title("Corrected; dot = first frequency; a passive stub turns clockwise inside the chart", fontsize=8)
    mag.axhline(0.0, color="black", lw=0.8)
    mag.set_xlabel("GHz")
    mag.set_ylabel("|Sii| (dB)")
    mag.grid(alpha=0.3)
    mag.set_title("Above 0 dB is gain: the cal or the stub is wrong", fontsize=8)
    fig.tight_layout()
    return png(fig, "verification stubs on the Smith chart")
