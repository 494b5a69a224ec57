"""Several units side by side: one row per unit and the fleet's spread (pure)."""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np

from compensator.drift.analysis import DriftReport
from compensator.findings import Finding, Severity

__all__ = ["FleetSpread", "FleetSummary", "fleet_summary"]


@dataclass(frozen=True, kw_only=True)
class FleetSpread:
    """How one figure spreads over the units of a fleet.

    Attributes
    ----------
    quantity : str
        Field of :class:`~compensator.drift.analysis.DriftReport` (or
        ``gain_allan_minimum_pct``), with its unit.
    unit_count : int
        Units with a value.
    mean_in_quantity_unit, std_in_quantity_unit : float
        Mean and standard deviation across units (1 sigma, n - 1).
    minimum_in_quantity_unit, maximum_in_quantity_unit : float
        Extremes.
    largest_abs_unit : str
        The unit with the largest absolute value.
    """

    quantity: str
    unit_count: int
    mean_in_quantity_unit: float
    std_in_quantity_unit: float
    minimum_in_quantity_unit: float
    maximum_in_quantity_unit: float
    largest_abs_unit: str


@dataclass(frozen=True, kw_only=True)
class FleetSummary:
    """Drift reports of several units and their spread.

    Attributes
    ----------
    unit_reports : tuple of DriftReport
        One per logbook, in the order given.
    spread : tuple of FleetSpread
    findings : tuple of Finding
    """

    unit_reports: tuple
    spread: tuple
    findings: tuple


def _gain_allan_minimum(report: DriftReport) -> float:
    return next((c.minimum_deviation_in_quantity_unit for c in report.allan if c.quantity == "gain_pct"), float("nan"))


_QUANTITIES = (
    ("drift_pct_per_day", lambda r: r.drift_pct_per_day),
    ("residual_tempco_pct_per_k", lambda r: r.residual_tempco_pct_per_k),
    ("gain_allan_minimum_pct", _gain_allan_minimum),
    ("gain_peak_to_peak_pct", lambda r: r.gain_peak_to_peak_pct),
)


def fleet_summary(reports) -> FleetSummary:
    """The spread of the drift figures over several units.

    Parameters
    ----------
    reports : sequence of DriftReport

    Returns
    -------
    FleetSummary
    """
    reports = tuple(reports)
    spread = []
    for name, get in _QUANTITIES:
        pairs = [(get(r), r.unit_id) for r in reports if np.isfinite(get(r))]
        if not pairs:
            continue
        values = np.asarray([v for v, _ in pairs])
        spread.append(FleetSpread(
            quantity=name, unit_count=len(pairs), mean_in_quantity_unit=float(values.mean()),
            std_in_quantity_unit=float(values.std(ddof=1)) if values.size > 1 else float("nan"),
            minimum_in_quantity_unit=float(values.min()), maximum_in_quantity_unit=float(values.max()),
            largest_abs_unit=pairs[int(np.argmax(np.abs(values)))][1]))
    findings = []
    repeated = sorted(u for u, n in Counter(r.unit_id for r in reports).items() if n > 1)
    if repeated:
        findings.append(Finding(code="unit_repeated", severity=Severity.INFO, message=(
            f"units logged in more than one file, one row per file: {', '.join(repeated)}")))
    sources = {r.gain_source for r in reports}
    if len(sources) > 1:
        findings.append(Finding(code="mixed_gain_sources", severity=Severity.WARNING, message=(
            "the units' gain figures come from different quantities (" + ", ".join(sorted(sources)) +
            "): compare their spreads with care")))
    return FleetSummary(unit_reports=reports, spread=tuple(spread), findings=tuple(findings))
