"""The compiled inner loop of the joint I-V fit (:mod:`compensator.calibration.ivjoint`).

numba compiles these functions on first use and caches the machine code
beside this file. numpy alone, vectorised over curves, reached about 2,000
curves per CPU second for the default I-V method, short of the 5,000 curves/s
target (``tools/bench/bench_calibration.py``); per curve and per point, the
compiled loop skips the avalanche term below breakdown and keeps no
temporaries. The iterations are those of the numpy version they replace,
point for point (results equal to about 1e-14 V).
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["levenberg_marquardt"]

#: Parameters of the first-order model (a seventh, the second-order bending h, is optional).
_N_PARAMS = 6


@numba.njit(cache=True, error_model="numpy")
def _normal_equations(bias_v, ln_current, count, params, a, g):  # pragma: no cover - compiled
    """Fill the normal matrix ``a`` = J^T J and gradient ``g`` = J^T r of one curve; return its cost r^T r.

    J holds d ln I / d(Vbd, c, k, g, a, b[, h]) at the first ``count`` points
    (the residual r = ln I - ln I_model; its derivative is minus J).
    """
    p = params.shape[0]
    vb, c, k, g1, la, b = params[0], params[1], params[2], params[3], params[4], params[5]
    h = params[6] if p > _N_PARAMS else 0.0
    jac = np.empty(p)
    a[:, :] = 0.0
    g[:] = 0.0
    cost = 0.0
    for j in range(count):
        xr = bias_v[j] - vb
        if xr <= 0:  # leakage alone: ln I = a + b (V - Vbd), J = (0, 0, 0, 0, 1, V - Vbd[, 0])
            r = ln_current[j] - (la + b * xr)
            cost += r * r
            g[4] += r
            g[5] += r * xr
            a[4, 4] += 1.0
            a[4, 5] += xr
            a[5, 5] += xr * xr
            continue
        x = xr
        lx = np.log(x)
        leak = np.exp(la + b * xr)
        bend = g1 + h * x
        aval = np.exp(c + k * lx + bend * x)
        total = leak + aval
        r = ln_current[j] - np.log(total)
        cost += r * r
        fa = aval / total  # the avalanche's share of the current
        fl = 1.0 - fa  # the leakage's share
        jac[0] = -fa * (k / x + g1 + 2.0 * h * x)  # d ln I_av / dx = k/x + g + 2 h x
        jac[1] = fa
        jac[2] = fa * lx
        jac[3] = fa * x
        jac[4] = fl
        jac[5] = fl * xr
        if p > _N_PARAMS:
            jac[6] = fa * x * x
        for u in range(p):
            g[u] += jac[u] * r
            for v in range(u, p):
                a[u, v] += jac[u] * jac[v]
    for u in range(p):
        for v in range(u):
            a[u, v] = a[v, u]
    return cost


@numba.njit(cache=True, error_model="numpy")
def _linear_solve(lhs, rhs):  # pragma: no cover - compiled
    """Solve ``lhs x = rhs`` by Gaussian elimination with partial pivoting (``lhs`` and ``rhs`` overwritten)."""
    n = rhs.shape[0]
    for col in range(n):
        pivot = col
        for row in range(col + 1, n):
            if abs(lhs[row, col]) > abs(lhs[pivot, col]):
                pivot = row
        if pivot != col:
            for v in range(n):
                lhs[col, v], lhs[pivot, v] = lhs[pivot, v], lhs[col, v]
            rhs[col], rhs[pivot] = rhs[pivot], rhs[col]
        for row in range(col + 1, n):
            factor = lhs[row, col] / lhs[col, col]
            for v in range(col, n):
                lhs[row, v] -= factor * lhs[col, v]
            rhs[row] -= factor * rhs[col]
    for row in range(n - 1, -1, -1):
        acc = rhs[row]
        for v in range(row + 1, n):
            acc -= lhs[row, v] * rhs[v]
        rhs[row] = acc / lhs[row, row]
    return rhs


@numba.njit(cache=True, error_model="numpy")
def levenberg_marquardt(bias_v, ln_current, count, params, max_iterations):  # pragma: no cover - compiled
    """Levenberg-Marquardt iterations of every curve (see :func:`compensator.calibration.ivjoint._solve`).

    Parameters
    ----------
    bias_v, ln_current : ndarray, shape (n_curves, n_points)
        Each curve's window, volt and ln(ampere); the first ``count`` points are used.
    count : ndarray of int64, shape (n_curves,)
        Points in each window.
    params : ndarray, shape (n_curves, 6 or 7)
        Start values (Vbd, c, k, g, a, b[, h]).
    max_iterations : int

    Returns
    -------
    params, normal, cost, converged : ndarray
        Parameters, normal matrix J^T J, residual sum of squares and convergence of every curve.
    """
    m, p = params.shape
    out = params.copy()
    normal = np.full((m, p, p), np.nan)
    final_cost = np.full(m, np.nan)
    converged = np.zeros(m, dtype=np.bool_)
    a, g = np.empty((p, p)), np.empty(p)
    a_t, g_t = np.empty((p, p)), np.empty(p)
    lhs, trial = np.empty((p, p)), np.empty(p)
    for i in range(m):
        theta = out[i]
        damping = 1e-3
        cost = _normal_equations(bias_v[i], ln_current[i], count[i], theta, a, g)
        for _ in range(max_iterations):
            normal[i] = a
            finite = True
            for u in range(p):
                finite = finite and np.isfinite(g[u])
                for v in range(p):
                    lhs[u, v] = a[u, v]
                lhs[u, u] += damping * max(a[u, u], 1e-12)
                for v in range(p):
                    finite = finite and np.isfinite(lhs[u, v])
            if not finite:  # a step of zero: the curve stops here, unconverged unless the damping ran out
                damping *= 10.0
                converged[i] = damping > 1e8
                final_cost[i] = cost
                break
            step = _linear_solve(lhs, g.copy())
            for u in range(p):
                trial[u] = theta[u] + step[u]
            cost_t = _normal_equations(bias_v[i], ln_current[i], count[i], trial, a_t, g_t)
            better = np.isfinite(cost_t) and cost_t < cost
            if better:
                theta[:] = trial
                a[:, :] = a_t
                g[:] = g_t
                cost = cost_t
                damping *= 0.2
            else:
                damping *= 10.0
            final_cost[i] = cost
            # Converged: an accepted step below ten microvolts, or no step that lowers the cost any more.
            if (better and abs(step[0]) < 1e-5) or damping > 1e8:
                converged[i] = True
                break
        else:  # out of iterations: the normal matrix where they stopped
            normal[i] = a
            final_cost[i] = cost
    return out, normal, final_cost, converged
