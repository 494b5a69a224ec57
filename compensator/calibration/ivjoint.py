"""Joint least-squares fit of leakage and avalanche current near breakdown, vectorised over curves.

The inverse-logarithmic-derivative method (:mod:`compensator.calibration.iv`)
differentiates a smoothed curve; the smoothing that keeps the noise of the
derivative down also blurs the knee, and the leakage it removes is
extrapolated from below the knee. Both cost accuracy when the current is noisy
or the leakage still matters above breakdown. This module fits the current
itself, so that every point counts with its own weight, with one model of
both parts (common practice for a maximum-likelihood fit; the avalanche law
is the power law that defines the inverse-logarithmic-derivative breakdown,
Chmill et al., NIM A 845, 56, 2017)::

    I(V) = exp(a + b (V - Vbd)) + exp(c + k ln x + g x),   x = V - Vbd > 0
    I(V) = exp(a + b (V - Vbd)),                           V <= Vbd

The first term is the exponential leakage, the second a power law of exponent
k whose logarithmic derivative k/x + g carries a first-order correction g for
the triggering probability, which bends the curve near breakdown. Its inverse
logarithmic derivative x / (k + g x) crosses zero at Vbd, so the fitted Vbd is
the same quantity (the same definition) as the one of the derivative method.

The noise of a current meter is mostly relative, so the fit minimises the
squared residuals of ln I with equal weights (Gaussian relative noise is
Gaussian on ln I to first order), by Levenberg-Marquardt iterations run for
all curves at once; a curve stops iterating when its step in Vbd falls below
ten microvolts. The start values come from the derivative method. The one-sigma
statistical error is the (Vbd, Vbd) element of the inverse normal matrix times
the residual variance. The systematic part measures the model form: the fit
is repeated with a second-order bending term, ln I_av = c + k ln x + g x +
h x^2, and the part of the difference between the two breakdowns that the
statistics do not explain is kept (for nested models the variance of the
difference is the difference of the variances). On a strongly bent curve the
first-order model is biased by a few millivolts and the second-order one is
not; on curves the first-order model describes, the term is near zero. The
second-order model is not the default because its extra parameter costs
precision (and convergence) where leakage still matters above breakdown.
"""

from __future__ import annotations

import warnings
from typing import NamedTuple

import numpy as np

__all__ = ["JOINT_BELOW_V", "JOINT_MAX_ITERATIONS", "JOINT_SPAN_V", "JointFit", "fit_joint"]

#: The fit window reaches this far below the start value of the breakdown
#: voltage (the leakage is determined there), volt.
JOINT_BELOW_V = 3.0
#: ... and this far above it, volt.
JOINT_SPAN_V = 2.0
#: Most Levenberg-Marquardt iterations per curve.
JOINT_MAX_ITERATIONS = 40
#: A fitted breakdown further than this from its start value is not trusted, volt.
_MAX_SHIFT_V = 0.25


class JointFit(NamedTuple):
    """Result of :func:`fit_joint`, one entry per curve.

    Attributes
    ----------
    breakdown_v, breakdown_stat_err_v, breakdown_sys_err_v : ndarray
        Breakdown voltage and the statistical and systematic parts of its
        one-sigma error, volt.
    exponent : ndarray
        Power-law exponent k.
    leakage_current_a : ndarray
        Fitted leakage current at the breakdown voltage, ampere.
    leakage_slope_per_v : ndarray
        Logarithmic slope b of the leakage, 1/volt.
    fit_lo_v, fit_hi_v : ndarray
        Bias range fitted, volt.
    ok : ndarray of bool
        The fit converged to a plausible solution (else every value is NaN).
    """

    breakdown_v: np.ndarray
    breakdown_stat_err_v: np.ndarray
    breakdown_sys_err_v: np.ndarray
    exponent: np.ndarray
    leakage_current_a: np.ndarray
    leakage_slope_per_v: np.ndarray
    fit_lo_v: np.ndarray
    fit_hi_v: np.ndarray
    ok: np.ndarray


class _Window(NamedTuple):
    """Bias and ln I of every curve over its window (rows padded; mask 1 inside, 0 outside)."""

    bias_v: np.ndarray
    ln_current: np.ndarray
    mask: np.ndarray


class _Solution(NamedTuple):
    """Parameters after the iterations, their normal matrix and residual sum of squares."""

    params: np.ndarray
    normal: np.ndarray
    cost: np.ndarray
    converged: np.ndarray


def _window(grid, ln_i, start_v, below_v, above_v) -> _Window:
    n = ln_i.shape[1]
    lo = np.sum(grid < (start_v - below_v)[:, None], axis=1)  # searchsorted of every row
    hi = np.sum(grid <= (start_v + above_v)[:, None], axis=1)
    width = max(int(np.max(hi - lo, initial=1)), 1)
    cols = lo[:, None] + np.arange(width)[None, :]
    mask = (cols < hi[:, None]).astype(float)
    index = np.minimum(cols, n - 1)
    return _Window(np.take_along_axis(grid, index, axis=1), np.take_along_axis(ln_i, index, axis=1), mask)


def _solve(win: _Window, params, max_iterations) -> _Solution:
    """Levenberg-Marquardt iterations of every curve, compiled (numba).

    Each curve starts with damping 1e-3 (relative to the diagonal of J^T J),
    divides it by 5 after a step that lowers the cost and multiplies it by 10
    after one that does not; it has converged after an accepted step in the
    breakdown below ten microvolts, or when the damping passes 1e8. A curve
    that converged keeps the normal matrix of its last iteration (its final
    step moved it by less than ten microvolts). The residuals and normal
    equations of every trial are kept when the trial is accepted, so each
    iteration evaluates the model once.
    """
    from compensator.calibration.ivkernel import levenberg_marquardt  # numba: compiled on first use, then cached

    count = np.asarray(win.mask.sum(axis=1), dtype=np.int64)
    return _Solution(*levenberg_marquardt(np.ascontiguousarray(win.bias_v), np.ascontiguousarray(win.ln_current),
                                           count, np.ascontiguousarray(params, dtype=float), int(max_iterations)))


def _variance(sol: _Solution, mask):
    """Variance of the fitted breakdown: (J^T J)^-1 times the residual variance."""
    p = sol.params.shape[1]
    dof = np.maximum(mask.sum(axis=1) - p, 1)
    ok = np.all(np.isfinite(sol.normal), axis=(1, 2))
    normal = np.where(ok[:, None, None], sol.normal, np.eye(p))
    ok &= np.abs(np.linalg.det(normal)) > 0
    normal[~ok] = np.eye(p)
    unit = np.zeros((len(normal), p, 1))
    unit[:, 0] = 1.0
    first = np.linalg.solve(normal, unit)[:, 0, 0]  # element (0, 0) of the inverse
    return np.where(ok, first * sol.cost / dof, np.nan)


def fit_joint(bias_v, ln_current, breakdown_v, *, exponent, leakage_current_a, leakage_slope_per_v):
    """Refine breakdown voltages by a joint fit of leakage and avalanche current (see module docstring).

    Parameters
    ----------
    bias_v : ndarray, shape (n_curves, n_points)
        Bias of every curve, increasing, volt.
    ln_current : ndarray, shape (n_curves, n_points)
        Natural logarithm of the current (ampere).
    breakdown_v : ndarray, shape (n_curves,)
        Start values of the breakdown voltage, volt (NaN: not fitted).
    exponent : ndarray, shape (n_curves,)
        Start values of the power-law exponent (NaN: 2).
    leakage_current_a : ndarray, shape (n_curves,)
        Start values of the leakage current at breakdown, ampere (NaN: not fitted).
    leakage_slope_per_v : ndarray, shape (n_curves,)
        Start values of the leakage's logarithmic slope, 1/volt (NaN: not fitted).

    Returns
    -------
    JointFit
        Curves whose fit did not converge to a plausible solution have ``ok``
        False and NaN values.
    """
    bias_v = np.asarray(bias_v, dtype=float)
    ln_current = np.asarray(ln_current, dtype=float)
    start = np.asarray(breakdown_v, dtype=float)
    usable = np.isfinite(start) & np.isfinite(leakage_current_a) & (np.asarray(leakage_current_a) > 0) \
        & np.isfinite(leakage_slope_per_v)
    m = len(start)
    nan = np.full(m, np.nan)
    result = {name: nan.copy() for name in JointFit._fields if name != "ok"}
    ok = np.zeros(m, dtype=bool)
    rows = np.flatnonzero(usable)
    if rows.size:
        v0 = start[rows]
        k0 = np.clip(np.where(np.isfinite(exponent[rows]), exponent[rows], 2.0), 0.8, 6.0)
        la0 = np.log(np.asarray(leakage_current_a, dtype=float)[rows])
        b0 = np.asarray(leakage_slope_per_v, dtype=float)[rows]
        grid, ln_i = bias_v[rows], ln_current[rows]
        win = _window(grid, ln_i, v0, JOINT_BELOW_V, JOINT_SPAN_V)
        # ln A from the avalanche current (leakage removed) in the upper part of the window.
        xr = win.bias_v - v0[:, None]
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            aval = np.exp(win.ln_current) - np.exp(la0[:, None] + b0[:, None] * xr)
            pick = (win.mask > 0) & (xr > 0.3 * JOINT_SPAN_V) & (aval > 0)
            ln_a = np.log(np.where(pick, aval, 1.0)) - k0[:, None] * np.log(np.maximum(xr, 1e-6))
        with warnings.catch_warnings():  # rows without a usable point give NaN, and their fit fails
            warnings.simplefilter("ignore", RuntimeWarning)
            c0 = np.nanmedian(np.where(pick, ln_a, np.nan), axis=1)
        params = np.stack([v0, c0, k0, np.zeros_like(v0), la0, b0], axis=1)
        full = _solve(win, params, JOINT_MAX_ITERATIONS)
        bent = _solve(win, np.column_stack([full.params, np.zeros(len(v0))]), JOINT_MAX_ITERATIONS)
        var_full = _variance(full, win.mask)
        var_bent = _variance(bent, win.mask)
        vb, k = full.params[:, 0], full.params[:, 2]
        with np.errstate(invalid="ignore"):
            sys2 = np.maximum((bent.params[:, 0] - vb) ** 2 - np.maximum(var_bent - var_full, 0.0), 0.0)
            sys2 = np.where(bent.converged & (np.abs(bent.params[:, 0] - vb) <= _MAX_SHIFT_V), sys2, 0.0)
            good = (full.converged & np.isfinite(vb) & np.isfinite(var_full) & (var_full > 0)
                    & (np.abs(vb - v0) <= _MAX_SHIFT_V) & (k > 0.3) & (k < 10.0))
        sys2 = np.where(np.isfinite(sys2), sys2, 0.0)
        inside = win.mask > 0
        values = {
            "breakdown_v": vb, "breakdown_stat_err_v": np.sqrt(var_full), "breakdown_sys_err_v": np.sqrt(sys2),
            "exponent": k, "leakage_current_a": np.exp(full.params[:, 4]), "leakage_slope_per_v": full.params[:, 5],
            "fit_lo_v": win.bias_v[:, 0],
            "fit_hi_v": np.max(np.where(inside, win.bias_v, -np.inf), axis=1),
        }
        for name, value in values.items():
            result[name][rows] = np.where(good, value, np.nan)
        ok[rows] = good
    return JointFit(ok=ok, **result)
