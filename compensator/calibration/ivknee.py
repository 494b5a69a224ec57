"""The knee and the pre-breakdown (leakage) current of I-V curves, vectorised over curves.

Steps of :func:`compensator.calibration.iv.find_breakdown` (see its module
for the methods): the noise of ln I, the Savitzky-Golay window and the
smoothed d ln I / dV of every curve with the bias of its peak (the knee);
then the straight line through ln I over the pre-breakdown region, from the
start of the sweep to :data:`LEAKAGE_GAP_V` plus a filter window below the
knee, whose exponential is the leakage current extrapolated above breakdown.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy.signal import savgol_filter

from compensator.calibration.ivsignal import (
    POLYORDER,
    _gains,
    _odd,
    _savgol_grouped,
    _weighted_poly,
    choose_window,
    estimate_log_noise,
)

__all__ = ["LEAKAGE_GAP_V", "MIN_LEAKAGE_POINTS"]

#: The pre-breakdown region ends this far (plus one filter window) below the knee.
LEAKAGE_GAP_V = 0.3
#: Fewest points of the pre-breakdown region for a leakage model; with fewer
#: the leakage is not modelled and the result says so.
MIN_LEAKAGE_POINTS = 8


class _Knee(NamedTuple):
    """Smoothed log derivative of every curve and where it peaks."""

    noise: np.ndarray
    windows: np.ndarray
    deriv: np.ndarray
    peak_index: np.ndarray
    sigma_d: np.ndarray
    interior: np.ndarray


def _knee(ln_i, step_v) -> _Knee:
    """Noise, window, smoothed d ln I/dV and its peak (the knee) of every curve."""
    m, n = ln_i.shape
    noise = estimate_log_noise(ln_i)
    w_max = max(5, _odd(n // 4))
    pilot = savgol_filter(ln_i, w_max, POLYORDER, deriv=1, delta=step_v, axis=-1, mode="nearest")
    h_max = w_max // 2
    # The pilot's peak over the points where its filter has full support (find_breakdown passes curves of
    # at least MIN_POINTS = 15 points, more than the pilot window w_max: there is always such a point).
    inner = pilot[:, h_max:n - h_max]
    p_pilot = h_max + np.argmax(inner, axis=1)
    windows = choose_window(noise, np.max(inner, axis=1), step_v, n, deriv=1)
    deriv = _savgol_grouped(ln_i, windows, step_v, 1)
    half = windows // 2
    cols = np.arange(n)[None, :]
    interior = (cols >= half[:, None]) & (cols < n - half[:, None])
    deriv[~interior] = np.nan  # within half a window of the ends the filter has no full support
    # The knee: the peak of the pilot derivative (robust against noise spikes where
    # the current is small), refined with the chosen window within a pilot window of it.
    near = np.abs(cols - p_pilot[:, None]) <= h_max
    p = np.argmax(np.where(interior & near, deriv, -np.inf), axis=1)
    return _Knee(noise, windows, deriv, p, noise * _gains(windows, 1) / step_v, interior)


class _Leakage(NamedTuple):
    """Exponential pre-breakdown current ln I_leak = a + b (V - v0) of every curve (a NaN where not modelled)."""

    a: np.ndarray
    b: np.ndarray
    v0: np.ndarray
    cov: np.ndarray
    points: np.ndarray

    def ln_current(self, bias_v):
        """ln I_leak at ``bias_v`` (rows), -inf where not modelled."""
        ln = self.a[:, None] + self.b[:, None] * (bias_v - self.v0[:, None])
        return np.where(np.isfinite(ln), ln, -np.inf)

    def ln_rel_err(self, bias_v):
        """One-sigma error of ln I_leak at ``bias_v`` (rows)."""
        dx = bias_v - self.v0[:, None]
        var = self.cov[:, 0, 0, None] + 2 * dx * self.cov[:, 0, 1, None] + dx * dx * self.cov[:, 1, 1, None]
        return np.sqrt(np.maximum(var, 0.0))


def _fit_leakage(grid, ln_i, knee: _Knee, step_v) -> _Leakage:
    """Straight line through ln I over the pre-breakdown region of every curve."""
    m, n = ln_i.shape
    cols = np.arange(n)[None, :]
    gap = np.ceil(LEAKAGE_GAP_V / step_v).astype(int) + knee.windows
    end = knee.peak_index - gap
    mask = cols < end[:, None]
    x0 = grid[np.arange(m), np.clip(end, 0, n - 1)]
    x = grid - x0[:, None]
    fit = _weighted_poly(x, ln_i, np.ones_like(ln_i), mask, 1)
    points = fit.n_used
    dof = np.maximum(points - 2, 1)
    s2 = fit.chi2 / dof
    cov = fit.cov * s2[:, None, None]
    usable = (points >= MIN_LEAKAGE_POINTS) & np.all(np.isfinite(fit.coef), axis=1)
    a = np.where(usable, fit.coef[:, 0], np.nan)
    b = np.where(usable, fit.coef[:, 1], np.nan)
    return _Leakage(a, b, x0, cov, np.where(usable, points, 0))
