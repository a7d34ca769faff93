"""Quick checks on one sweep (or a sweep and an earlier one of the same site).

Every check is a pure function of arrays returning a
:class:`probelog.verdicts.CheckResult`: the measured figure, its limit, the
frequency (Hz) where it is worst and one sentence a person understands.
S arrays are shaped (n_freq, n_ports, n_ports) like ``skrf.Network.s``;
frequencies in Hz; dB = 20 log10|S|; phases in degrees; time convention
e^{+j omega t}.

Port conventions: every site is measured as a 2-port. Reflect-type sites
(open, short, load, open-stub, short-stub) are pairs: port 1 and port 2 each
land on their own copy of the one-port and S21 is isolation, so one-port
figures are taken on S11 and S22 separately and the worse one is reported. A
1-port sweep works as well.

One module per job; this package re-exports the public names its many callers use:

- :mod:`~probelog.checks.thresholds`: site kinds, check names, :class:`Limits`;
- :mod:`~probelog.checks.common`: dB, messages and result builders shared by the checks;
- :mod:`~probelog.checks.signature`: contact from the kind's signature on the corrected sweep;
- :mod:`~probelog.checks.properties`: passivity, reciprocity, symmetry, rotation;
- :mod:`~probelog.checks.windows`: a line's Z0, loss and eps_eff inside the plan's windows;
- :mod:`~probelog.checks.golden`: a landing against the site's golden Touchstone file;
- :mod:`~probelog.checks.compare`: repeatability and drift against an earlier sweep;
- :mod:`~probelog.checks.suite`: every check of a kind, in report order.
"""

from __future__ import annotations

from probelog.checks.compare import PHASE_REF_HZ, drift, repeatability
from probelog.checks.properties import largest_singular_value, passivity, reciprocity, rotation, symmetry
from probelog.checks.signature import contact
from probelog.checks.suite import is_symmetric, run_checks
from probelog.checks.thresholds import CHECK_NAMES, KINDS, REFLECT_KINDS, ROTATING_KINDS, Limits
from probelog.checks.windows import line_window, line_window_figures, window_quantities

__all__ = [
    "CHECK_NAMES",
    "KINDS",
    "PHASE_REF_HZ",
    "REFLECT_KINDS",
    "ROTATING_KINDS",
    "Limits",
    "contact",
    "drift",
    "is_symmetric",
    "largest_singular_value",
    "line_window",
    "line_window_figures",
    "passivity",
    "reciprocity",
    "repeatability",
    "rotation",
    "run_checks",
    "symmetry",
    "window_quantities",
]
