"""Read a session journal and turn it into the analyst manifest.

The journal format is the contract in docs/journal-events.md; lines are decoded
by probelog.events and folded into a probelog.state.SessionState (no dependency
on the engine), so a bundle can be built from a session written by any version
that keeps the contract.

One manifest row per kept sweep: the landing a site's final decision kept, an
``accept`` or an ``accept-despite-fail`` (column ``decision``, with the operator's
reason). Landings on the same die/site that were not kept are counted as
retries of the kept one.

One module per job; this package re-exports the names its callers use:

- :mod:`~probelog.manifest.reader`: the journal read and decoded, the hash chain re-walked;
- :mod:`~probelog.manifest.metrics`: journaled line metrics as ``name@<f>GHz`` columns;
- :mod:`~probelog.manifest.index`: the plan's sites, the columns and one row per kept sweep;
- :mod:`~probelog.manifest.csv_file`: ``manifest.csv`` written and read back;
- :mod:`~probelog.manifest.readme`: the bundle's README.
"""

from __future__ import annotations

from probelog.manifest.csv_file import csv_cell, read_manifest_csv, write_manifest_csv
from probelog.manifest.index import (
    BASE_COLUMNS,
    COLUMN_HELP,
    SessionIndex,
    add_metric_columns,
    check_column,
    index_session,
    plan_sites,
)
from probelog.manifest.metrics import flatten_metrics, metric_sort_key
from probelog.manifest.readme import readme_text
from probelog.manifest.reader import (
    JOURNAL_NAME,
    ZERO_HASH,
    ChainStatus,
    Journal,
    SessionFormatError,
    chain_status,
    read_journal,
    walk_chain,
)

__all__ = [
    "BASE_COLUMNS",
    "COLUMN_HELP",
    "JOURNAL_NAME",
    "ZERO_HASH",
    "ChainStatus",
    "Journal",
    "SessionFormatError",
    "SessionIndex",
    "add_metric_columns",
    "chain_status",
    "check_column",
    "csv_cell",
    "flatten_metrics",
    "index_session",
    "metric_sort_key",
    "plan_sites",
    "read_journal",
    "read_manifest_csv",
    "readme_text",
    "walk_chain",
    "write_manifest_csv",
]
