"""A VNA without a remote link: take the Touchstone file the operator saves into a folder.

:class:`FolderVna` implements :class:`probelog.bench.Vna`. ``sweep()`` waits
(with a timeout and a cancel event) for a Touchstone file (``.s1p`` / ``.s2p``)
that was not in the folder when the wait began, waits until its size stops
changing (the instrument may still be writing), validates it and returns it
as the sweep:

- readable by scikit-rf, with the port count asked for;
- no NaN or infinite values, at least two frequency points, frequencies
  strictly increasing;
- when ``match_settings`` is true and ``configure`` was called: the point count
  and the start / stop frequencies (Hz, 1 ppm tolerance) of the plan.

A file that fails raises :class:`~probelog.drivers.errors.TouchstoneRejected` naming the
file and what is wrong; it is left where it is. Accepted files are moved to the
``archive`` subfolder when one is named. No file in time raises
:class:`~probelog.drivers.errors.InstrumentTimeout`; a set cancel event raises
:class:`~probelog.drivers.errors.WaitCancelled`.
"""

from __future__ import annotations

import threading
import time
import warnings
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import skrf
from skrf.frequency import InvalidFrequencyWarning

from probelog.drivers.errors import InstrumentTimeout, TouchstoneRejected, WaitCancelled
from probelog.drivers.vna import check_power, check_settings
from probelog.bench import SweepSettings

SUFFIXES = {".s1p": 1, ".s2p": 2}


def validate_touchstone(path: Path, ports: int, settings: SweepSettings | None = None) -> skrf.Network:
    """Read and check one Touchstone file; raises TouchstoneRejected naming it."""
    try:
        with warnings.catch_warnings():
            # We report non-increasing frequencies ourselves, naming the file.
            warnings.simplefilter("ignore", InvalidFrequencyWarning)
            net = skrf.Network(str(path))
    except Exception as exc:  # skrf raises many types for a bad file
        raise TouchstoneRejected(
            f"{path}: not a readable Touchstone file ({type(exc).__name__}: {exc})", resource=str(path)
        ) from None
    if ports == 2 and getattr(net, "noisy", False):
        # Touchstone 1.x: in a 2-port file, a frequency not above the previous one
        # starts the noise-parameter block, so skrf stops the S data there.
        raise TouchstoneRejected(
            f"{path}: frequencies do not increase after {net.f[-1]:.6g} Hz (a Touchstone 1.x "
            "reader takes the rest as noise parameters); save the sweep again",
            resource=str(path),
        )
    if net.nports != ports:
        raise TouchstoneRejected(f"{path}: has {net.nports} port(s), the sweep needs {ports}", resource=str(path))
    f = net.f
    if f.size < 2:
        raise TouchstoneRejected(f"{path}: has {f.size} frequency point(s), need at least 2", resource=str(path))
    if not np.all(np.isfinite(net.s)):
        bad = np.flatnonzero(~np.isfinite(net.s).all(axis=(1, 2)))
        raise TouchstoneRejected(
            f"{path}: NaN or infinite S-parameters at {bad.size} point(s), first at {f[bad[0]]:.6g} Hz",
            resource=str(path),
        )
    steps = np.diff(f)
    if np.any(steps <= 0):
        i = int(np.flatnonzero(steps <= 0)[0])
        raise TouchstoneRejected(
            f"{path}: frequencies do not increase ({f[i]:.6g} Hz then {f[i + 1]:.6g} Hz at points {i + 1}, {i + 2})",
            resource=str(path),
        )
    if settings is not None:
        want = (settings.points, settings.start_hz, settings.stop_hz)
        got = (f.size, f[0], f[-1])
        if got[0] != want[0] or not np.allclose(got[1:], want[1:], rtol=1e-6, atol=0):
            raise TouchstoneRejected(
                f"{path}: sweep is {got[0]} points, {got[1]:.6g}-{got[2]:.6g} Hz; the plan asks for "
                f"{want[0]} points, {want[1]:.6g}-{want[2]:.6g} Hz (set the instrument accordingly)",
                resource=str(path),
            )
    return net


class FolderVna:
    """Sweeps are Touchstone files saved by the operator into ``folder``.

    ``timeout_s`` bounds each wait; ``poll_s`` is the polling period; ``cancel``
    is an Event another thread (the UI) may set; ``archive`` is the subfolder
    name accepted files are moved to (None keeps them in place).
    """

    def __init__(
        self,
        folder: str | Path,
        *,
        timeout_s: float = 600.0,
        poll_s: float = 0.2,
        archive: str | None = "archive",
        cancel: threading.Event | None = None,
        match_settings: bool = True,
    ) -> None:
        self.folder = Path(folder)
        if not self.folder.is_dir():
            raise FileNotFoundError(f"{self.folder}: watched folder does not exist")
        self.timeout_s = timeout_s
        self.poll_s = poll_s
        self.archive = archive
        self.cancel = cancel or threading.Event()
        self.match_settings = match_settings
        self.settings: SweepSettings | None = None
        self._power_limit_dbm = float("-inf")
        self._seen = self._listing()

    def identify(self) -> str:
        return f"watched folder {self.folder}"

    def configure(self, settings: SweepSettings, power_limit_dbm: float) -> None:
        """Record the plan's sweep (the operator sets the instrument); refuses power above the limit."""
        check_power(settings, power_limit_dbm)
        check_settings(settings)
        self.settings = settings
        self._power_limit_dbm = power_limit_dbm

    def sweep(self, ports: int = 2) -> skrf.Network:
        """Wait for a new file, validate it, archive it, return it."""
        if ports not in SUFFIXES.values():
            raise ValueError(f"ports must be 1 or 2, got {ports}")
        path = self._wait_for_new_file()
        self._seen.add(path.name)
        net = validate_touchstone(path, ports, self.settings if self.match_settings else None)
        if self.archive:
            self._seen.discard(path.name)  # the name is free again once archived
            dest_dir = self.folder / self.archive
            dest_dir.mkdir(exist_ok=True)
            dest = dest_dir / path.name
            n = 1
            while dest.exists():  # never overwrite an archived sweep
                dest = dest_dir / f"{path.stem}-{n}{path.suffix}"
                n += 1
            path.replace(dest)
        net.name = path.stem
        return net

    def precheck_sweep(self, settings: SweepSettings, ports: int = 2) -> None:
        """No contact pre-check here: the operator would have to save a second file
        per landing, slower than the full sweep it is meant to spare. The engine
        goes straight to the full sweep; the power check still applies."""
        if self.settings is not None:
            check_power(settings, self._power_limit_dbm)
        return None

    def switch_terms(self) -> None:
        """None: a saved .s2p file carries corrected or raw S only, not the
        instrument's switch terms, so the calibration solves without them."""
        return None

    def reopen(self) -> None:
        """Check the watched folder is there again (a network share that dropped
        is the folder's "lost link"); files seen or archived so far stay seen, so
        no sweep is taken twice. Raises FileNotFoundError while it is missing."""
        if not self.folder.is_dir():
            raise FileNotFoundError(f"{self.folder}: watched folder does not exist")

    def close(self) -> None:
        self.cancel.set()

    def _listing(self) -> set[str]:
        return {p.name for p in self.folder.iterdir() if p.is_file() and p.suffix.lower() in SUFFIXES}

    def _wait_for_new_file(self) -> Path:
        deadline = time.monotonic() + self.timeout_s
        sizes: dict[str, int] = {}
        while True:
            if self.cancel.is_set():
                raise WaitCancelled(f"{self.folder}: waiting for a Touchstone file was cancelled", resource=str(self.folder))
            for name in sorted(self._listing() - self._seen):
                p = self.folder / name
                try:
                    size = p.stat().st_size
                except FileNotFoundError:
                    continue
                # Ready when it has content and did not grow since the last poll.
                if size > 0 and sizes.get(name) == size:
                    return p
                sizes[name] = size
            if time.monotonic() >= deadline:
                raise InstrumentTimeout(
                    f"{self.folder}: no new .s1p/.s2p file within {self.timeout_s:g} s", resource=str(self.folder)
                )
            self.cancel.wait(self.poll_s)


if TYPE_CHECKING:  # FolderVna is a probelog.bench.Vna, every member (checked by mypy, costs nothing at run time)
    from probelog.bench import Vna

    def _folder_vna_is_a_vna(vna: FolderVna) -> Vna:
        return vna
