"""Line metrics of a ``landing`` payload as flat manifest columns
``name@<f>GHz``, and the order analysts read them in."""

from __future__ import annotations

from typing import Any, Iterable

_FREQ_KEYS = ("freq_hz", "f_hz", "frequency_hz", "frequencies_hz", "at_hz", "hz")


def _freq_label(hz: float) -> str:
    return f"{hz / 1e9:g}GHz"


def _scalar_items(name: str, value: Any) -> Iterable[tuple[str, float | None]]:
    if isinstance(value, bool):
        yield name, float(value)
    elif isinstance(value, (int, float)) or value is None:
        yield name, value
    elif isinstance(value, list) and len(value) == 2 and all(isinstance(v, (int, float)) for v in value):
        # a complex value stored as [re, im]
        yield f"{name}_re", value[0]
        yield f"{name}_im", value[1]
    elif isinstance(value, dict):
        for k, v in value.items():
            yield from _scalar_items(f"{name}_{k}", v)


def flatten_metrics(metrics: Any) -> dict[str, float | None]:
    """Line metrics of a ``landing`` payload as flat ``name@<f>GHz`` columns.

    Accepts the shapes an engine may reasonably journal: a dict of lists with a
    frequency key (``freq_hz``), a list of per-frequency dicts, a dict keyed by
    frequency, or a flat dict of scalars. Units stay those of the key names.
    """
    out: dict[str, float | None] = {}
    if not metrics:
        return out
    if isinstance(metrics, list):
        for row in metrics:
            if isinstance(row, dict):
                fkey = next((k for k in _FREQ_KEYS if k in row), None)
                if fkey is None:
                    continue
                label = _freq_label(float(row[fkey]))
                for k, v in row.items():
                    if k != fkey:
                        out.update({f"{n}@{label}": x for n, x in _scalar_items(k, v)})
        return out
    if not isinstance(metrics, dict):
        return out
    fkey = next((k for k in _FREQ_KEYS if isinstance(metrics.get(k), list)), None)
    if fkey is not None:
        freqs = [float(f) for f in metrics[fkey]]
        for k, v in metrics.items():
            if k == fkey:
                continue
            if isinstance(v, list) and len(v) == len(freqs):
                for f, x in zip(freqs, v, strict=False):
                    out.update({f"{n}@{_freq_label(f)}": y for n, y in _scalar_items(k, x)})
            else:
                out.update(dict(_scalar_items(k, v)))
        return out
    try:
        keyed = {float(k): v for k, v in metrics.items()}
    except (TypeError, ValueError):
        keyed = None
    if keyed and all(isinstance(v, dict) for v in keyed.values()):
        for f, row in keyed.items():
            for k, v in row.items():
                out.update({f"{n}@{_freq_label(f)}": x for n, x in _scalar_items(k, v)})
        return out
    for k, v in metrics.items():
        out.update(dict(_scalar_items(k, v)))
    return out


_METRIC_ORDER = ("z0", "alpha", "loss", "eps", "q", "beta", "gamma", "r_", "l_", "g_", "c_")


def metric_sort_key(col: str) -> tuple[int, str, float]:
    """Z0, loss, eps_eff and Q first (what analysts read), then the rest; each
    metric's frequencies in ascending order."""
    base, _, freq = col.partition("@")
    rank = next((i for i, p in enumerate(_METRIC_ORDER) if base.lower().startswith(p)), len(_METRIC_ORDER))
    try:
        f = float(freq[:-3]) if freq else 0.0
    except ValueError:
        f = 0.0
    return (rank, base, f)
