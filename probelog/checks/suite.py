"""Every check that applies to a site's kind on one sweep, in report order
(:data:`probelog.checks.thresholds.CHECK_NAMES`)."""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Any, Mapping, Sequence

import numpy as np

from probelog.checks.common import worst_of
from probelog.checks.compare import drift, repeatability
from probelog.checks.golden import golden_match
from probelog.checks.properties import passivity, reciprocity, rotation, symmetry
from probelog.checks.signature import contact
from probelog.checks.thresholds import KINDS, ROTATING_KINDS, Limits
from probelog.checks.windows import line_window, line_window_figures, window_quantities
from probelog.verdicts import CheckResult, Verdict

if TYPE_CHECKING:
    import skrf


def is_symmetric(kind: str, expectation: Mapping[str, Any] | None) -> bool:
    """Whether S11 and S22 should agree: the plan's ``symmetric`` if given, else
    True for every kind but ``device`` (reflect pairs are two copies of one standard)."""
    if expectation and "symmetric" in expectation:
        return bool(expectation["symmetric"])
    return kind != "device"


def run_checks(ntwk: skrf.Network, kind: str, limits: Limits, expectation: Mapping[str, Any] | None = None,
               previous: skrf.Network | None = None, reference: skrf.Network | None = None,
               *, unc: np.ndarray | None = None, previous_label: str = "the previous landing",
               history: Sequence[tuple[str, np.ndarray, np.ndarray]] | None = None,
               raw: skrf.Network | None = None, raw_open: skrf.Network | None = None,
               raw_short: skrf.Network | None = None,
               previous_other_die: bool = False, population_unc: np.ndarray | None = None) -> list[CheckResult]:
    """Every check that applies to ``kind`` on one sweep (an ``skrf.Network``).

    ``previous`` and ``reference`` are Networks of the same site (the last
    ACCEPTED landing, named by ``previous_label``; the reference right after
    calibration) or None. ``unc`` (n_freq,) is the cal's uncertainty per frequency
    (linear |S|, :func:`probelog.limits.cal_uncertainty`); ``history`` the
    (label, f_hz, s) of the accepted landings of this site on earlier dies
    (:mod:`probelog.population`); ``previous_other_die`` caps repeatability at
    WARN when the reference was landed on another die; ``population_unc`` widens
    the population's spread (the cal's uncertainty, when the history spans
    cals); ``raw``, ``raw_open``, ``raw_short`` the raw sweep and the active cal's raw open and short (:mod:`probelog.contact`):
    when given, contact is the worse of the physics verdict on raw data and the
    kind signature on the corrected sweep. ``expectation["golden"]`` (the fields
    of :class:`probelog.plan_types.Golden`) adds the golden-file comparison
    (:mod:`probelog.checks.golden`). Order follows :data:`CHECK_NAMES`.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown site kind '{kind}' (known: {', '.join(KINDS)})")
    expectation = expectation or {}
    f, s = np.asarray(ntwk.f, dtype=float), ntwk.s
    z0 = float(np.real(np.asarray(ntwk.z0).flat[0]))
    if unc is not None and len(unc) != len(f):
        unc = None  # uncertainty of another grid says nothing here
    kind_contact = contact(f, s, kind, limits, expectation, z0)
    if raw is not None and raw_open is not None and raw_short is not None:
        from probelog.contact import physics_contact  # contact imports Limits from this package

        phys = physics_contact(raw, raw_open, raw_short, kind, expectation, limits)
        kind_contact = worst_of([phys, kind_contact])  # physics first on a tie
    out = [kind_contact, passivity(f, s, limits, unc)]
    if ntwk.nports >= 2:
        out.append(reciprocity(f, s, limits, unc))
        if is_symmetric(kind, expectation):
            out.append(symmetry(f, s, limits, unc))
    if kind in ROTATING_KINDS:
        out.append(rotation(f, s, limits, unc))
    if kind == "line":
        figures = line_window_figures(f, s, expectation, limits, z0) if s.shape[1] >= 2 else {}
        out.append(line_window(f, s, expectation, limits, z0, figures))
        out.extend(window_quantities(figures))
    if expectation.get("golden") is not None:
        out.append(golden_match(f, s, z0, expectation["golden"], unc))
    if previous is not None:
        rep = repeatability(f, s, previous.f, previous.s, limits, unc, previous_label)
        if previous_other_die and rep.verdict in (Verdict.WARN, Verdict.FAIL):
            # the re-landing limits hold on one die; between dies the process spread adds
            # to them, and the population check judges that: a difference past the
            # re-landing WARN limit is normal spread (a clean demo wafer had 17 % of its
            # landings there), one past the FAIL limit only warns
            rep = replace(rep, verdict=Verdict.WARN if rep.verdict is Verdict.FAIL else Verdict.PASS,
                          message=rep.message + " (another die: die-to-die differences are judged by the population)")
        out.append(rep)
    if history:
        from probelog.population import population  # population imports Limits from this package

        pop_unc = population_unc if population_unc is not None and len(population_unc) == len(f) else None
        out.append(population(f, s, history, limits, pop_unc))
    if reference is not None:
        out.append(drift(f, s, reference.f, reference.s, limits, unc))
    return out
