"""Where a session's data files go and how they read back: data-file naming,
the self-describing Touchstone header, cal-set files, and hash-checked loading.

Every file goes through the journal (temp, fsync, rename; hashed) before the
event that names it. Every file read back for use (a cal set, a drift
reference, switch terms, a raw standard, a repeatability reference) is checked
against the SHA-256 its event recorded: a file altered on disk stops the
session with one line naming it, it never corrects new data silently.
"""

from __future__ import annotations

import hashlib
import os
import tempfile
from pathlib import Path
from typing import TYPE_CHECKING, Any

import skrf

from probelog import journal_format
from probelog.bench import Die
from probelog.events import FileRef
from probelog.journal import Journal
from probelog.touchstone_out import network_to_touchstone

if TYPE_CHECKING:  # types only: the cal set and its agreement are imported where they are used
    from probelog.cal_agreement import Agreement
    from probelog.calset import CalSet


class StoreError(Exception):
    """A data file the session needs is missing or differs from its recorded hash."""


def die_dir(die: Die) -> str:
    return f"d{int(die[0])}_{int(die[1])}"


def ref_of(r: journal_format.FileRef) -> FileRef:
    """journal.FileRef -> events.FileRef."""
    return FileRef(path=r.path, sha256=r.sha256)


class Store:
    """The data files of one session folder (``journal.root``)."""

    def __init__(self, journal: Journal) -> None:
        self.journal = journal
        self.root = Path(journal.root)
        self._nets: dict[str, skrf.Network] = {}  # path -> Network already read or written

    # ------------------------------------------------------------ names

    def unused(self, stem: str, suffixes: list[str]) -> str:
        """``stem``, or ``stem-r2``, ``-r3``... when a file of that name exists: one a
        crash left behind (written, its event lost, adopted on resume). Data files
        are never overwritten, and the redone step names its own files."""
        k, name = 1, stem
        while any(os.path.lexists(self.root / f"{name}{sfx}") for sfx in suffixes):
            k += 1
            name = f"{stem}-r{k}"
        return name

    # ------------------------------------------------------------ writing

    def write_pair(self, base: str, raw: skrf.Network, cor: skrf.Network | None,
                   header: dict[str, Any]) -> dict[str, FileRef]:
        """Raw (and corrected) sweep files of one landing, stored together;
        ``header`` is the comment header (``what`` is filled in per file)."""
        nets = {"raw": raw} if cor is None else {"raw": raw, "corrected": cor}
        tags = {"raw": "raw", "corrected": "cor"}
        base = self.unused(base, [f"-{tags[w]}.s{n.nports}p" for w, n in nets.items()])
        items = [(f"{base}-{tags[w]}.s{n.nports}p", network_to_touchstone(n, {**header, "what": w}))
                 for w, n in nets.items()]
        refs = self.journal.write_files(items)
        out = {w: ref_of(r) for w, r in zip(nets, refs, strict=True)}
        for w, n in nets.items():
            self._nets[out[w].path] = n
        return out

    def write_net(self, stem: str, ntwk: skrf.Network, header: dict[str, Any]) -> FileRef:
        data = network_to_touchstone(ntwk, header)
        ref = ref_of(self.journal.write_file(f"{self.unused(stem, [f'.s{ntwk.nports}p'])}.s{ntwk.nports}p", data))
        self._nets[ref.path] = ntwk
        return ref

    def write_bytes(self, stem: str, suffix: str, data: bytes) -> FileRef:
        return ref_of(self.journal.write_file(f"{self.unused(stem, [suffix])}{suffix}", data))

    def save_calset(self, calset: CalSet, cal_dir: str) -> list[FileRef]:
        """Every file of the saved cal set, calset.json first. CalSet.save writes
        plain files: save to a scratch folder, then store each through the journal."""
        folder = self.unused(f"{cal_dir}/calset", [""])
        with tempfile.TemporaryDirectory() as tmp:
            paths = sorted(calset.save(tmp), key=lambda p: p.name != "calset.json")
            return [ref_of(self.journal.write_file(f"{folder}/{p.name}", p.read_bytes())) for p in paths]

    # ------------------------------------------------------------ reading back

    def check(self, ref: FileRef, what: str) -> Path:
        """The file's path once its SHA-256 matches ``ref``; StoreError naming it otherwise."""
        path = self.root / ref.path
        try:
            h = hashlib.sha256()
            with open(path, "rb") as fh:
                for block in iter(lambda: fh.read(1 << 20), b""):
                    h.update(block)
        except FileNotFoundError:
            raise StoreError(f"{path}: {what} is missing; refusing to use the session's data without it") from None
        except OSError as exc:
            raise StoreError(f"{path}: {what} cannot be read: {exc.strerror or exc}") from None
        if h.hexdigest() != ref.sha256:
            raise StoreError(f"{path}: {what} differs from the SHA-256 its event recorded "
                             f"(altered on disk); refusing to use it")
        return path

    def network(self, ref: FileRef, what: str) -> skrf.Network:
        """The Network in ``ref``, read once (hash-checked) and cached."""
        got = self._nets.get(ref.path)
        if got is None:
            got = skrf.Network(str(self.check(ref, what)))
            self._nets[ref.path] = got
        return got

    def calset(self, files: list[FileRef] | tuple[FileRef, ...], what: str) -> CalSet:
        """Load a saved cal set after checking every one of its files."""
        from probelog.calset import load_calset

        if not files:
            raise StoreError(f"{self.root}: {what} has no saved files on record")
        for ref in files:
            self.check(ref, what)
        first = self.root / files[0].path
        return load_calset(first.parent if first.name == "calset.json" else first)


def agreement_csv(result: Agreement) -> bytes:
    with tempfile.TemporaryDirectory() as tmp:
        data: bytes = result.write_csv(Path(tmp) / "agreement.csv").read_bytes()
        return data
