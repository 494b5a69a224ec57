"""Charge spectra as arrays: checks of histograms and event lists, and binning of event lists."""

from __future__ import annotations

import numpy as np

from compensator.errors import InputError, ModelError

__all__ = ["MAX_EVENT_BINS", "MIN_EVENTS", "bin_events"]

#: Most bins an event list is binned into.
MAX_EVENT_BINS = 4096
#: Fewest events a spectrum must hold.
MIN_EVENTS = 50


def _check_range(fit_range):
    if fit_range is None:
        return -np.inf, np.inf
    try:
        lo, hi = (float(v) for v in fit_range)
    except (TypeError, ValueError):
        raise InputError("fit_range: give two charges, (lowest, highest)") from None
    if np.isnan(lo) or np.isnan(hi) or not lo < hi:
        raise InputError(f"fit_range: the lowest charge must be below the highest (got {lo:g}, {hi:g})")
    return lo, hi


def _check_histogram(charge, counts, where=""):
    where = f" {where}" if where else ""
    x = np.asarray(charge, dtype=float)
    c = np.asarray(counts, dtype=float)
    if x.ndim != 1 or c.ndim != 1:
        raise InputError("charge/counts: must be one-dimensional")
    if x.size != c.size:
        raise InputError(f"charge/counts: lengths differ ({x.size} charges, {c.size} counts)")
    if x.size == 0:
        raise InputError(f"charge: the spectrum is empty{where}")
    if x.size < 5:
        raise InputError(f"charge: {x.size} bins{where} are too few for a spectrum (need at least 5)")
    if not np.all(np.isfinite(x)):
        raise InputError(f"charge: non-finite value at bin {int(np.flatnonzero(~np.isfinite(x))[0])}")
    if not np.all(np.isfinite(c)):
        raise InputError(f"counts: non-finite value at bin {int(np.flatnonzero(~np.isfinite(c))[0])}")
    neg = np.flatnonzero(c < 0)
    if neg.size:
        raise InputError(f"counts: {neg.size} negative value(s), first at bin {int(neg[0])} ({c[neg[0]]:g})")
    steps = np.diff(x)
    bad = np.flatnonzero(steps <= 0)
    if bad.size:
        raise InputError(f"charge: bin centres must increase strictly (bin {int(bad[0]) + 1} does not)")
    total = float(c.sum())
    if total <= 0:
        raise InputError(f"counts: the spectrum is empty{where} (all counts are zero)")
    if total < MIN_EVENTS:
        raise ModelError(f"counts: {total:g} events{where} are too few for a spectrum fit (need at least {MIN_EVENTS})")
    return x, c


def _fill_gaps(x, c):
    """Put back empty bins that a histogram export left out.

    When every step between bin centres is a whole multiple of the smallest
    step (within 0.1 %), the missing bins were empty: they are inserted with
    zero counts so the bins keep one width. Otherwise the bins are taken as
    genuinely non-uniform.
    """
    steps = np.diff(x)
    width = float(steps.min())
    ratio = steps / width
    whole = np.rint(ratio)
    if np.all(whole == 1.0) or not np.all(np.abs(ratio - whole) <= 1e-3 * whole):
        return x, c
    if whole.sum() + 1 > 64 * x.size:  # sparse exports of huge ranges: leave them as they are
        return x, c
    index = np.concatenate(([0], np.cumsum(whole).astype(np.int64)))
    full_x = x[0] + width * np.arange(index[-1] + 1)
    full_x[index] = x
    full_c = np.zeros(full_x.size)
    full_c[index] = c
    return full_x, full_c


def _edges_from_centres(x):
    mid = 0.5 * (x[1:] + x[:-1])
    return np.concatenate(([x[0] - (mid[0] - x[0])], mid, [x[-1] + (x[-1] - mid[-1])]))


def _check_events(charge):
    q = np.asarray(charge, dtype=float)
    if q.ndim != 1:
        raise InputError("charge: an event list must be one-dimensional")
    if q.size == 0:
        raise InputError("charge: the event list is empty")
    if not np.all(np.isfinite(q)):
        raise InputError(f"charge: non-finite value at event {int(np.flatnonzero(~np.isfinite(q))[0])}")
    if q.size < MIN_EVENTS:
        raise ModelError(f"charge: {q.size} events are too few for a spectrum fit (need at least {MIN_EVENTS})")
    return q


def _histogram(q, width):
    lo, hi = float(q.min()), float(q.max())
    n_bins = max(int(np.floor((hi - lo) / width + 0.5)) + 1, 5)
    edges = lo - 0.5 * width + width * np.arange(n_bins + 1)
    j = np.clip(((q - edges[0]) / width).astype(np.int64), 0, n_bins - 1)
    counts = np.bincount(j, minlength=n_bins).astype(float)
    return 0.5 * (edges[1:] + edges[:-1]), counts


def bin_events(charge):
    """Histogram an event list with a data-driven bin width.

    The rule: a pilot histogram with a quarter of the Freedman-Diaconis width
    (``2 IQR n**(-1/3)``; Freedman and Diaconis, Z. Wahrscheinlichkeitstheorie
    57, 453, 1981, quoted from memory) gives start values for the peak spacing
    ``G`` and the pedestal width ``sigma0``; the final width is the smaller of
    ``sigma0 / 2`` and ``G / 8`` (peaks resolved by several bins; the binned fit
    integrates the model over each bin, so narrower bins cost only time), but
    never so narrow that the events' range needs more than 4096 bins.

    Parameters
    ----------
    charge : array_like
        One charge per event (any unit).

    Returns
    -------
    charge : numpy.ndarray
        Bin centres.
    counts : numpy.ndarray
        Events per bin.
    """
    q = _check_events(charge)
    lo, hi = float(q.min()), float(q.max())
    span = hi - lo
    if not span > 0:
        raise ModelError("charge: all events have the same charge; there is no spectrum")
    iqr = float(np.subtract(*np.percentile(q, [75, 25])))
    fd = 2.0 * iqr * q.size ** (-1.0 / 3.0) if iqr > 0 else span / 64
    pilot_width = max(fd / 4.0, span / MAX_EVENT_BINS)
    x, c = _histogram(q, pilot_width)
    from compensator.calibration.spectrum.start import _start_values  # start values use the checks here

    start = _start_values(x, c, _edges_from_centres(x))
    width = min(start["sigma0"] / 2.0, start["gain"] / 8.0)
    width = max(width, span / (MAX_EVENT_BINS - 2))
    return _histogram(q, width)
