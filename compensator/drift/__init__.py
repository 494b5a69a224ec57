"""Drift analysis of logged runs (pure: arrays and records in, records out).

``analysis`` (gain drift per day, residual temperature coefficient, gaps,
fault timeline), ``allan`` (overlapping Allan deviation with gaps),
``regression`` (least squares with Newey-West errors), ``fleet`` (one row per
unit and the spread), ``synthetic`` (seeded invented runs for tests and
demos). The report writer (``compensator.drift.report``) is the one module
here that writes files.
"""

from compensator.drift.allan import (
    AllanCurve,
    GridPositions,
    allan_curve,
    grid_positions,
    octave_factors,
    overlapping_adev,
    resample_to_grid,
)
from compensator.drift.analysis import (
    BinnedSeries,
    DriftReport,
    FaultInterval,
    FaultSummary,
    GainSource,
    Gap,
    analyse_run,
    bin_series,
    gain_series,
)
from compensator.drift.fleet import FleetSpread, FleetSummary, fleet_summary
from compensator.drift.regression import RobustFit, andrews_lag, fit_hac, newey_west_lag

__all__ = [
    "AllanCurve", "GridPositions", "allan_curve", "grid_positions", "octave_factors", "overlapping_adev",
    "resample_to_grid",
    "BinnedSeries", "DriftReport", "FaultInterval", "FaultSummary", "GainSource", "Gap", "analyse_run", "bin_series",
    "gain_series",
    "FleetSpread", "FleetSummary", "fleet_summary",
    "RobustFit", "andrews_lag", "fit_hac", "newey_west_lag",
]
