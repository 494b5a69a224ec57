"""The naive baseline the spectrum benchmark compares the fit with (not part of the library)."""

from __future__ import annotations

import numpy as np

from compensator.calibration.spectrum.histogram import _check_histogram
from compensator.errors import ModelError

__all__ = ["naive_gain"]


def naive_gain(charge, counts) -> float:
    """Baseline gain: spacing of the two largest peaks.

    The counts are smoothed with a 3-bin moving average; local maxima with a
    prominence of at least 5 % of the highest count are peaks; the distance
    between the two highest is returned. This is the naive method the
    benchmark compares :func:`fit_spectrum` against: it is wrong whenever the
    two largest peaks are not neighbours.

    Parameters
    ----------
    charge : array_like
        Bin centres (any charge unit).
    counts : array_like
        Events per bin.

    Returns
    -------
    float
        Peak spacing in the unit of ``charge``.

    Raises
    ------
    ModelError
        Fewer than two peaks.
    """
    from scipy.signal import find_peaks

    x, c = _check_histogram(charge, counts)
    sm = np.convolve(c, np.ones(3) / 3.0, mode="same")
    idx, _ = find_peaks(sm, prominence=0.05 * sm.max())
    if idx.size < 2:
        raise ModelError("spectrum: fewer than two peaks; the naive gain is undefined")
    top = idx[np.argsort(sm[idx])[-2:]]
    return float(abs(x[top[1]] - x[top[0]]))
