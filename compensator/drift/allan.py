"""Overlapping Allan deviation of a sampled quantity, with gaps (IEEE Std 1139 definitions).

Pure numpy. Samples are first put on a uniform time grid
(:func:`resample_to_grid`); grid points without a sample are ``nan`` and every
term of the Allan sum that touches one is left out, so a gap neither adds a
spurious step nor shifts the data before it onto the data after it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from compensator.errors import ModelError

__all__ = ["AllanCurve", "Grid", "GridPositions", "grid_positions", "resample_to_grid", "octave_factors", "overlapping_adev", "allan_curve",
           "MAX_GRID_POINTS"]

#: Above this many runs of missing samples the Allan sums use a mask instead of slices.
_MAX_RUNS_BY_SLICES = 2000
#: Largest uniform grid the analysis builds (a run of one year at 1 Hz is 3.2e7 points).
MAX_GRID_POINTS = 60_000_000


class Grid(NamedTuple):
    """Samples placed on a uniform time grid.

    Attributes
    ----------
    values : ndarray
        One value per grid point, ``nan`` where no sample fell.
    tau0_s : float
        Grid spacing, seconds.
    start_s : float
        Time of the first grid point (same clock as the input).
    """

    values: np.ndarray
    tau0_s: float
    start_s: float


def _slope(x, y) -> float:
    """Least-squares slope of y against x (closed form, one pass over the data)."""
    x = np.asarray(x, dtype=float)
    xc = x - x.mean()
    return float(np.dot(xc, y - np.mean(y)) / np.dot(xc, xc))


def _nan_runs(valid):
    """Start and end (exclusive) of each run of invalid samples."""
    edges = np.diff(np.concatenate(([0], (~valid).astype(np.int8), [0])))
    return np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)


def _step_index(t, tau0_s):
    """Grid index of each sample: the periods between neighbours, rounded and summed.

    Robust to a spacing slightly off the true period: the error does not
    accumulate along the run as it would with ``rint((t - t0) / tau0)``.
    """
    periods = np.rint(np.diff(t) / tau0_s).astype(np.int64)
    return np.concatenate(([0], np.cumsum(np.maximum(periods, 0))))


class GridPositions(NamedTuple):
    """Where samples fall on a uniform time grid.

    Attributes
    ----------
    index : ndarray of int
        Grid index of each sample.
    tau0_s : float
        Grid spacing, seconds.
    size : int
        Grid points from the first sample to the last.
    start_s : float
        Time of the first grid point.
    """

    index: np.ndarray
    tau0_s: float
    size: int
    start_s: float


def grid_positions(time_s, *, tau0_s: float | None = None) -> GridPositions:
    """Grid positions of sample times (the grid of :func:`resample_to_grid`).

    Parameters
    ----------
    time_s : array_like
        Sample times, seconds, non-decreasing, at least two of them distinct.
    tau0_s : float, optional
        Grid spacing; default the mean sample period, found by fitting the
        sample times against their grid indices (started from the median of
        the intervals without the missed samples), so jitter and missing
        samples do not skew the grid. A sample goes to the grid point its
        predecessor's plus the rounded number of periods between them.

    Returns
    -------
    GridPositions

    Raises
    ------
    ModelError
        Fewer than two samples, or a grid larger than :data:`MAX_GRID_POINTS`.
    """
    t = np.asarray(time_s, dtype=float)
    if t.size < 2:
        raise ModelError("fewer than two samples with a value", key="values")
    if tau0_s is None:
        steps = np.diff(t)
        steps = steps[steps > 0]
        if steps.size == 0:
            raise ModelError("all samples carry the same time", key="time_s")
        tau0_s = float(np.median(steps))
        tau0_s = float(np.median(steps[steps < 1.5 * tau0_s]))
        index = _step_index(t, tau0_s)
        if index[-1] > 0:
            refined = _slope(index, t - t[0])
            if refined > 0:
                tau0_s = refined
    if not tau0_s > 0:
        raise ModelError(f"grid spacing must be positive, got {tau0_s}", key="tau0_s")
    index = _step_index(t, tau0_s)
    size = int(index[-1]) + 1
    if size > MAX_GRID_POINTS:
        raise ModelError(f"the samples span {t[-1] - t[0]:.0f} s at {tau0_s:g} s spacing: "
                         f"{size} grid points is more than {MAX_GRID_POINTS}", key="time_s")
    return GridPositions(index, float(tau0_s), size, float(t[0]))


def resample_to_grid(time_s, values, *, tau0_s: float | None = None) -> Grid:
    """Place the finite samples on a uniform grid (see :func:`grid_positions`).

    Parameters
    ----------
    time_s : array_like
        Sample times, seconds, non-decreasing.
    values : array_like
        Sample values (``nan`` for missing ones), same length.
    tau0_s : float, optional
        Grid spacing (default: found from the times of the finite samples).

    Returns
    -------
    Grid

    Raises
    ------
    ModelError
        Fewer than two finite samples, or a grid too large.
    """
    time_s = np.asarray(time_s, dtype=float)
    values = np.asarray(values, dtype=float)
    ok = np.isfinite(values) & np.isfinite(time_s)
    positions = grid_positions(time_s[ok], tau0_s=tau0_s)
    grid = np.full(positions.size, np.nan)
    grid[positions.index] = values[ok]
    return Grid(grid, positions.tau0_s, positions.start_s)


def octave_factors(points: int, *, min_terms: int = 8) -> np.ndarray:
    """Averaging factors m = 1, 2, 4, ... with at least ``min_terms`` windows of length m.

    Parameters
    ----------
    points : int
        Length of the gridded series.
    min_terms : int
        Keep m only while ``points / m >= min_terms``.
    """
    factors = []
    m = 1
    while points // m >= min_terms and points - 2 * m + 1 >= 1:
        factors.append(m)
        m *= 2
    return np.asarray(factors, dtype=np.int64)


def overlapping_adev(values, *, tau0_s: float, factors) -> tuple[np.ndarray, np.ndarray]:
    """Overlapping Allan deviation of evenly spaced samples (IEEE Std 1139).

    For averaging factor m (tau = m tau0) with M samples y_i,

        sigma^2(tau) = 1 / (2 m^2 (M - 2m + 1)) sum_j [ sum_{i=j}^{j+m-1} (y_{i+m} - y_i) ]^2

    Terms whose 2m samples include a ``nan`` are left out and the mean is
    taken over the remaining terms.

    Parameters
    ----------
    values : array_like
        Samples on a uniform grid (``nan`` = no sample), in the quantity's own
        unit (the deviation comes out in the same unit).
    tau0_s : float
        Grid spacing, seconds.
    factors : array_like of int
        Averaging factors m >= 1.

    Returns
    -------
    deviation : ndarray
        Allan deviation at each tau = m tau0 (``nan`` where no term is valid).
    terms : ndarray of int
        Number of terms averaged at each factor.
    """
    y = np.asarray(values, dtype=float)
    valid = np.isfinite(y)
    gaps = not valid.all()
    if valid.any():
        y = y - np.mean(y[valid])  # the deviation ignores a constant; this keeps the cumulative sums small
    csum = np.concatenate(([0.0], np.cumsum(np.where(valid, y, 0.0) if gaps else y)))
    run_starts, run_ends = _nan_runs(valid) if gaps else (np.zeros(0, np.int64), np.zeros(0, np.int64))
    by_mask = run_starts.size > _MAX_RUNS_BY_SLICES
    cbad = np.concatenate(([0], np.cumsum(~valid))) if by_mask else None
    factors = np.asarray(factors, dtype=np.int64)
    deviation = np.full(factors.shape, np.nan)
    terms = np.zeros(factors.shape, dtype=np.int64)
    window = np.empty(csum.size)
    for k, m in enumerate(factors):
        if m < 1 or y.size - 2 * m + 1 < 1:
            continue
        n_window = csum.size - m
        win = np.subtract(csum[m:], csum[:-m], out=window[:n_window])        # sum of y over [j, j+m)
        step = np.subtract(win[m:], win[:-m], out=win[:n_window - m])         # next window minus this one
        if by_mask:
            bad = (cbad[m:] - cbad[:-m]) > 0
            good = ~(bad[m:] | bad[:-m])
            count = int(np.count_nonzero(good))
            total = float(np.dot(step[good], step[good]))
        else:
            # Term j uses samples j .. j+2m-1: a run of missing samples [a, b) spoils terms a-2m+1 .. b-1.
            total, count = float(np.dot(step, step)), step.size
            lo = np.maximum(run_starts - 2 * m + 1, 0)
            hi = np.minimum(run_ends, step.size)
            merged_lo = merged_hi = -1
            for a, b in zip(lo.tolist(), hi.tolist()):
                if a > merged_hi:
                    if merged_hi > merged_lo:
                        part = step[merged_lo:merged_hi]
                        total -= float(np.dot(part, part))
                        count -= merged_hi - merged_lo
                    merged_lo, merged_hi = a, b
                else:
                    merged_hi = max(merged_hi, b)
            if merged_hi > merged_lo:
                part = step[merged_lo:merged_hi]
                total -= float(np.dot(part, part))
                count -= merged_hi - merged_lo
        if count > 0:
            deviation[k] = np.sqrt(max(total, 0.0) / (2.0 * m * m * count))
        terms[k] = max(count, 0)
    return deviation, terms


@dataclass(frozen=True, kw_only=True)
class AllanCurve:
    """Overlapping Allan deviation of one logged quantity.

    Attributes
    ----------
    quantity : str
        What was analysed, with its unit (``gain_pct``, ``bias_v``, ``temp_k``).
    tau_s : ndarray
        Averaging times, seconds (octave-spaced multiples of the grid spacing).
    deviation_in_quantity_unit : ndarray
        Allan deviation at each ``tau_s``, in the unit of ``quantity``.
    terms : ndarray of int
        Terms averaged at each ``tau_s`` (fewer where gaps fall).
    minimum_tau_s : float
        Averaging time of the smallest deviation (where averaging stops
        helping and drift takes over).
    minimum_deviation_in_quantity_unit : float
        That deviation, in the quantity's unit.
    """

    quantity: str
    tau_s: np.ndarray
    deviation_in_quantity_unit: np.ndarray
    terms: np.ndarray
    minimum_tau_s: float
    minimum_deviation_in_quantity_unit: float


def allan_curve(quantity: str, time_s, values, *, tau0_s: float | None = None,
                positions: GridPositions | None = None) -> AllanCurve:
    """Grid the samples and return their overlapping Allan deviation at octave-spaced taus.

    Parameters
    ----------
    quantity : str
        Name with unit, carried into the result.
    time_s : array_like
        Sample times, seconds.
    values : array_like
        Sample values (``nan`` = missing).
    tau0_s : float, optional
        Grid spacing; default the mean sample period of the finite samples.
    positions : GridPositions, optional
        A grid already found for ``time_s`` (all samples, finite or not):
        several quantities logged together share one.

    Returns
    -------
    AllanCurve
    """
    if positions is None:
        grid = resample_to_grid(time_s, values, tau0_s=tau0_s)
    else:
        placed = np.full(positions.size, np.nan)
        placed[positions.index] = values
        grid = Grid(placed, positions.tau0_s, positions.start_s)
    factors = octave_factors(grid.values.size)
    deviation, terms = overlapping_adev(grid.values, tau0_s=grid.tau0_s, factors=factors)
    tau_s = factors * grid.tau0_s
    keep = np.isfinite(deviation)
    tau_s, deviation, terms = tau_s[keep], deviation[keep], terms[keep]
    if deviation.size:
        best = int(np.argmin(deviation))
        minimum = (float(tau_s[best]), float(deviation[best]))
    else:
        minimum = (float("nan"), float("nan"))
    return AllanCurve(quantity=quantity, tau_s=tau_s, deviation_in_quantity_unit=deviation, terms=terms,
                      minimum_tau_s=minimum[0], minimum_deviation_in_quantity_unit=minimum[1])
