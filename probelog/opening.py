"""``open_session(path)``: a session folder or an exported bundle, for analysts.

>>> s = probelog.open_session("sessions/QF2611-W07-0001-bundle")
>>> s.manifest[0]["site"], len(s.network_sets["ln-cpw-m9-r2-l500"])
>>> df = s.to_pandas()

Works on both because a bundle keeps the session's layout (journal.jsonl, data/).
In a bundle the manifest is read from manifest.csv, exactly what the analyst
sees in a spreadsheet; in a session folder it is built from the journal.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from probelog import events as ev
from probelog import state as st
from probelog.manifest import ChainStatus, SessionFormatError, chain_status, index_session, read_journal, read_manifest_csv

if TYPE_CHECKING:  # both are imported lazily at run time (import probelog stays light)
    import pandas as pd
    import skrf


@dataclass
class SessionData:
    """One session (or bundle) opened for analysis.

    ``manifest``: list of dict rows, one per kept sweep (columns in README.md of a
    bundle); ``events``: every journal event, typed (probelog.events.Event);
    ``state``: the session folded from them (probelog.state.SessionState: die
    status, decisions, metrics at a chosen frequency...); ``chain``: hash-chain
    status. Touchstone files are parsed lazily, once, on first use.
    """

    path: Path
    manifest: list[dict[str, Any]]  # Any: CSV cell values
    events: list[ev.Event]
    chain: ChainStatus
    state: st.SessionState = field(default_factory=st.SessionState)
    _networks: dict[int, skrf.Network] | None = field(default=None, repr=False)

    def to_pandas(self) -> pd.DataFrame:
        """The manifest as a pandas DataFrame (pandas comes with scikit-rf)."""
        import pandas as pd

        return pd.DataFrame.from_records(self.manifest)

    def _all_networks(self) -> dict[int, skrf.Network]:
        if self._networks is None:
            import skrf

            nets: dict[int, skrf.Network] = {}
            for row in self.manifest:
                rel = row.get("corrected_file") or row.get("raw_file")
                if not rel:
                    continue
                ntwk = skrf.Network(str(self.path / rel))
                ntwk.name = f"d{row['die_col']}_{row['die_row']}/{row['site']}/L{row['landing']}"
                nets[row["seq"]] = ntwk
            self._networks = nets
        return self._networks

    @property
    def sites(self) -> list[str]:
        """Site names with at least one kept sweep, in first-measured order."""
        return list(dict.fromkeys(r["site"] for r in self.manifest))

    def networks(self, site: str, die: tuple[int, int] | None = None) -> list[skrf.Network]:
        """Kept sweeps of ``site`` (corrected, else raw) as skrf.Networks, in
        measurement order; only die (col, row) when ``die`` is given."""
        nets = self._all_networks()
        return [nets[r["seq"]] for r in self.manifest
                if r["site"] == site and r["seq"] in nets
                and (die is None or (r["die_col"], r["die_row"]) == tuple(die))]

    @property
    def network_sets(self) -> dict[str, Any]:
        """{site: skrf NetworkSet of its kept sweeps across dies}."""
        from skrf.networkSet import NetworkSet

        return {site: NetworkSet(self.networks(site), name=site) for site in self.sites}


def open_session(path: str | Path) -> SessionData:
    """Open a session folder or a bundle written by ``probelog export``.

    Raises SessionFormatError (a ValueError) naming the file and line when the
    folder is not a probelog session.
    """
    path = Path(path)
    journal = read_journal(path)
    csv_path = path / "manifest.csv"
    if csv_path.is_file():
        manifest = read_manifest_csv(csv_path)
    else:
        manifest = index_session(journal).rows
    return SessionData(path=path, manifest=manifest, events=journal.events,
                       chain=chain_status(path, journal), state=journal.state)


__all__ = ["open_session", "SessionData", "SessionFormatError"]
