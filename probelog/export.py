"""The analyst bundle: ``export_bundle(session_dir, out_dir)``.

A bundle is a folder an analyst can take away and trust without probelog:

- ``manifest.csv``: one row per kept sweep (see probelog.manifest)
- ``data/``: the session's Touchstone tree and calibration data, same layout
- ``journal.jsonl``: the journal, byte for byte
- ``README.md``: what is where, what every column means, the journal's last hash
- ``report.html``: self-contained report with embedded plots (probelog.report)

Every file is hashed while it is copied, and each row's journaled SHA-256 is
compared with the copy, so the manifest says whether the bundle is what the
bench wrote. Each Touchstone file is parsed at most once.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
from contextlib import nullcontext
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable

import numpy as np

from probelog import events as ev
from probelog.pad_free_bundle import add_pad_free_columns
from probelog.manifest import (
    JOURNAL_NAME,
    SessionFormatError,
    SessionIndex,
    add_metric_columns,
    chain_status,
    index_session,
    read_journal,
    readme_text,
    write_manifest_csv,
)

if TYPE_CHECKING:  # annotations only: skrf and rich stay lazy imports
    import skrf
    from rich.progress import Progress

    from probelog.manifest import ChainStatus, Journal

LINE_KINDS = {"line", "thru"}


class BundleError(ValueError):
    """The bundle cannot be written where asked (one sentence, names the path)."""


def default_out_dir(session_dir: Path) -> Path:
    """Where a bundle goes when no --out is given: ``<session>-bundle`` beside it."""
    session_dir = Path(session_dir).resolve()
    return session_dir.with_name(session_dir.name + "-bundle")


def _copy_tree(src: Path, dst: Path, advance: Callable[[], None]) -> dict[str, str]:
    """Copy every file under ``src`` into folder ``dst`` (keeping ``src``'s own name), hashing
    the bytes on the way. Returns {posix path relative to src's parent: sha256}."""
    hashes: dict[str, str] = {}
    base = src.parent
    for root, _dirs, files in os.walk(src):
        for name in sorted(files):
            s = Path(root) / name
            rel = s.relative_to(base).as_posix()
            blob = s.read_bytes()
            d = dst / rel
            d.parent.mkdir(parents=True, exist_ok=True)
            d.write_bytes(blob)
            hashes[rel] = hashlib.sha256(blob).hexdigest()
            advance()
    return hashes


def _referenced_files(index: SessionIndex) -> list[tuple[str, str, str]]:
    """(path, journaled sha256, where) for every file reference in the events."""
    refs = []
    for e in index.landings + index.cal_events + index.drifts:
        for key, ref in ev.file_refs(e.data):
            refs.append((ref.path, ref.sha256, f"seq {e.seq} ({e.type}) {key}"))
    return list(dict.fromkeys(refs))


def check_files(index: SessionIndex, hashes: dict[str, str]) -> list[str]:
    """Compare every journaled file reference with the copied file; sets each
    manifest row's ``files_ok`` and returns one sentence per problem."""
    problems = []
    for path, sha, where in _referenced_files(index):
        got = hashes.get(path)
        if got is None:
            problems.append(f"{path}: missing (named by {where})")
        elif got != sha:
            problems.append(f"{path}: SHA-256 {got[:12]}... differs from the journaled {sha[:12]}... ({where})")
    for row in index.rows:
        ok = True
        for col in ("raw", "corrected"):
            path, sha = row[f"{col}_file"], row[f"{col}_sha256"]
            if path and hashes.get(path) != sha:
                ok = False
        row["files_ok"] = int(ok)
    return problems


def _read_network(path: Path) -> skrf.Network | None:
    import skrf

    try:
        return skrf.Network(str(path))
    except Exception:  # an unreadable file is reported by the caller, not fatal
        return None


def load_networks(index: SessionIndex, root: Path, advance: Callable[[], None]) -> tuple[dict[int, Any], list[str]]:
    """Parse each kept sweep once: corrected file when there is one, else raw.
    Returns ({manifest seq: skrf.Network}, problems)."""
    nets, problems = {}, []
    for row in index.rows:
        rel = row["corrected_file"] or row["raw_file"]
        ntwk = _read_network(root / rel) if rel and (root / rel).is_file() else None
        if ntwk is None:
            problems.append(f"{rel or '(no file)'}: could not be read as Touchstone (seq {row['seq']})")
        else:
            ntwk.name = f"d{row['die_col']}_{row['die_row']}/{row['site']}/L{row['landing']}"
            nets[row["seq"]] = ntwk
        advance()
    return nets, problems


def compute_missing_metrics(index: SessionIndex, networks: dict[int, Any]) -> int:
    """Line metrics for kept line sweeps journaled without them, from
    ``probelog.lines`` (single-line ABCD extraction at the plan's length, at the
    same few frequencies the engine journals). Rows that already carry metrics
    are left alone. Returns the number of rows filled."""
    from probelog.lines import default_frequencies, line_metrics, metrics_at
    from probelog.manifest import flatten_metrics

    names: dict[str, None] = {}
    filled = 0
    journaled = list(index.metric_columns)
    for row in index.rows:
        if row.get("kind") not in LINE_KINDS or not row.get("length_um"):
            continue
        if any(row.get(c) is not None for c in journaled):
            continue
        ntwk = networks.get(row["seq"])
        if ntwk is None or ntwk.nports != 2:
            continue
        try:
            m = line_metrics(ntwk, row["length_um"] * 1e-6)
            flat = flatten_metrics(metrics_at(m, default_frequencies(ntwk.f, prefer_round=True)))
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            continue  # a sweep that is no line (e.g. kept despite a lifted tip) stays empty
        row.update(flat)
        names.update(dict.fromkeys(flat))
        filled += 1
    add_metric_columns(index, names)
    return filled


def _load_cal_networks(index: SessionIndex, root: Path) -> dict[str, Any]:
    out = {}
    for e in index.cal_events:
        if not isinstance(e.data, ev.CalVerification):
            continue
        for ref in (e.data.corrected, e.data.raw):
            if ref is not None and (root / ref.path).is_file():
                ntwk = _read_network(root / ref.path)
                if ntwk is not None:
                    out[ref.path] = ntwk
    return out


class DamagedSessionError(BundleError):
    """The session fails its integrity checks; ``problems`` says how. No bundle
    is written unless the caller allows a damaged one."""

    def __init__(self, message: str, problems: list[str]) -> None:
        super().__init__(message)
        self.problems = problems


def _damage(chain: ChainStatus, integrity: list[str]) -> list[str]:
    """One sentence per reason the session is not what the bench wrote."""
    return ([f"journal chain: {chain.problem or 'broken'}"] if not chain.ok else []) + list(integrity)


def export_bundle(session_dir: Path | str, out_dir: Path | str | None = None, progress: bool = True,
                  metric: str | None = None, allow_damaged: bool = False,
                  damage: list[str] | None = None) -> Path:
    """Write the analyst bundle of a session folder and return its path.

    ``metric`` is the manifest column drawn on the wafer map (default: a line Z0
    if there are line metrics, else retries). The bundle is built in a hidden
    temporary folder beside ``out_dir`` and renamed into place at the end, so a
    failure leaves no half bundle in the way of a rerun.

    A damaged session (broken chain, torn last line, a data file missing or not
    matching its journaled SHA-256, an unreadable sweep) raises
    DamagedSessionError unless ``allow_damaged``; then the bundle is written
    (its README and report say BROKEN) and the reasons are appended to
    ``damage`` when a list is given. Raises SessionFormatError for a folder that
    is not a session, BundleError for an unusable ``out_dir`` or an unknown metric.
    """
    from probelog.journal import writer_pid

    session_dir = Path(session_dir)
    journal = read_journal(session_dir)
    pid = writer_pid(session_dir)
    if pid is not None:  # its newest data files have no event yet
        raise BundleError(f"{session_dir}: the session is in use (open for writing by pid {pid}); "
                          "export it once that run has ended")
    out = Path(out_dir) if out_dir is not None else default_out_dir(session_dir)
    if out.resolve() == session_dir.resolve() or session_dir.resolve() in out.resolve().parents:
        raise BundleError(f"{out}: the bundle must not go inside the session folder")
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise BundleError(f"{out}: exists and is not an empty folder; choose another --out")
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    except OSError as exc:
        raise BundleError(f"{out.parent}: cannot write the bundle there ({exc.strerror or exc})") from None
    try:
        problems = _write_bundle(session_dir, journal, tmp, progress, metric)
        if problems and not allow_damaged:
            raise DamagedSessionError(
                f"{session_dir}: the session is damaged ({problems[0]}"
                + (f"; and {len(problems) - 1} more problem(s)" if len(problems) > 1 else "")
                + "); no bundle written; run `probelog verify` on it, or pass --allow-damaged "
                  "to export it anyway", problems)
        if out.exists():
            out.rmdir()  # checked empty above; os.replace onto a folder needs it gone on Windows
        os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)  # our own unfinished copy, never the session
        raise
    if damage is not None:
        damage.extend(problems)
    return out


def _write_bundle(session_dir: Path, journal: Journal, out: Path, progress: bool, metric: str | None) -> list[str]:
    """Fill the (new, empty) folder ``out``; returns the session's damage (see _damage)."""
    from probelog.report import ReportInputs, build_report, numeric_columns

    index = index_session(journal)
    chain = chain_status(session_dir, journal)
    data_dir = session_dir / "data"
    n_files = sum(len(f) for _r, _d, f in os.walk(data_dir)) if data_dir.is_dir() else 0

    bar = _progress(progress)
    with bar if bar is not None else nullcontext():
        def task(label: str, total: int) -> Callable[[], None]:
            if bar is None:
                return lambda: None
            tid = bar.add_task(label, total=max(total, 1))
            return lambda: bar.advance(tid)

        # parse (from the session) and validate before copying anything
        networks, unread = load_networks(index, session_dir, task("reading sweeps", len(index.rows)))
        compute_missing_metrics(index, networks)
        add_pad_free_columns(index, networks)  # two lengths of a line on a die: figures free of the pads
        if metric is not None and metric not in numeric_columns(index):
            names = numeric_columns(index)
            shown = ", ".join(names[:20]) + (f" and {len(names) - 20} more" if len(names) > 20 else "")
            raise BundleError(f"--metric {metric}: not a numeric manifest column; choose one of: {shown}")
        (out / JOURNAL_NAME).write_bytes(journal.path.read_bytes())
        hashes = _copy_tree(data_dir, out, task("copying data", n_files)) if data_dir.is_dir() else {}
        integrity = check_files(index, hashes) + unread
        step = task("writing report", 3)
        write_manifest_csv(out / "manifest.csv", index)
        (out / "README.md").write_text(readme_text(index, chain), encoding="utf-8")
        step()
        page = build_report(ReportInputs(index, chain, networks, _load_cal_networks(index, out),
                                         integrity, metric, journal.torn_tail))
        step()
        (out / "report.html").write_text(page, encoding="utf-8")
        step()
    return _damage(chain, integrity)


def _progress(enabled: bool) -> Progress | None:
    if not enabled:
        return None
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(TextColumn("{task.description:<16}"), BarColumn(), MofNCompleteColumn(),
                    TimeElapsedColumn(), console=Console(stderr=True), transient=False)


__all__ = ["export_bundle", "default_out_dir", "BundleError", "DamagedSessionError", "SessionFormatError", "check_files",
           "load_networks", "compute_missing_metrics"]
