"""Breakdown voltage from I-V curves, vectorised over many curves on a common grid.

Three published methods, selected with ``method``:

``"inverse-log-derivative"`` (default)
    Above breakdown the avalanche current rises as a power law, I ~ (V - Vbd)^k,
    so the inverse logarithmic derivative (d ln I / dV)^-1 = (V - Vbd) / k is a
    straight line that crosses zero at Vbd (Chmill et al., NIM A 845, 56, 2017;
    Klanner, NIM A 926, 36, 2019). A triggering-probability factor bends it
    near breakdown, so a weighted parabola (a line when the parabola is not
    determined) is fitted just above the knee and its root nearest the window
    is Vbd.
``"log-derivative-peak"``
    The bias at the maximum of d ln I / dV (Bonanno et al., IEEE Sensors J. 14,
    3567, 2014).
``"second-derivative"``
    The bias at the maximum of d^2 ln I / dV^2, the onset of the knee (a
    second-derivative method after Nagy et al., NIM A 849, 55, 2017; the exact
    form used there is quoted from memory).

The definitions differ by tens to hundreds of millivolts on the same curve;
:data:`DEFINITIONS` names each for profiles and JSON.

Pre-breakdown (leakage) current
-------------------------------
Real curves carry a leakage current below breakdown that grows roughly
exponentially with bias. Every method models it: ln I is fitted with a straight
line over the pre-breakdown region (from the start of the sweep to
:data:`LEAKAGE_GAP_V` plus a filter window below the knee), and the fitted
exponential I_leak(V) = exp(a + b V) is extrapolated above breakdown.

* inverse logarithmic derivative: the method is applied to the avalanche
  current I - I_leak, computed from the smoothed curve,
  d ln(I - I_leak)/dV = (I d ln I/dV - b I_leak) / (I - I_leak); on an
  exponential leakage plus a power law this is exact. The fit window starts
  where leakage is at most :data:`MAX_LEAKAGE_FRACTION` of the current.
* the peak methods are defined on the total current, whose leakage level sets
  the peak position (for I = I0 + A x^k the peak of d ln I/dV sits at
  x = ((k - 1) I0 / A)^(1/k) above breakdown): the growth of the leakage with
  bias is removed (I - I_leak(V) + I_leak(V_knee)) and its level at the knee
  kept, so these definitions stay what their authors defined, and still
  depend on the leakage level.

The result says how much leakage was removed (``leakage_current_a`` at the
breakdown voltage, ``leakage_fraction`` of the current at the start of the fit
window) and whether the window was limited by it (``leakage_limited``).

Smoothing and windows
---------------------
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

Curves of more than :data:`MAX_GRID_POINTS` points are first decimated: ln I
and the bias are averaged over consecutive blocks of ``ceil(n /
MAX_GRID_POINTS)`` points (the block mean keeps the information of the
block at a tenth of the cost or less and makes the analysis linear in n).

Uncertainties
-------------
``breakdown_stat_err_v`` comes from the covariance of the weighted fit (root
of the parabola or line for the inverse-log-derivative, local parabola around
the peak for the peak methods), with the point errors propagated from the
noise estimate, scaled up by sqrt(chi2/ndf) when the scatter is larger than
expected; for the peak methods also by sqrt(window / 2) because neighbouring
smoothed derivatives are correlated over the filter window (an approximation;
the benchmark prints the fraction of curves whose error lies within one
reported sigma). ``breakdown_sys_err_v`` is the method's systematic part: for the
inverse logarithmic derivative, the part of the difference between the roots
of a short and the full fit window that the statistics do not explain (for
nested fits the variance of the difference is the difference of the
variances), added in quadrature to the shift caused by a one-sigma change of
the extrapolated leakage; for the peak methods, half a grid step.
``breakdown_err_v`` is the quadrature sum of both.

Curves that cannot be analysed get a reason (too few points, non-monotonic
bias, non-positive currents, no breakdown in the range, a non-finite fit) and
NaN results; the other curves of the batch are unaffected.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from compensator.calibration.ivjoint import fit_joint
from compensator.calibration.ivknee import LEAKAGE_GAP_V, MIN_LEAKAGE_POINTS, _fit_leakage, _Knee, _knee, _Leakage
from compensator.calibration.ivpeaks import _fit_peak, _second_derivative
from compensator.calibration.ivsignal import (
    NOISE_FRACTION,
    NOISE_FRACTION_SECOND,
    POLYORDER,
    _savgol_grouped,
    _uniform,
    _weighted_poly,
    choose_window,
    decimate,
    estimate_log_noise,
)
from compensator.errors import ModelError

__all__ = [
    "DEFAULT_METHOD", "DEFINITIONS", "ILD_SPAN_V", "LEAKAGE_GAP_V", "MAX_GRID_POINTS", "MAX_LEAKAGE_FRACTION",
    "METHODS", "MIN_CURRENT_RATIO", "MIN_LEAKAGE_POINTS", "MIN_POINTS", "NOISE_FRACTION", "NOISE_FRACTION_SECOND",
    "POLYORDER", "IvBreakdown", "check_curve", "choose_window", "decimate", "estimate_log_noise", "find_breakdown",
]

#: Method names accepted by :func:`find_breakdown`.
METHODS = ("inverse-log-derivative", "log-derivative-peak", "second-derivative")
DEFAULT_METHOD = "inverse-log-derivative"
#: The breakdown definition each method measures (the names used by profiles and JSON).
DEFINITIONS = {
    "inverse-log-derivative": "iv_inverse_log_derivative",
    "log-derivative-peak": "iv_log_derivative_peak",
    "second-derivative": "iv_second_derivative",
}

#: Fewest points a curve needs.
MIN_POINTS = 15
#: Longer curves are decimated by block means to at most this many points.
MAX_GRID_POINTS = 2048
#: The current must rise at least this many times over the sweep to show a breakdown.
MIN_CURRENT_RATIO = 20.0
#: The inverse-log-derivative fit starts half a window above the peak of
#: d ln I/dV (where the smoothing no longer flattens the knee) and spans
#: ``ILD_SPAN_V`` volt, or at least two windows' worth of points.
ILD_SPAN_V = 2.0
#: The short window for the systematic part spans this fraction of the full one.
ILD_SHORT_FRACTION = 0.5
#: The inverse-log-derivative fit starts where the leakage is at most this
#: fraction of the current.
MAX_LEAKAGE_FRACTION = 0.8


@dataclass(frozen=True, kw_only=True)
class IvBreakdown:
    """Breakdown voltages of a batch of I-V curves (every array has one entry per curve).

    Attributes
    ----------
    breakdown_v : ndarray
        Breakdown voltage, volt (NaN where the curve failed).
    breakdown_err_v : ndarray
        One-sigma uncertainty, statistical and systematic parts in quadrature, volt.
    breakdown_stat_err_v, breakdown_sys_err_v : ndarray
        The statistical and the method's systematic part, volt.
    method : str
        Method used (one of :data:`METHODS`).
    reason : tuple of str
        Empty string for an analysed curve, else why it failed.
    window_points : ndarray of int
        Savitzky-Golay window used for d ln I/dV (0 where the curve failed early).
    exponent : ndarray
        Power-law exponent k at the start of the inverse-log-derivative fit
        (NaN for other methods).
    fit_lo_v, fit_hi_v : ndarray
        Bias range of the fit (parabola, line or peak parabola), volt.
    leakage_current_a : ndarray
        Modelled leakage current at the breakdown voltage, ampere (NaN when not modelled).
    leakage_slope_per_v : ndarray
        Logarithmic slope b of the modelled leakage, 1/volt (NaN when not modelled).
    leakage_fraction : ndarray
        Fraction of the current at the start of the fit window that was leakage and was removed.
    leakage_limited : ndarray of bool
        The fit window was moved up because leakage dominated the current below it.
    leakage_points : ndarray of int
        Points of the pre-breakdown region the leakage was fitted on (0: not modelled).
    joint_fit : ndarray of bool
        The breakdown (and the exponent, leakage and fit range) come from the
        joint fit of leakage and avalanche current (default method only).
    decimation : int
        Points averaged into one (1: the curves were analysed as given).
    bias_v : ndarray, shape (n_curves, n_points)
        Uniform bias grid each curve was analysed on, volt (for plots).
    log_derivative_per_v : ndarray, shape (n_curves, n_points)
        Smoothed d ln I / dV of the total current, 1/volt (for the peak methods,
        of the current with the growth of the leakage removed, see above; NaN
        within half a window of the ends, and NaN rows where the curve failed
        early).
    """

    breakdown_v: np.ndarray
    breakdown_err_v: np.ndarray
    breakdown_stat_err_v: np.ndarray
    breakdown_sys_err_v: np.ndarray
    method: str
    reason: tuple
    window_points: np.ndarray
    exponent: np.ndarray
    fit_lo_v: np.ndarray
    fit_hi_v: np.ndarray
    leakage_current_a: np.ndarray
    leakage_slope_per_v: np.ndarray
    leakage_fraction: np.ndarray
    leakage_limited: np.ndarray
    leakage_points: np.ndarray
    joint_fit: np.ndarray
    decimation: int = 1
    bias_v: np.ndarray = field(repr=False)
    log_derivative_per_v: np.ndarray = field(repr=False)

    @property
    def ok(self) -> np.ndarray:
        """Boolean mask of the curves that were analysed."""
        return np.array([not r for r in self.reason], dtype=bool)

    @property
    def definition(self) -> str:
        """The breakdown definition measured (see :data:`DEFINITIONS`)."""
        return DEFINITIONS[self.method]

    def __len__(self) -> int:
        return len(self.reason)


#: Per-curve result arrays, in the order :class:`IvBreakdown` lists them.
_FLOAT_FIELDS = ("breakdown_v", "breakdown_err_v", "breakdown_stat_err_v", "breakdown_sys_err_v", "exponent",
                 "fit_lo_v", "fit_hi_v", "leakage_current_a", "leakage_slope_per_v", "leakage_fraction")
_INT_FIELDS = ("window_points", "leakage_points")


def _empty_result(m):
    out = {k: np.full(m, np.nan) for k in _FLOAT_FIELDS}
    out.update({k: np.zeros(m, dtype=int) for k in _INT_FIELDS})
    out["leakage_limited"] = np.zeros(m, dtype=bool)
    out["joint_fit"] = np.zeros(m, dtype=bool)
    return out


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


def find_breakdown(bias_v, current_a, method: str = DEFAULT_METHOD, *, joint_fit: bool = True) -> IvBreakdown:
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
    joint_fit : bool
        For the default method, refine each breakdown by the joint fit of
        leakage and avalanche current (:mod:`compensator.calibration.ivjoint`);
        False keeps the derivative method's own result.

    Returns
    -------
    IvBreakdown
        Arrays over curves (a 1-D input is one curve). Failed curves carry a
        reason and NaN values; they never raise.

    Raises
    ------
    ModelError
        Unknown ``method`` or arrays whose shapes do not match.

    Examples
    --------
    A pure power law above a small leakage floor, breakdown at 24.5 V:

    >>> import numpy as np
    >>> bias_v = np.arange(20.0, 30.0, 0.05)
    >>> x = np.clip(bias_v - 24.5, 0.0, None)
    >>> current_a = 1e-11 * np.exp(0.1 * (bias_v - 24.5)) + 1e-6 * x ** 2
    >>> round(float(find_breakdown(bias_v, current_a).breakdown_v[0]), 2)
    24.5
    """
    if method not in METHODS:
        raise ModelError(f"method must be one of {', '.join(METHODS)}; got {method!r}", key="method")
    current_a = np.asarray(current_a, dtype=float)
    bias_v = np.asarray(bias_v, dtype=float)
    if current_a.ndim == 1:
        current_a = current_a[None, :]
    if current_a.ndim != 2:
        raise ModelError("current_a must be 1-D or 2-D (curves x points)", key="current_a")
    m, n = current_a.shape
    if bias_v.ndim == 1:
        if bias_v.size != n:
            raise ModelError(f"bias_v has {bias_v.size} points but current_a has {n}", key="bias_v")
        bias_rows = None
    elif bias_v.shape == current_a.shape:
        bias_rows = bias_v
    else:
        raise ModelError(f"bias_v shape {bias_v.shape} does not match current_a shape {current_a.shape}",
                         key="bias_v")

    factor = max(1, -(-n // MAX_GRID_POINTS))
    n_out = n // factor
    reasons = [""] * m
    grid = np.full((m, n_out), np.nan)
    ln_i = np.full((m, n_out), np.nan)
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
            b, logs = decimate(b, logs, factor)
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
            b, logs = decimate(b, np.log(c)[None, :], factor)
            grid[i], ln_i[i] = _uniform(b, logs[0])
    return _analyse(grid, ln_i, reasons, method, factor, joint_fit)


def _analyse(grid, ln_i, reasons, method, factor=1, joint_fit=True):
    m, n = ln_i.shape
    result = _empty_result(m)
    deriv_all = np.full((m, n), np.nan)
    live = np.array([not r for r in reasons], dtype=bool)
    reasons = list(reasons)
    if live.any():
        idx = np.flatnonzero(live)
        step = grid[idx, 1] - grid[idx, 0]
        # Rows share one step size only if they share a grid; group by step.
        for s in np.unique(np.round(step, 12)):
            rows = idx[np.isclose(step, s, rtol=0, atol=1e-12)]
            out = _analyse_uniform(grid[rows], ln_i[rows], float(s), method, joint_fit)
            for key in result:
                result[key][rows] = out[key]
            deriv_all[rows] = out["deriv"]
            for r, why in zip(rows, out["reason"]):
                reasons[r] = why
    return IvBreakdown(method=method, reason=tuple(reasons), bias_v=grid, log_derivative_per_v=deriv_all,
                       decimation=int(factor), **result)


def _analyse_uniform(grid, ln_i, step_v, method, joint_fit):
    m, n = ln_i.shape
    reasons = [""] * m
    knee = _knee(ln_i, step_v)
    leak = _fit_leakage(grid, ln_i, knee, step_v)
    out = _empty_result(m)
    out["leakage_slope_per_v"][:] = leak.b
    out["leakage_points"][:] = leak.points
    if method != DEFAULT_METHOD:
        # Peak methods: take out the growth of the leakage, keep its level at the knee.
        rows = np.arange(m)
        ln_leak = leak.ln_current(grid)
        at_knee = ln_leak[rows, knee.peak_index]
        modelled = np.isfinite(at_knee)
        with np.errstate(over="ignore", invalid="ignore"):
            flat = np.exp(ln_i) - np.exp(ln_leak) + np.exp(np.where(modelled, at_knee, -np.inf))[:, None]
            ln_flat = np.log(np.maximum(flat, 1e-3 * np.exp(ln_i)))
        ln_i = np.where(modelled[:, None], ln_flat, ln_i)
        knee = _knee(ln_i, step_v)
    windows, deriv, p = knee.windows, knee.deriv, knee.peak_index
    half = windows // 2
    rows = np.arange(m)
    peak = deriv[rows, p]
    out["window_points"][:] = windows
    out["deriv"] = deriv

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
        elif peak[i] < 5.0 * knee.sigma_d[i]:
            reasons[i] = "no breakdown in range: no significant knee in d ln I/dV above the noise"

    if method == "inverse-log-derivative":
        _fit_ild(grid, ln_i, knee, leak, step_v, out, reasons)
        out["leakage_current_a"][:] = np.exp(leak.a + leak.b * (out["breakdown_v"] - leak.v0))
        if joint_fit:
            _refine_joint(grid, ln_i, out, reasons)
    elif method == "log-derivative-peak":
        _fit_peak(grid, deriv, p, half, knee.sigma_d, np.sqrt(np.maximum(windows / 2.0, 1.0)), out)
    else:
        _second_derivative(grid, ln_i, knee, step_v, out, reasons)
    if method != "inverse-log-derivative":
        out["leakage_current_a"][:] = np.exp(leak.a + leak.b * (out["breakdown_v"] - leak.v0))
    out["breakdown_err_v"][:] = np.hypot(out["breakdown_stat_err_v"], out["breakdown_sys_err_v"])
    for i in range(m):
        finite = all(np.isfinite(out[k][i]) for k in ("breakdown_v", "breakdown_err_v"))
        if not reasons[i] and not finite:
            reasons[i] = "fit failed: the breakdown or its uncertainty is not a finite number"
        if reasons[i]:
            for key in _FLOAT_FIELDS:
                out[key][i] = np.nan
            out["leakage_limited"][i] = False
            out["joint_fit"][i] = False
    out["reason"] = reasons
    return out


def _refine_joint(grid, ln_i, out, reasons):
    """Replace the derivative method's results by the joint fit's where that converged."""
    live = np.array([not r for r in reasons], dtype=bool) & np.isfinite(out["breakdown_v"])
    fit = fit_joint(grid, ln_i, np.where(live, out["breakdown_v"], np.nan), exponent=out["exponent"],
                    leakage_current_a=out["leakage_current_a"], leakage_slope_per_v=out["leakage_slope_per_v"])
    for name in ("breakdown_v", "breakdown_stat_err_v", "breakdown_sys_err_v", "exponent", "leakage_current_a",
                 "leakage_slope_per_v", "fit_lo_v", "fit_hi_v"):
        out[name][:] = np.where(fit.ok, getattr(fit, name), out[name])
    out["joint_fit"][:] = fit.ok


class _Root(NamedTuple):
    """Root of the inverse-log-derivative fit (relative to the window start) and its statistics."""

    root: np.ndarray
    var: np.ndarray
    slope: np.ndarray
    n_used: np.ndarray


def _ild_root(x, inv, weights, mask) -> _Root:
    """Root nearest the window of a weighted parabola (a line where the parabola has none) through 1/D."""
    quad, line = _weighted_poly(x, inv, weights, mask, 2, also=1)
    a0, a1, a2 = quad.coef[:, 0], quad.coef[:, 1], quad.coef[:, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        disc = a1 * a1 - 4.0 * a0 * a2
        root_q = -2.0 * a0 / (a1 + np.sqrt(disc))  # the root continuous with -a0/a1 as a2 -> 0
        fprime = a1 + 2.0 * a2 * root_q
        g = -np.stack([np.ones_like(root_q), root_q, root_q ** 2], axis=1) / fprime[:, None]
        var_q = np.einsum("mi,mij,mj->m", g, quad.cov, g)
        scale_q = np.maximum(quad.chi2 / np.maximum(quad.n_used - 3, 1), 1.0)
        b0, b1 = line.coef[:, 0], line.coef[:, 1]
        root_l = -b0 / b1
        gl = np.stack([-1.0 / b1, b0 / b1 ** 2], axis=1)
        var_l = np.einsum("mi,mij,mj->m", gl, line.cov, gl)
        scale_l = np.maximum(line.chi2 / np.maximum(line.n_used - 2, 1), 1.0)
    use_q = (disc >= 0) & (a1 > 0) & (fprime > 0) & np.isfinite(root_q) & (quad.n_used >= 6)
    root = np.where(use_q, root_q, root_l)
    var = np.where(use_q, var_q * scale_q, var_l * scale_l)
    slope = np.where(use_q, a1, b1)
    return _Root(root, var, slope, line.n_used)


def _fit_ild(grid, ln_i, knee: _Knee, leak: _Leakage, step_v, out, reasons):
    """Weighted fit of 1/(d ln I_avalanche/dV) against bias, just above the knee."""
    m, n = ln_i.shape
    rows = np.arange(m)
    cols = np.arange(n)[None, :]
    deriv, p, half, sigma_d = knee.deriv, knee.peak_index, knee.windows // 2, knee.sigma_d
    smooth = _savgol_grouped(ln_i, knee.windows, step_v, 0)
    ln_leak = leak.ln_current(grid)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        fraction = np.exp(ln_leak - smooth)  # leakage / current
        slope_b = np.where(np.isfinite(leak.b), leak.b, 0.0)[:, None]

        d_av = (deriv - slope_b * fraction) / (1.0 - fraction)
    natural = p + half
    clean = (fraction <= MAX_LEAKAGE_FRACTION) & (cols >= natural[:, None])
    start = np.where(clean.any(axis=1), np.argmax(clean, axis=1), n - 1)
    limited = start > natural
    span = np.maximum(np.ceil(ILD_SPAN_V / step_v).astype(int), 2 * (2 * half + 1))
    stop = np.minimum(start + span, n - half)
    short_stop = np.minimum(start + np.maximum((ILD_SHORT_FRACTION * span).astype(int), 2 * half + 1 + 3),
                            stop)
    x0 = grid[rows, np.minimum(start, n - 1)]
    # Work on the fit windows only: gather (curves x longest window) columns.
    width = max(int(np.max(stop - start)), 1)
    offset = np.arange(width)[None, :]
    index = np.clip(start[:, None] + offset, 0, n - 1)
    x = np.take_along_axis(grid, index, axis=1) - x0[:, None]
    frac_w = np.take_along_axis(fraction, index, axis=1)
    d_w = np.take_along_axis(d_av, index, axis=1)
    deriv_w = np.take_along_axis(deriv, index, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        amplification = 1.0 / (1.0 - np.clip(frac_w, 0.0, 0.99))

    def root_for(d, stop_at):
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            inv = 1.0 / d
            weights = d ** 4 / (sigma_d[:, None] * amplification) ** 2
        mask = (offset < (stop_at - start)[:, None]) & (d > 0) & np.isfinite(weights) & np.isfinite(inv)
        return _ild_root(x, np.where(mask, inv, 0.0), np.where(mask, weights, 0.0), mask)

    full = root_for(d_w, stop)
    short = root_for(d_w, short_stop)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        window_sys2 = np.maximum((short.root - full.root) ** 2 - np.maximum(short.var - full.var, 0.0), 0.0)
        leak_err = np.exp(leak.ln_rel_err(x + x0[:, None])) - 1.0
        frac_hi = frac_w * (1.0 + np.where(np.isfinite(leak_err), leak_err, 0.0))
        shifted = root_for((deriv_w - slope_b * frac_hi) / (1.0 - frac_hi), stop)
        leak_sys = np.where(np.isfinite(shifted.root), shifted.root - full.root, 0.0)
    out["breakdown_v"][:] = x0 + full.root
    out["breakdown_stat_err_v"][:] = np.sqrt(np.abs(full.var))
    out["breakdown_sys_err_v"][:] = np.sqrt(window_sys2 + leak_sys ** 2)
    with np.errstate(divide="ignore", invalid="ignore"):
        out["exponent"][:] = 1.0 / full.slope
    out["fit_lo_v"][:] = x0
    out["fit_hi_v"][:] = grid[rows, np.clip(stop - 1, 0, n - 1)]
    frac_start = fraction[rows, np.minimum(start, n - 1)]
    out["leakage_fraction"][:] = np.where(np.isfinite(frac_start), frac_start, 0.0)
    out["leakage_limited"][:] = limited
    for i in range(m):
        if reasons[i]:
            continue
        if full.n_used[i] < 4:
            reasons[i] = (f"no breakdown in range: too few points above the knee at {grid[i, p[i]]:.4g} V for the "
                          f"fit ({int(full.n_used[i])}; need 4) before the end of the sweep at {grid[i, -1]:.4g} V")
        elif not full.slope[i] > 0:
            reasons[i] = "no breakdown in range: 1/(d ln I/dV) does not rise above the knee"
