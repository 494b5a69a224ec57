"""Least squares with standard errors that survive autocorrelated residuals.

Telemetry residuals are correlated in time (weather, slow supply drift), so
plain least-squares standard errors are far too small. The fit here uses the
heteroskedasticity- and autocorrelation-consistent covariance of Newey and
West (Econometrica 55, 703, 1987) with the Bartlett kernel. The truncation
lag is chosen from the data by the AR(1) plug-in rule of Andrews
(Econometrica 59, 817, 1991; formula quoted from memory), never shorter than
the fixed rule floor(4 (n/100)^(2/9)) (Newey and West, Rev. Econ. Stud. 61,
631, 1994): the fixed rule alone under-covers when the residuals stay
correlated over many rows, as telemetry residuals do.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy import stats

from compensator.errors import ModelError

__all__ = ["RobustFit", "newey_west_lag", "andrews_lag", "fit_hac"]


class RobustFit(NamedTuple):
    """Least-squares coefficients with autocorrelation-consistent errors.

    Attributes
    ----------
    coef : ndarray
        Coefficients, in the order of the design matrix's columns.
    se : ndarray
        Their standard errors (1 sigma).
    half_width : ndarray
        Half-width of the two-sided confidence interval at the requested level
        (Student t with ``dof`` degrees of freedom).
    dof : int
        Residual degrees of freedom (rows minus columns).
    lag : int
        Newey-West truncation lag, rows.
    residual_rms : float
        RMS of the residuals.
    rho : float
        Lag-one autocorrelation removed by the prewhitening (0 without it).
    """

    coef: np.ndarray
    se: np.ndarray
    half_width: np.ndarray
    dof: int
    lag: int
    residual_rms: float
    rho: float = 0.0


def newey_west_lag(rows: int) -> int:
    """Truncation lag floor(4 (n/100)^(2/9)) (Newey and West 1994).

    Parameters
    ----------
    rows : int
        Number of observations.
    """
    return int(np.floor(4.0 * (rows / 100.0) ** (2.0 / 9.0)))


def _whiten(a, *, rho: float):
    """Prais-Winsten transform: first row scaled by sqrt(1 - rho^2), then a_t - rho a_(t-1)."""
    out = np.array(a, dtype=float, copy=True)
    if rho == 0.0:
        return out
    out[1:] = a[1:] - rho * a[:-1]
    out[0] = a[0] * np.sqrt(1.0 - rho ** 2)
    return out


def andrews_lag(scores) -> int:
    """Bartlett-kernel lag from the AR(1) plug-in rule of Andrews (1991).

    Each column a of ``scores`` is fitted as AR(1) (coefficient rho_a,
    innovation variance s_a^2); then
    alpha = sum 4 rho^2 s^4 / ((1 - rho)^6 (1 + rho)^2) / sum s^4 / (1 - rho)^4
    and the bandwidth is 1.1447 (alpha n)^(1/3).

    Parameters
    ----------
    scores : array_like, shape (n, k)
        Regressor times residual, one column per coefficient of interest.
    """
    u = np.asarray(scores, dtype=float)
    n = u.shape[0]
    num = den = 0.0
    for col in u.T:
        a, b = col[:-1], col[1:]
        denom = float(np.dot(a, a))
        if denom <= 0:
            continue
        rho = float(np.clip(np.dot(a, b) / denom, -0.97, 0.97))
        s2 = float(np.mean((b - rho * a) ** 2))
        num += 4.0 * rho ** 2 * s2 ** 2 / ((1.0 - rho) ** 6 * (1.0 + rho) ** 2)
        den += s2 ** 2 / (1.0 - rho) ** 4
    if den <= 0:
        return 0
    return int(np.floor(1.1447 * (num / den * n) ** (1.0 / 3.0)))


def fit_hac(design, y, *, confidence: float = 0.95, lag: int | None = None, prewhiten: bool = True) -> RobustFit:
    """Ordinary least squares with Newey-West (Bartlett kernel) covariance.

    Parameters
    ----------
    design : array_like, shape (n, k)
        Design matrix (include a column of ones for an intercept). Rows in
        time order: the covariance weighs neighbouring rows.
    y : array_like, shape (n,)
        Observations.
    confidence : float
        Two-sided level of the reported interval, e.g. 0.95.
    lag : int, optional
        Truncation lag; default the larger of :func:`andrews_lag` (over the
        slope columns) and :func:`newey_west_lag`.
    prewhiten : bool
        First remove an AR(1) from the residuals by feasible generalised
        least squares (Prais and Winsten 1954, iterated), then apply the
        Newey-West covariance to what is left.

    Returns
    -------
    RobustFit

    Raises
    ------
    ModelError
        Fewer rows than columns plus two, or a rank-deficient design.
    """
    x = np.asarray(design, dtype=float)
    y = np.asarray(y, dtype=float)
    n, k = x.shape
    if n < k + 2:
        raise ModelError(f"{n} observations cannot fit {k} coefficients with an error estimate", key="design")
    xtx = x.T @ x
    if np.linalg.matrix_rank(xtx) < k:
        raise ModelError("the regressors are linearly dependent", key="design")
    rho = 0.0
    coef = np.linalg.solve(xtx, x.T @ y)
    if prewhiten:
        for _ in range(20):
            resid = y - x @ coef
            new_rho = float(np.clip(np.dot(resid[1:], resid[:-1]) / np.dot(resid[:-1], resid[:-1]), -0.95, 0.95)) \
                if np.dot(resid[:-1], resid[:-1]) > 0 else 0.0
            x_w, y_w = _whiten(x, rho=new_rho), _whiten(y, rho=new_rho)
            coef = np.linalg.lstsq(x_w, y_w, rcond=None)[0]
            converged = abs(new_rho - rho) < 1e-6
            rho = new_rho
            if converged:
                break
    x, y = _whiten(x, rho=rho), _whiten(y, rho=rho)
    bread = np.linalg.inv(x.T @ x)
    resid = y - x @ coef
    scores = x * resid[:, None]
    if lag is None:
        slopes = scores[:, np.ptp(x, axis=0) > 0] if k > 1 else scores
        lag = max(newey_west_lag(n), andrews_lag(slopes))
    lag = max(0, min(int(lag), n // 2))
    meat = scores.T @ scores
    for l in range(1, lag + 1):
        weight = 1.0 - l / (lag + 1.0)
        cross = scores[l:].T @ scores[:-l]
        meat += weight * (cross + cross.T)
    cov = bread @ meat @ bread * (n / (n - k))   # small-sample scaling
    se = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    dof = n - k
    half = stats.t.ppf(0.5 + confidence / 2.0, dof) * se
    return RobustFit(coef, se, half, dof, lag, float(np.sqrt(np.mean(resid ** 2))), float(rho))
