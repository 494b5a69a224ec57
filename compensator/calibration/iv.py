"""Breakdown voltage from I-V curves, vectorised over many curves on a common grid.

Three published methods, selected with ``method``:

``"inverse-log-derivative"`` (default)
    Above breakdown the current rises as a power law, I ~ (V - Vbd)^k, so the
    inverse logarithmic derivative (d ln I / dV)^-1 = (V - Vbd) / k is a
    straight line that crosses zero at Vbd. A weighted line fit just above the
    knee gives Vbd and k (Chmill et al., NIM A 845, 56, 2017; Klanner, NIM A
    926, 36, 2019).
``"log-derivative-peak"``
    The bias at the maximum of d ln I / dV (Bonanno et al., IEEE Sensors J. 14,
    3567, 2014).
``"second-derivative"``
    The bias at the maximum of d^2 ln I / dV^2, the onset of the knee (a
    second-derivative method after Nagy et al., NIM A 849, 55, 2017; the exact
    form used there is quoted from memory).

Differentiation is by Savitzky-Golay filters (``scipy.signal.savgol_filter``,
cubic local polynomials). The window is chosen per curve from the data:

1. the noise of ln I is estimated from the median absolute deviation of its
   second differences (for white noise their standard deviation is
   sqrt(6) sigma);
2. a pilot derivative with the widest allowed window (a quarter of the curve)
   gives the height D of the d ln I / dV peak;
3. the window is the narrowest odd width (at least 5 points) whose
   noise gain, ``sigma * ||savgol_coeffs|| / dV``, is at most
   :data:`NOISE_FRACTION` of D (for the second derivative the same rule is
   applied to the height of the d^2 ln I / dV^2 peak, with
   :data:`NOISE_FRACTION_SECOND`).

Narrow windows keep the knee sharp on clean data; noisy data get wider ones.

Uncertainties come from the covariance of the weighted fits (line for the
inverse-log-derivative, local parabola around the peak for the peak methods),
with the point errors propagated from the noise estimate, scaled up by
sqrt(chi2/ndf) when the scatter is larger than expected, and by
sqrt(window / 2) because neighbouring smoothed derivatives are correlated
over the filter window (an approximation; the benchmark checks the pulls).

Curves that cannot be analysed get a reason (too few points, non-monotonic
bias, non-positive currents, no breakdown in the range) and NaN results; the
other curves of the batch are unaffected.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np
from scipy.signal import savgol_coeffs, savgol_filter

from compensator.errors import ModelError

#: Method names accepted by :func:`find_breakdown`.
METHODS = ("inverse-log-derivative", "log-derivative-peak", "second-derivative")
DEFAULT_METHOD = "inverse-log-derivative"

#: Fewest points a curve needs.
MIN_POINTS = 15
#: Allowed noise of the smoothed d ln I/dV, as a fraction of its peak height.
NOISE_FRACTION = 0.1
#: The same for d^2 ln I/dV^2: its peak is narrower, and wide windows drag it
#: below breakdown, so more noise is accepted (both values were tuned on the
#: seeded synthetic curves of ``tools/bench/bench_calibration.py``).
NOISE_FRACTION_SECOND = 0.5
#: Savitzky-Golay polynomial order.
POLYORDER = 3
#: The current must rise at least this many times over the sweep to show a breakdown.
MIN_CURRENT_RATIO = 20.0
#: The inverse-log-derivative line is fitted from half a window above the
#: peak of d ln I/dV (where the smoothing no longer flattens the knee) over
#: ``ILD_SPAN_V`` volt, or at least two windows' worth of points. Starting
#: close to the knee keeps the fit where 1/(d ln I/dV) is straight even when a
#: triggering-probability factor bends it further up.
ILD_SPAN_V = 0.6


@dataclass(frozen=True)
class IvBreakdown:
    """Breakdown voltages of a batch of I-V curves (every array has one entry per curve).

    Attributes
    ----------
    breakdown_v : ndarray
        Breakdown voltage, volt (NaN where the curve failed).
    breakdown_err_v : ndarray
        One-sigma statistical uncertainty, volt (NaN where the curve failed).
    method : str
        Method used (one of :data:`METHODS`).
    reason : tuple of str
        Empty string for an analysed curve, else why it failed.
    window_points : ndarray of int
        Savitzky-Golay window used for d ln I/dV (0 where the curve failed early).
    exponent : ndarray
        Power-law exponent k from the inverse-log-derivative fit (NaN for other methods).
    fit_lo_v, fit_hi_v : ndarray
        Bias range of the fit (line or parabola), volt.
    bias_v : ndarray, shape (n_curves, n_points)
        Uniform bias grid each curve was analysed on, volt (for plots).
    log_derivative_per_v : ndarray, shape (n_curves, n_points)
        Smoothed d ln I / dV, 1/volt (NaN within half a window of the ends, and
        NaN rows where the curve failed early).
    """

    breakdown_v: np.ndarray
    breakdown_err_v: np.ndarray
    method: str
    reason: tuple
    window_points: np.ndarray
    exponent: np.ndarray
    fit_lo_v: np.ndarray
    fit_hi_v: np.ndarray
    bias_v: np.ndarray = field(repr=False)
    log_derivative_per_v: np.ndarray = field(repr=False)

    @property
    def ok(self) -> np.ndarray:
        """Boolean mask of the curves that were analysed."""
        return np.array([not r for r in self.reason], dtype=bool)

    def __len__(self) -> int:
        return len(self.reason)


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


def _weighted_poly(x, y, weights, mask, degree):
    """Weighted polynomial fit of every row over its masked points; returns coeffs (low->high), cov, chi2, n."""
    wm = np.where(mask, weights, 0.0)
    y = np.where(mask, y, 0.0)  # points outside the mask (possibly NaN) must not reach the sums
    powers = np.stack([x ** d for d in range(degree + 1)], axis=-1)  # (m, n, p)
    a = np.einsum("mn,mni,mnj->mij", wm, powers, powers)
    b = np.einsum("mn,mni,mn->mi", wm, powers, y)
    n_used = mask.sum(axis=1)
    good = n_used > degree
    a_safe = np.where(good[:, None, None], a, np.eye(degree + 1)[None])
    cov = np.linalg.inv(a_safe)
    coef = np.einsum("mij,mj->mi", cov, b)
    model = np.einsum("mni,mi->mn", powers, coef)
    chi2 = np.sum(wm * (y - model) ** 2, axis=1)
    coef[~good] = np.nan
    return coef, cov, chi2, n_used


def _uniform(bias_v, ln_i):
    """Return a uniform grid and ln I (rows) on it, interpolating when the steps vary by more than 1 %."""
    steps = np.diff(bias_v)
    if np.ptp(steps) <= 0.01 * abs(steps.mean()):
        return bias_v, ln_i
    grid = np.linspace(bias_v[0], bias_v[-1], bias_v.size)
    if ln_i.ndim == 1:
        return grid, np.interp(grid, bias_v, ln_i)
    return grid, np.array([np.interp(grid, bias_v, row) for row in ln_i])


def check_curve(bias_v, current_a) -> str:
    """Reason why one curve cannot be analysed, or ``""``.

    Parameters
    ----------
    bias_v, current_a : array_like, shape (n_points,)
        Bias (volt) and reverse current magnitude (ampere), in sweep order.

    Returns
    -------
    str
        Empty when the curve is usable.
    """
    bias_v = np.asarray(bias_v, dtype=float)
    current_a = np.asarray(current_a, dtype=float)
    if bias_v.shape != current_a.shape or bias_v.ndim != 1:
        return "bias and current columns differ in length"
    if bias_v.size < MIN_POINTS:
        return f"too few points ({bias_v.size}; need at least {MIN_POINTS})"
    if not (np.all(np.isfinite(bias_v)) and np.all(np.isfinite(current_a))):
        return "non-finite bias or current values"
    steps = np.diff(bias_v)
    if not (np.all(steps > 0) or np.all(steps < 0)):
        sign = np.sign(steps[0]) or 1.0
        bad = int(np.argmax(np.sign(steps) != sign))
        return f"bias is not strictly monotonic (sweep reverses or repeats at {bias_v[bad + 1]:.4g} V)"
    nonpos = current_a <= 0
    if nonpos.any():
        first = int(np.argmax(nonpos))
        return (f"{int(nonpos.sum())} current value(s) are zero or negative (first at {bias_v[first]:.4g} V); "
                "give the reverse current as a positive magnitude")
    return ""


def find_breakdown(bias_v, current_a, method: str = DEFAULT_METHOD) -> IvBreakdown:
    """Breakdown voltage of one or many I-V curves.

    Parameters
    ----------
    bias_v : array_like, shape (n_points,) or (n_curves, n_points)
        Reverse bias, volt; a 1-D grid is shared by all curves. Sweeps may run
        up or down but must be strictly monotonic; non-uniform steps are
        resampled onto a uniform grid with the same number of points.
    current_a : array_like, shape (n_points,) or (n_curves, n_points)
        Reverse current magnitude, ampere (positive).
    method : {"inverse-log-derivative", "log-derivative-peak", "second-derivative"}
        See the module docstring.

    Returns
    -------
    IvBreakdown
        Arrays over curves (a 1-D input is one curve). Failed curves carry a
        reason and NaN values; they never raise.

    Raises
    ------
    ModelError
        Unknown ``method`` or arrays whose shapes do not match.
    """
    if method not in METHODS:
        raise ModelError(f"method must be one of {', '.join(METHODS)}; got {method!r}")
    current_a = np.asarray(current_a, dtype=float)
    bias_v = np.asarray(bias_v, dtype=float)
    if current_a.ndim == 1:
        current_a = current_a[None, :]
    if current_a.ndim != 2:
        raise ModelError("current_a must be 1-D or 2-D (curves x points)")
    m, n = current_a.shape
    if bias_v.ndim == 1:
        if bias_v.size != n:
            raise ModelError(f"bias_v has {bias_v.size} points but current_a has {n}")
        bias_rows = None
    elif bias_v.shape == current_a.shape:
        bias_rows = bias_v
    else:
        raise ModelError(f"bias_v shape {bias_v.shape} does not match current_a shape {current_a.shape}")

    reasons = [""] * m
    grid = np.full((m, n), np.nan)
    ln_i = np.full((m, n), np.nan)
    if bias_rows is None:
        grid_reason = check_curve(bias_v, np.ones_like(bias_v))  # the shared grid alone
        if grid_reason:
            reasons = [grid_reason] * m
        else:
            flip = bias_v[-1] < bias_v[0]
            b = bias_v[::-1] if flip else bias_v
            c = current_a[:, ::-1] if flip else current_a
            bad = ~np.all(np.isfinite(c), axis=1) | np.any(c <= 0, axis=1)
            for i in np.flatnonzero(bad):
                reasons[i] = check_curve(b, c[i])
            with np.errstate(divide="ignore", invalid="ignore"):
                logs = np.log(np.where(bad[:, None], 1.0, c))
            g, logs_u = _uniform(b, logs)
            grid[:] = g
            ln_i[:] = logs_u
    else:
        for i in range(m):
            reasons[i] = check_curve(bias_rows[i], current_a[i])
            if reasons[i]:
                continue
            b, c = bias_rows[i], current_a[i]
            if b[-1] < b[0]:
                b, c = b[::-1], c[::-1]
            grid[i], ln_i[i] = _uniform(b, np.log(c))
    return _analyse(grid, ln_i, reasons, method)


def _analyse(grid, ln_i, reasons, method):
    m, n = ln_i.shape
    nan = np.full(m, np.nan)
    result = dict(breakdown_v=nan.copy(), breakdown_err_v=nan.copy(), exponent=nan.copy(),
                  fit_lo_v=nan.copy(), fit_hi_v=nan.copy(), window_points=np.zeros(m, dtype=int))
    deriv_all = np.full((m, n), np.nan)
    live = np.array([not r for r in reasons], dtype=bool)
    reasons = list(reasons)
    if live.any():
        idx = np.flatnonzero(live)
        step = grid[idx, 1] - grid[idx, 0]
        # Rows share one step size only if they share a grid; group by step.
        for s in np.unique(np.round(step, 12)):
            rows = idx[np.isclose(step, s, rtol=0, atol=1e-12)]
            out = _analyse_uniform(grid[rows], ln_i[rows], float(s), method)
            for key in result:
                result[key][rows] = out[key]
            deriv_all[rows] = out["deriv"]
            for r, why in zip(rows, out["reason"]):
                reasons[r] = why
    return IvBreakdown(method=method, reason=tuple(reasons), bias_v=grid, log_derivative_per_v=deriv_all, **result)


def _analyse_uniform(grid, ln_i, step_v, method):
    m, n = ln_i.shape
    reasons = [""] * m
    noise = estimate_log_noise(ln_i)
    w_max = max(5, _odd(n // 4))
    pilot = savgol_filter(ln_i, w_max, POLYORDER, deriv=1, delta=step_v, axis=-1, mode="nearest")
    h_max = w_max // 2
    pilot_peak = np.max(pilot[:, h_max:n - h_max], axis=1) if n > 2 * h_max else np.max(pilot, axis=1)
    windows = choose_window(noise, pilot_peak, step_v, n, deriv=1)
    deriv = _savgol_grouped(ln_i, windows, step_v, 1)
    half = windows // 2
    cols = np.arange(n)[None, :]
    interior = (cols >= half[:, None]) & (cols < n - half[:, None])
    deriv[~interior] = np.nan  # within half a window of the ends the filter has no full support
    masked = np.where(interior, deriv, -np.inf)
    p = np.argmax(masked, axis=1)
    rows = np.arange(m)
    peak = deriv[rows, p]
    sigma_d = noise * _gains(windows, 1) / step_v

    # No breakdown in the range: too little rise, or the derivative still climbing at the end.
    rise = np.max(ln_i, axis=1) - np.min(ln_i, axis=1)
    for i in range(m):
        if rise[i] < np.log(MIN_CURRENT_RATIO):
            reasons[i] = (f"no breakdown in range: the current rises only {np.exp(rise[i]):.3g}-fold "
                          f"between {grid[i, 0]:.4g} V and {grid[i, -1]:.4g} V")
        elif p[i] >= n - half[i] - 2:
            reasons[i] = f"no breakdown in range: d ln I/dV is still rising at the end of the sweep ({grid[i, -1]:.4g} V)"
        elif p[i] <= half[i] + 1:
            reasons[i] = f"no breakdown in range: d ln I/dV peaks at the start of the sweep ({grid[i, 0]:.4g} V)"
        elif peak[i] < 5.0 * sigma_d[i]:
            reasons[i] = "no breakdown in range: no significant knee in d ln I/dV above the noise"

    out = dict(breakdown_v=np.full(m, np.nan), breakdown_err_v=np.full(m, np.nan), exponent=np.full(m, np.nan),
               fit_lo_v=np.full(m, np.nan), fit_hi_v=np.full(m, np.nan), window_points=windows.astype(int),
               deriv=deriv)
    corr = np.sqrt(np.maximum(windows / 2.0, 1.0))
    if method == "inverse-log-derivative":
        _fit_ild(grid, deriv, p, half, sigma_d, step_v, corr, out, reasons)
    elif method == "log-derivative-peak":
        _fit_peak(grid, deriv, p, half, sigma_d, corr, out)
    else:
        noise2 = noise
        pilot2 = savgol_filter(ln_i, w_max, POLYORDER, deriv=2, delta=step_v, axis=-1, mode="nearest")
        region_hi = np.minimum(p + half, n - 1)
        in_region = interior & (cols <= region_hi[:, None])
        peak2 = np.max(np.where(in_region, pilot2, -np.inf), axis=1)
        windows2 = choose_window(noise2, np.maximum(peak2, 1e-12), step_v, n, deriv=2)
        d2 = _savgol_grouped(ln_i, windows2, step_v, 2)
        half2 = windows2 // 2
        in_region = (cols >= half2[:, None]) & (cols <= region_hi[:, None]) & (cols < n - half2[:, None])
        p2 = np.argmax(np.where(in_region, d2, -np.inf), axis=1)
        sigma_d2 = noise2 * _gains(windows2, 2) / step_v ** 2
        _fit_peak(grid, d2, p2, half2, sigma_d2, np.sqrt(np.maximum(windows2 / 2.0, 1.0)), out)
        for i in range(m):
            if not reasons[i] and (p2[i] <= half2[i] or d2[i, p2[i]] <= 0):
                reasons[i] = "no breakdown in range: no maximum of d2 ln I/dV2 below the knee"
    for i in range(m):
        if reasons[i]:
            for key in ("breakdown_v", "breakdown_err_v", "exponent", "fit_lo_v", "fit_hi_v"):
                out[key][i] = np.nan
        elif not np.isfinite(out["breakdown_v"][i]):
            reasons[i] = "fit failed: the breakdown could not be located"
    out["reason"] = reasons
    return out


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
    out["breakdown_err_v"][:] = np.maximum(err, 0.0)
    out["fit_lo_v"][:] = grid[np.arange(m), np.maximum(p - hw, 0)]
    out["fit_hi_v"][:] = grid[np.arange(m), np.minimum(p + hw, n - 1)]


def _fit_ild(grid, deriv, p, half, sigma_d, step_v, corr, out, reasons):
    """Weighted line fit of 1/(d ln I/dV) against bias, just above the knee."""
    m, n = deriv.shape
    cols = np.arange(n)[None, :]
    start = p + half
    span = np.maximum(np.ceil(ILD_SPAN_V / step_v).astype(int), 2 * (2 * half + 1))
    stop = np.minimum(start + span, n - half)
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = 1.0 / deriv
        weights = deriv ** 4 / sigma_d[:, None] ** 2
    mask = (cols >= start[:, None]) & (cols < stop[:, None]) & (deriv > 0) & np.isfinite(weights)
    x0 = grid[np.arange(m), np.minimum(start, n - 1)]
    x = grid - x0[:, None]
    coef, cov, chi2, n_used = _weighted_poly(x, np.where(mask, inv, 0.0), np.where(mask, weights, 0.0), mask, 1)
    a0, a1 = coef[:, 0], coef[:, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        root = -a0 / a1
        g = np.stack([-1.0 / a1, a0 / a1 ** 2], axis=1)
        var = np.einsum("mi,mij,mj->m", g, cov, g)
        scale = np.sqrt(np.maximum(chi2 / np.maximum(n_used - 2, 1), 1.0))
    out["breakdown_v"][:] = x0 + root
    out["breakdown_err_v"][:] = np.sqrt(np.abs(var)) * scale * corr
    out["exponent"][:] = 1.0 / a1
    out["fit_lo_v"][:] = x0
    out["fit_hi_v"][:] = grid[np.arange(m), np.maximum(stop - 1, 0)]
    for i in range(m):
        if reasons[i]:
            continue
        if n_used[i] < 4:
            reasons[i] = f"too few points above the knee for the line fit ({int(n_used[i])}; need 4)"
        elif not a1[i] > 0:
            reasons[i] = "no breakdown in range: 1/(d ln I/dV) does not rise above the knee"
