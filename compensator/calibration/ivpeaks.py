"""The peak definitions of the I-V breakdown: the maximum of d ln I/dV and of d^2 ln I/dV^2.

The bias at the maximum of the logarithmic derivative (Bonanno et al., IEEE
Sensors J. 14, 3567, 2014) or of its derivative (a second-derivative method
after Nagy et al., NIM A 849, 55, 2017; the exact form used there is quoted
from memory), each refined by the vertex of a weighted parabola. Called by
:func:`compensator.calibration.iv.find_breakdown`, which documents the errors.
"""

from __future__ import annotations

import numpy as np
from scipy.signal import savgol_filter

from compensator.calibration.ivsignal import POLYORDER, _gains, _odd, _savgol_grouped, _weighted_poly, choose_window

__all__: list = []


def _second_derivative(grid, ln_i, knee, step_v, out, reasons):
    """Maximum of d^2 ln I/dV^2 below the knee."""
    m, n = ln_i.shape
    cols = np.arange(n)[None, :]
    p, half = knee.peak_index, knee.windows // 2
    w_max = max(5, _odd(n // 4))
    pilot2 = savgol_filter(ln_i, w_max, POLYORDER, deriv=2, delta=step_v, axis=-1, mode="nearest")
    region_hi = np.minimum(p + half, n - 1)
    in_region = knee.interior & (cols <= region_hi[:, None])
    peak2 = np.max(np.where(in_region, pilot2, -np.inf), axis=1)
    windows2 = choose_window(knee.noise, np.maximum(peak2, 1e-12), step_v, n, deriv=2)
    d2 = _savgol_grouped(ln_i, windows2, step_v, 2)
    half2 = windows2 // 2
    in_region = (cols >= half2[:, None]) & (cols <= region_hi[:, None]) & (cols < n - half2[:, None])
    p2 = np.argmax(np.where(in_region, d2, -np.inf), axis=1)
    sigma_d2 = knee.noise * _gains(windows2, 2) / step_v ** 2
    _fit_peak(grid, d2, p2, half2, sigma_d2, np.sqrt(np.maximum(windows2 / 2.0, 1.0)), out)
    for i in range(m):
        if not reasons[i] and (p2[i] <= half2[i] or d2[i, p2[i]] <= 0):
            reasons[i] = "no breakdown in range: no maximum of d2 ln I/dV2 below the knee"


def _fit_peak(grid, values, p, half, sigma, corr, out):
    """Vertex of a weighted parabola through the points around each peak."""
    m, n = values.shape
    hw = np.maximum(np.minimum(half, 6), 2)
    cols = np.arange(n)[None, :]
    mask = (np.abs(cols - p[:, None]) <= hw[:, None])
    x0 = grid[np.arange(m), p]
    x = grid - x0[:, None]
    weights = np.broadcast_to((1.0 / sigma ** 2)[:, None], values.shape)
    coef, cov, chi2, n_used = _weighted_poly(x, values, weights, mask, 2)
    c1, c2 = coef[:, 1], coef[:, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        vertex = -c1 / (2.0 * c2)
        # d vertex / d c1 = -1/(2 c2); d vertex / d c2 = c1/(2 c2^2)
        g1, g2 = -1.0 / (2.0 * c2), c1 / (2.0 * c2 ** 2)
        var = g1 ** 2 * cov[:, 1, 1] + g2 ** 2 * cov[:, 2, 2] + 2 * g1 * g2 * cov[:, 1, 2]
        scale = np.sqrt(np.maximum(chi2 / np.maximum(n_used - 3, 1), 1.0))
    step = grid[:, 1] - grid[:, 0]
    usable = (c2 < 0) & (np.abs(vertex) <= hw * step)
    vertex = np.where(usable, vertex, 0.0)  # fall back to the sample maximum
    err = np.where(usable, np.sqrt(np.abs(var)) * scale * corr, step / np.sqrt(12.0))
    out["breakdown_v"][:] = x0 + vertex
    out["breakdown_stat_err_v"][:] = np.maximum(err, 0.0)
    out["breakdown_sys_err_v"][:] = 0.5 * step
    out["fit_lo_v"][:] = grid[np.arange(m), np.maximum(p - hw, 0)]
    out["fit_hi_v"][:] = grid[np.arange(m), np.minimum(p + hw, n - 1)]
