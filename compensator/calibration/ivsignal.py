"""Signal steps of the I-V analysis: noise of ln I, Savitzky-Golay windows and derivatives,
weighted polynomial fits of many rows from moment sums, block-mean decimation and resampling.

Used by :mod:`compensator.calibration.iv` (see its docstring for how the
window is chosen from the data); the public names are re-exported there.
"""

from __future__ import annotations

import functools
from typing import NamedTuple

import numpy as np
from scipy.signal import savgol_coeffs, savgol_filter

__all__ = ["NOISE_FRACTION", "NOISE_FRACTION_SECOND", "POLYORDER", "choose_window", "decimate", "estimate_log_noise"]

#: Allowed noise of the smoothed d ln I/dV, as a fraction of its peak height.
NOISE_FRACTION = 0.1
#: The same for d^2 ln I/dV^2: its peak is narrower, and wide windows drag it
#: below breakdown, so more noise is accepted (both values were tuned on the
#: seeded synthetic curves of ``tools/bench/bench_calibration.py``).
NOISE_FRACTION_SECOND = 0.5
#: Savitzky-Golay polynomial order.
POLYORDER = 3


def _odd(n: int) -> int:
    n = int(n)
    return n if n % 2 else n - 1


@functools.lru_cache(maxsize=None)
def _noise_gain(window: int, deriv: int) -> float:
    """Factor from the noise of ln I (per point) to the noise of its SG derivative (per unit step)."""
    return float(np.linalg.norm(savgol_coeffs(window, POLYORDER, deriv=deriv, use="dot")))


def estimate_log_noise(ln_current):
    """Noise (standard deviation) of ln I per point, from the MAD of second differences.

    Parameters
    ----------
    ln_current : array_like, shape (..., n_points)
        Natural logarithm of the current (dimensionless).

    Returns
    -------
    ndarray, shape (...)
        Estimated standard deviation of the white noise on ln I.
    """
    d2 = np.diff(np.asarray(ln_current, dtype=float), n=2, axis=-1)
    mad = np.median(np.abs(d2 - np.median(d2, axis=-1, keepdims=True)), axis=-1)
    return np.maximum(1.4826 * mad / np.sqrt(6.0), 1e-7)


def choose_window(noise, peak_height, step_v, n_points, deriv=1, fraction=None):
    """Narrowest odd Savitzky-Golay window whose derivative noise is a small fraction of the peak.

    Parameters
    ----------
    noise : array_like
        Noise of ln I per point (see :func:`estimate_log_noise`).
    peak_height : array_like
        Height of the derivative peak (1/volt for ``deriv=1``, 1/volt^2 for ``deriv=2``).
    step_v : float
        Grid step, volt.
    n_points : int
        Points per curve.
    deriv : {1, 2}
        Order of the derivative.
    fraction : float, optional
        Allowed noise as a fraction of the peak height (default
        :data:`NOISE_FRACTION` for ``deriv=1``, :data:`NOISE_FRACTION_SECOND` for ``deriv=2``).

    Returns
    -------
    ndarray of int
        Window length (odd, between 5 and a quarter of the curve).
    """
    w_max = max(5, _odd(n_points // 4))
    windows = np.arange(5, w_max + 1, 2)
    gains = np.array([_noise_gain(int(w), deriv) for w in windows]) / step_v ** deriv
    noise = np.atleast_1d(np.asarray(noise, dtype=float))
    height = np.atleast_1d(np.abs(np.asarray(peak_height, dtype=float)))
    if fraction is None:
        fraction = NOISE_FRACTION if deriv == 1 else NOISE_FRACTION_SECOND
    allowed = fraction * height
    ok = gains[None, :] * noise[:, None] <= allowed[:, None]
    first = np.where(ok.any(axis=1), ok.argmax(axis=1), len(windows) - 1)
    return windows[first]


def _gains(windows, deriv):
    """Noise gain of each curve's window (computed once per distinct window)."""
    table = {int(w): _noise_gain(int(w), deriv) for w in np.unique(windows)}
    return np.array([table[int(w)] for w in windows]) if len(windows) else np.zeros(0)


def _savgol_grouped(y, windows, step_v, deriv):
    """Savitzky-Golay derivative of each row with its own window (grouped by window)."""
    out = np.empty_like(y)
    for w in np.unique(windows):
        rows = windows == w
        out[rows] = savgol_filter(y[rows], int(w), POLYORDER, deriv=deriv, delta=step_v, axis=-1, mode="nearest")
    return out


class _PolyFit(NamedTuple):
    """Weighted polynomial fits of many rows: coefficients (low -> high), covariance, chi2, points used."""

    coef: np.ndarray
    cov: np.ndarray
    chi2: np.ndarray
    n_used: np.ndarray


def _weighted_poly(x, y, weights, mask, degree, *, also=None):
    """Weighted polynomial fit of every row over its masked points (normal equations from moment sums).

    With ``also`` (a lower degree) the fit of that degree is returned too, as
    ``(fit, lower_fit)``, from the same moment sums.
    """
    wm = np.where(mask, weights, 0.0)
    y = np.where(mask, y, 0.0)  # points outside the mask (possibly NaN) must not reach the sums
    x = np.where(mask, x, 0.0)
    s_moments, t_moments = [], []
    wx = wm
    for j in range(2 * degree + 1):
        if j:
            wx = wx * x
        s_moments.append(wx.sum(axis=1))
        if j <= degree:
            t_moments.append(np.einsum("ij,ij->i", wx, y))
    s_moments = np.stack(s_moments, axis=1)
    t_moments = np.stack(t_moments, axis=1)
    n_used = mask.sum(axis=1)
    fits = tuple(_solve_moments(s_moments, t_moments, d, x, y, wm, n_used)
                 for d in ((degree,) if also is None else (degree, also)))
    return fits[0] if also is None else fits


def _solve_moments(s_moments, t_moments, degree, x, y, wm, n_used) -> _PolyFit:
    p = degree + 1
    a = np.stack([s_moments[:, i:i + p] for i in range(p)], axis=1)  # Hankel matrix of the moments
    b = t_moments[:, :p]
    good = n_used > degree
    with np.errstate(invalid="ignore", over="ignore"):
        good &= np.all(np.isfinite(a), axis=(1, 2)) & (np.abs(np.linalg.det(np.where(
            good[:, None, None], a, np.eye(p)[None]))) > 0)
    a_safe = np.where(good[:, None, None], a, np.eye(p)[None])
    cov = np.linalg.inv(a_safe)
    coef = np.einsum("mij,mj->mi", cov, b)
    model = coef[:, degree, None] * x
    for j in range(degree - 1, 0, -1):
        model = (model + coef[:, j, None]) * x
    resid = y - model - coef[:, 0, None] if degree else y - coef[:, 0, None]
    chi2 = np.einsum("ij,ij->i", wm * resid, resid)
    coef[~good] = np.nan
    return _PolyFit(coef, cov, chi2, n_used)


def decimate(bias_v, ln_current, factor):
    """Block means of the bias and of ln I over ``factor`` consecutive points (a trailing partial block is dropped).

    Parameters
    ----------
    bias_v : ndarray, shape (n_points,) or (n_curves, n_points)
        Bias, volt.
    ln_current : ndarray, shape (n_curves, n_points)
        Natural logarithm of the current.
    factor : int
        Points per block (1 returns the inputs).

    Returns
    -------
    bias_v, ln_current : ndarray
        Decimated arrays (the bias keeps its dimensionality).
    """
    if factor <= 1:
        return bias_v, ln_current
    n = ln_current.shape[-1] // factor * factor
    ln_out = ln_current[..., :n].reshape(*ln_current.shape[:-1], -1, factor).mean(axis=-1)
    b_out = bias_v[..., :n].reshape(*bias_v.shape[:-1], -1, factor).mean(axis=-1)
    return b_out, ln_out


def _uniform(bias_v, ln_i):
    """Return a uniform grid and ln I (rows) on it, interpolating when the steps vary by more than 1 %."""
    steps = np.diff(bias_v)
    if np.ptp(steps) <= 0.01 * abs(steps.mean()):
        return bias_v, ln_i
    grid = np.linspace(bias_v[0], bias_v[-1], bias_v.size)
    if ln_i.ndim == 1:
        return grid, np.interp(grid, bias_v, ln_i)
    return grid, np.array([np.interp(grid, bias_v, row) for row in ln_i])
