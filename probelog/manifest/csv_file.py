"""``manifest.csv`` written and read back: empty cells for None, text a
spreadsheet would run as a formula quoted, numbers as numbers on the way back."""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Any

from probelog.manifest.index import SessionIndex


def write_manifest_csv(path: Path, index: SessionIndex) -> Path:
    """Write the manifest: one row per kept sweep, every column of ``index.columns``
    (empty cell for a value that does not apply)."""
    cols = index.columns
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=cols, extrasaction="ignore", lineterminator="\n")
        w.writeheader()
        for row in index.rows:
            w.writerow({c: csv_cell(row.get(c)) for c in cols})
    return path


# A text cell a spreadsheet would run as a formula (OWASP "CSV Injection": =, +, -,
# @, tab, carriage return) is written with a leading single quote, which every
# common spreadsheet reads as "this is text". Numbers, and text that is a plain
# number (-3.5), are left alone.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def csv_cell(value: Any) -> Any:
    """One manifest cell: "" for None, text that could start a formula prefixed
    with ``'``, everything else unchanged."""
    if value is None:
        return ""
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        try:
            float(value)
        except ValueError:
            return "'" + value
    return value


_INT_COLS = {"seq", "die_col", "die_row", "landing", "retries", "files_ok"}
_TEXT_COLS = {"time", "site", "kind", "line_type", "metal", "cal_id", "verdict", "decision", "decision_reason", "notes"}


def read_manifest_csv(path: Path) -> list[dict[str, Any]]:
    """Read a bundle's manifest back with numbers as numbers and empty cells as None."""
    rows = []
    with open(path, newline="", encoding="utf-8") as fh:
        for rec in csv.DictReader(fh):
            row: dict[str, Any] = {}
            for k, v in rec.items():
                if v == "":
                    row[k] = None
                elif k in _INT_COLS:
                    row[k] = int(float(v))
                elif k in _TEXT_COLS or k.endswith(("_file", "_sha256")) or (
                        k.startswith("chk_") and not k.endswith(("_value", "_limit", "_at_hz"))):
                    row[k] = v[1:] if v[:1] == "'" and csv_cell(v[1:]) == v else v  # undo csv_cell
                else:
                    try:
                        row[k] = float(v)
                    except ValueError:
                        row[k] = v
            rows.append(row)
    return rows
