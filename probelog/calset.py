"""A solved two-port calibration: apply it to raw sweeps, describe it for the
journal, save it as Touchstone error terms plus ``calset.json`` and read it back.

Error terms are scikit-rf's (12-term for SOLT, 8-term with switch terms for LRRM
and multiline TRL), each of shape (n_freq,) over the cal's frequencies (Hz).
Solving lives in :mod:`probelog.calibration`.
"""

from __future__ import annotations

import json
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import skrf
from skrf.calibration import EightTerm, TwelveTerm

from probelog.calkit import CalibrationError

__all__ = ["FORMAT", "CalSet", "ghz", "load_calset"]

FORMAT = "probelog-calset-1"


def ghz(f_hz: float) -> str:
    """A frequency in Hz as GHz text for messages ("67 GHz")."""
    return f"{f_hz / 1e9:.6g} GHz"


@dataclass
class CalSet:
    """A solved two-port calibration (error terms at the probe tips).

    ``cal`` is the scikit-rf calibration object (SOLT: 12-term model; LRRM and
    multiline TRL: 8-term model with switch terms).
    """

    cal_id: str
    method: str
    cal: Any
    kit_name: str = ""
    standards: dict[str, str] = field(default_factory=dict)
    extras: dict[str, Any] = field(default_factory=dict)

    @property
    def frequency(self) -> skrf.Frequency:
        return self.cal.frequency

    @property
    def model(self) -> str:
        return "12term" if isinstance(self.cal, TwelveTerm) else "8term"

    @property
    def error_terms(self) -> dict[str, np.ndarray]:
        """12-term error coefficients, each shape (n_freq,)."""
        return {k: np.asarray(v) for k, v in self.cal.coefs_12term.items()}

    @property
    def error_terms_8(self) -> dict[str, np.ndarray]:
        """8-term error coefficients plus switch terms, each shape (n_freq,)."""
        return {k: np.asarray(v) for k, v in self.cal.coefs_8term.items()}

    def _check_frequency(self, raw: skrf.Network) -> None:
        f = self.frequency
        if raw.frequency != f:
            raise CalibrationError(
                f"cal set '{self.cal_id}' covers {ghz(f.f[0])}..{ghz(f.f[-1])} in "
                f"{f.npoints} points, but the sweep '{raw.name}' covers "
                f"{ghz(raw.f[0])}..{ghz(raw.f[-1])} in {len(raw.f)} points; "
                f"sweep with the calibration's settings")

    def apply(self, raw: skrf.Network) -> skrf.Network:
        """Correct a raw sweep: 2-port with the full model, 1-port with the port-1
        terms (Gamma = (m - Ed) / (Er + Es (m - Ed)))."""
        self._check_frequency(raw)
        if raw.nports == 2:
            out = self.cal.apply_cal(raw)
        elif raw.nports == 1:
            t = self.error_terms
            d = raw.s[:, 0, 0] - t["forward directivity"]
            g = d / (t["forward reflection tracking"] + t["forward source match"] * d)
            out = raw.copy()
            out.s = g.reshape(-1, 1, 1)
        else:
            raise CalibrationError(f"cal set '{self.cal_id}' corrects 1- or 2-port sweeps; "
                                   f"'{raw.name}' has {raw.nports} ports")
        out.name = raw.name
        return out

    def summary(self) -> dict[str, Any]:
        """JSON-ready description for the journal."""
        f = self.frequency.f
        return {
            "cal_id": self.cal_id,
            "method": self.method,
            "model": self.model,
            "kit": self.kit_name,
            "standards": dict(self.standards),
            "start_hz": float(f[0]),
            "stop_hz": float(f[-1]),
            "points": int(len(f)),
            **self.extras,
        }

    def save(self, folder: str | Path) -> list[Path]:
        """Write the error terms as 1-port Touchstone files (one per term, RI) and
        ``calset.json``; returns the written paths. Re-read with :func:`load_calset`."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        coefs = self.cal.coefs
        files: dict[str, str] = {}
        written: list[Path] = []
        for key, value in coefs.items():
            stem = "term-" + key.replace(" ", "-")
            ntwk = skrf.Network(frequency=self.frequency, s=np.asarray(value).reshape(-1, 1, 1),
                                name=stem)
            ntwk.write_touchstone(stem, dir=str(folder), form="ri")
            files[key] = stem + ".s1p"
            written.append(folder / files[key])
        meta = {"format": FORMAT, **self.summary(), "terms": files}
        meta_path = folder / "calset.json"
        meta_path.write_text(json.dumps(meta, indent=2, sort_keys=True) + "\n", encoding="utf-8")
        written.append(meta_path)
        return written


def load_calset(folder: str | Path) -> CalSet:
    """Read a cal set written by :meth:`CalSet.save`."""
    folder = Path(folder)
    meta_path = folder / "calset.json"
    try:
        meta = json.loads(meta_path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise CalibrationError(f"{meta_path}: cannot read cal set ({exc.strerror})") from exc
    except json.JSONDecodeError as exc:
        raise CalibrationError(f"{meta_path}: not valid JSON (line {exc.lineno}): {exc.msg}") from exc
    if meta.get("format") != FORMAT:
        raise CalibrationError(f"{meta_path}: key 'format' is {meta.get('format')!r}, "
                               f"expected {FORMAT!r}")
    coefs = {}
    frequency = None
    for key, name in meta["terms"].items():
        try:
            ntwk = skrf.Network(str(folder / name))
        except (OSError, ValueError) as exc:
            raise CalibrationError(f"{folder / name}: cannot read error term '{key}': {exc}") from exc
        coefs[key] = ntwk.s[:, 0, 0]
        frequency = ntwk.frequency
    cls = TwelveTerm if meta["model"] == "12term" else EightTerm
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # skrf warns that no switch terms were passed
        cal = cls.from_coefs(frequency, coefs)
    known = {"format", "cal_id", "method", "model", "kit", "standards", "start_hz",
             "stop_hz", "points", "terms"}
    return CalSet(cal_id=meta["cal_id"], method=meta["method"], cal=cal, kit_name=meta["kit"],
                  standards=meta["standards"],
                  extras={k: v for k, v in meta.items() if k not in known})
