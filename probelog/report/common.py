"""What every section of the report shares: its inputs, verdict colours and
the small HTML and PNG helpers (escaped cells, tables, embedded plots)."""

from __future__ import annotations

import base64
import html
import io
from dataclasses import dataclass
from typing import Any, Iterable

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.text import Text

from probelog.manifest import ChainStatus, SessionIndex

VERDICT_COLOURS = {"pass": "#2e7d32", "warn": "#ef8f00", "fail": "#c62828", "n/a": "#9e9e9e"}
ONE_PORT_KINDS = {"open", "short", "load", "open-stub", "short-stub"}
Die = tuple[int, int]  # (column, row)


@dataclass
class ReportInputs:
    """Everything the report draws from. ``networks`` maps a manifest row's
    ``seq`` to its (corrected, else raw) skrf.Network; ``cal_networks`` maps a
    journal file path to a Network (verification structures)."""

    index: SessionIndex
    chain: ChainStatus
    networks: dict[int, Any]
    cal_networks: dict[str, Any]
    integrity: list[str]
    metric: str | None
    torn_tail: bool = False


def png(fig: Figure, alt: str) -> str:
    # Every label comes from the session (wafer ids, site names, line types):
    # plain text, never mathtext, so a '$' in an id is drawn, not parsed.
    for text in fig.findobj(Text):
        text.set_parse_math(False)
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=80)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{data}">'


def esc(x: Any) -> str:
    if x is None:
        return ""
    if isinstance(x, float):
        return html.escape(f"{x:.4g}")
    return html.escape(str(x))


def table(header: Iterable[str], rows: Iterable[Iterable[Any]], cls: str = "") -> str:
    head = "".join(f"<th>{esc(h)}</th>" for h in header)
    body = []
    for r in rows:
        cells = []
        for v in r:
            if isinstance(v, str) and v in VERDICT_COLOURS:
                cells.append(f'<td class="v-{v.replace("/", "")}">{esc(v)}</td>')
            else:
                cells.append(f"<td>{esc(v)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    if not body:
        return '<p class="none">None.</p>'
    return f'<table class="{cls}"><thead><tr>{head}</tr></thead><tbody>{"".join(body)}</tbody></table>'


def die_label(data: Any) -> str:
    d = getattr(data, "die", None)
    return f"({d[0]}, {d[1]})" if d else ""


def ghz(hz: Any) -> str:
    return f"{hz / 1e9:g}" if isinstance(hz, (int, float)) else "?"
