"""The drift analysis at the file edge: read logbooks, analyse each, summarise the fleet."""

from __future__ import annotations

from typing import NamedTuple

from compensator.drift.analysis import analyse_run
from compensator.drift.fleet import FleetSummary, fleet_summary
from compensator.errors import InputError, ModelError

__all__ = ["FleetAnalysis", "analyse_logbooks"]


class FleetAnalysis(NamedTuple):
    """What :func:`analyse_logbooks` returns.

    Attributes
    ----------
    summary : FleetSummary
        One :class:`~compensator.drift.analysis.DriftReport` per logbook and the spread.
    runs : tuple of RunSeries
        The runs read (empty unless ``keep_runs``).
    breakdown_v : tuple
        Per run, the breakdown voltages used (``None`` without a profile; empty unless ``keep_runs``).
    """

    summary: FleetSummary
    runs: tuple
    breakdown_v: tuple


def analyse_logbooks(paths, *, sipm=None, bin_s: float | None = None, confidence: float = 0.95,
                     keep_runs: bool = False) -> FleetAnalysis:
    """Read and analyse each logbook; every unreadable file is reported, none is written.

    Parameters
    ----------
    paths : sequence of str or path-like
        Logbook files.
    sipm : compensator.profiles.SipmProfile, optional
        The SiPM profile: its breakdown voltage turns the logged bias into
        an overvoltage when no dark-peak gain was logged.
    bin_s : float, optional
        Bin width of the drift fit, seconds (see :func:`analyse_run`).
    confidence : float
        Level of the intervals.
    keep_runs : bool
        Return the runs too (for the report's figures).

    Returns
    -------
    FleetAnalysis

    Raises
    ------
    InputError
        One line per logbook that cannot be analysed.
    """
    from compensator.logbook.store import read_run

    reports, runs, breakdowns, problems = [], [], [], []
    for path in paths:
        try:
            run = read_run(path)
            breakdown_v = None
            if sipm is not None:
                from compensator.physics.sipm import breakdown_v as breakdown_at

                breakdown_v = breakdown_at(sipm.device, run.temp_c)
            reports.append(analyse_run(run, bin_s=bin_s, confidence=confidence, breakdown_v=breakdown_v))
        except ModelError as exc:
            problems.extend(exc.at(str(path)).problems)
            continue
        except InputError as exc:
            problems.extend(exc.problems)
            continue
        if keep_runs:
            runs.append(run)
            breakdowns.append(breakdown_v)
    if problems:
        raise InputError(problems)
    return FleetAnalysis(fleet_summary(reports), tuple(runs), tuple(breakdowns))
