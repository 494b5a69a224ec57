"""calibration.ivjoint: the joint fit's reported errors and its acceptance bounds.

Checks added for mutation testing, against scipy.optimize.least_squares (MINPACK's Levenberg-Marquardt) with
the covariance from its Jacobian, or the generating model (compensator.calibration.synthetic).
"""

import numpy as np
import pytest
from iv_model import joint_model_residuals as _residuals
from scipy.optimize import least_squares

from compensator.calibration.ivjoint import fit_joint
from compensator.calibration.synthetic import iv_current_a, leakage_at_crossing_a, simulate_iv

# No numpy RuntimeWarning may reach the user (see tests/test_calibration_iv_mutation.py).
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

GRID_V = np.round(np.arange(20.0, 31.0001, 0.05), 4)


def _scipy_fit(theta, bias, ln_i):
    """Optimum and variance of the breakdown: (J^T J)^-1 [0, 0] times the residual variance (n - p dof)."""
    ref = least_squares(_residuals, theta, method="lm", xtol=1e-12, ftol=1e-12, args=(bias, ln_i))
    var = np.linalg.inv(ref.jac.T @ ref.jac)[0, 0] * np.sum(ref.fun ** 2) / (bias.size - theta.size)
    return ref.x, var


def test_joint_fit_errors_against_scipy_least_squares():
    # The joint fit's statistical error is the (Vbd, Vbd) element of the inverse normal matrix times the
    # residual variance with n - 6 degrees of freedom; the systematic part is the shift of the breakdown when a
    # second-order bending term h x^2 is added, less the part the statistics explain: sqrt(max(d^2 -
    # max(var_bent - var, 0), 0)). Recomputed with scipy.optimize.least_squares on the window the module
    # docstring states (every grid point from 3 V below to 2 V above the start value), from the same start
    # (the first-order optimum with h = 0 for the second fit). Strongly bent curves (triggering-probability scale
    # 0.5 V) with leakage and 0.1 % noise, seeded, where both fits converge and the bend exceeds the statistics. The
    # optimum agrees to the convergence step (ten microvolts for Vbd, a few tenths of a millivolt for the
    # second-order model in its flat valley, tests/test_calibration_iv.py), so errors agree to 1 % and the
    # systematic part to 0.5 mV.
    rng = np.random.default_rng(11)
    truth = np.array([24.2, 24.5, 24.8])
    leak = leakage_at_crossing_a(0.1, exponent=2.0, leakage_slope_per_v=0.5)
    current = simulate_iv(rng, GRID_V, truth, leakage_a=leak, leakage_slope_per_v=0.5, relative_noise=0.001,
                          geiger_scale_v=0.5)
    start = truth + 0.01
    fit = fit_joint(np.broadcast_to(GRID_V, current.shape), np.log(current), start, exponent=np.full(3, 2.0),
                    leakage_current_a=np.full(3, leak), leakage_slope_per_v=np.full(3, 0.5))
    assert fit.ok.all()
    for i in range(3):
        inside = (GRID_V >= start[i] - 3.0) & (GRID_V <= start[i] + 2.0)
        bias, ln_i = GRID_V[inside], np.log(current[i, inside])
        assert (fit.fit_lo_v[i], fit.fit_hi_v[i]) == (bias[0], bias[-1])
        x_full, var_full = _scipy_fit(np.array([fit.breakdown_v[i], np.log(1e-6), fit.exponent[i], 0.0,
                                                np.log(fit.leakage_current_a[i]), fit.leakage_slope_per_v[i]]),
                                      bias, ln_i)
        assert fit.breakdown_v[i] == pytest.approx(x_full[0], abs=2e-5)
        assert fit.breakdown_stat_err_v[i] == pytest.approx(np.sqrt(var_full), rel=0.01)
        assert (fit.exponent[i], fit.leakage_slope_per_v[i]) == pytest.approx((x_full[2], x_full[5]), abs=1e-3)
        assert fit.leakage_current_a[i] == pytest.approx(np.exp(x_full[4]), rel=1e-3, abs=0)
        x_bent, var_bent = _scipy_fit(np.append(x_full, 0.0), bias, ln_i)
        d = x_bent[0] - x_full[0]
        sys = np.sqrt(max(d * d - max(var_bent - var_full, 0.0), 0.0))
        assert fit.breakdown_sys_err_v[i] == pytest.approx(sys, abs=5e-4)
    assert np.all(fit.breakdown_sys_err_v > 0.01)  # the bend is resolved: 15 to 16 mV against 1.1 mV


def test_joint_fit_acceptance_bounds_and_fit_range():
    # A fit is kept only within 0.25 V of its start value and with an exponent between 0.3 and 10: curves of the
    # model itself (iv_current_a, with a seeded 1e-4 noise in ln I so that the residual variance is not zero)
    # started 0.24 V and 0.26 V from their breakdown, and with exponents 0.32 and 0.28, each fitted back to
    # within a millivolt where kept. A fifth curve, breakdown 21 V, has its window cut by the start of the
    # sweep (20 V to 23 V, 61 points, padded to the others' 101): its fit range ends at 23 V, not at the last
    # padded point.
    rng = np.random.default_rng(0)
    cases = [(24.5, 0.24, 2.0), (24.5, -0.26, 2.0), (24.5, 0.02, 0.32), (24.5, 0.02, 0.28), (21.0, 0.0, 2.0)]
    ln_i = np.array([np.log(iv_current_a(GRID_V, vbd, exponent=k, leakage_a=1e-10, leakage_slope_per_v=0.4))
                     for vbd, _, k in cases]) + 1e-4 * rng.standard_normal((len(cases), GRID_V.size))
    start = np.array([vbd + off for vbd, off, _ in cases])
    fit = fit_joint(np.broadcast_to(GRID_V, ln_i.shape), ln_i, start, exponent=np.array([k for *_, k in cases]),
                    leakage_current_a=np.full(len(cases), 1e-10), leakage_slope_per_v=np.full(len(cases), 0.4))
    assert fit.ok.tolist() == [True, False, True, False, True]
    assert fit.breakdown_v[[0, 2, 4]] == pytest.approx([24.5, 24.5, 21.0], abs=1e-3)
    assert fit.exponent[2] == pytest.approx(0.32, abs=0.01)
    assert np.isnan(fit.breakdown_v[[1, 3]]).all() and np.isnan(fit.exponent[[1, 3]]).all()
    assert (fit.fit_lo_v[4], fit.fit_hi_v[4]) == (20.0, 23.0)
    assert (fit.fit_lo_v[0], fit.fit_hi_v[0]) == pytest.approx((21.75, 26.7))


def _start_curves():
    """Bias rows, ln I and start values of seven curves that reach each rule of the joint fit's start (seeded)."""
    rng = np.random.default_rng(21)
    grid = np.tile(GRID_V, (7, 1))
    grid[4] = np.round(GRID_V - 24.0, 4)  # -4 V to 7 V: a point lies exactly 0.6 V above a start of 0 V
    truth = np.array([24.5, 24.5, 24.5, 21.0, 0.0, 24.5, 24.5])
    ln_i = np.log(iv_current_a(grid, truth[:, None], leakage_a=1e-10, leakage_slope_per_v=0.4))
    ln_i += 1e-3 * rng.standard_normal(ln_i.shape)
    start = truth + np.array([0.02, -0.02, 0.01, 0.0, 0.0, 0.01, 6.2])  # the last: nothing 0.6 V above 30.7 V
    exponent = np.array([0.5, 7.0, np.nan, 2.0, 2.0, 2.0, 2.0])
    leak_a, slope = np.full(7, 1.1e-10), np.full(7, 0.35)
    # row 5: one reading drops to the leakage start exactly (its avalanche part is 0, not used) 1.5 V above it
    j = int(np.argmin(np.abs(grid[5] - start[5] - 1.5)))
    ln_i[5, j] = np.log(leak_a[5]) + slope[5] * (grid[5, j] - start[5])
    return grid, ln_i, start, exponent, leak_a, slope


def test_joint_fit_start_values_by_hand(monkeypatch):
    # The start values the module docstring and fit_joint state: Vbd from the derivative method, the exponent
    # clipped to [0.8, 6] (2 where not given), the leakage's a and b as given, the bending term 0, and ln A the
    # median, over the window's points more than 0.3 x JOINT_SPAN_V = 0.6 V above the start whose avalanche
    # current I - exp(a + b x) is positive, of ln(I - exp(a + b x)) - k ln x (x = V - Vbd). Rebuilt here with
    # numpy per row: row 3's window is cut by the start of the sweep (its padding is not used), row 4 has a
    # point exactly 0.6 V above its start (not used), row 5 a reading equal to the leakage (not used), row 6 no
    # point 0.6 V above its start (no ln A: NaN, and its fit fails without a warning).
    import compensator.calibration.ivjoint as ivjoint

    starts = []
    real = ivjoint._solve

    def spy(win, params, max_iterations):
        starts.append(params.copy())
        return real(win, params, max_iterations)

    monkeypatch.setattr(ivjoint, "_solve", spy)
    grid, ln_i, start, exponent, leak_a, slope = _start_curves()
    fit = fit_joint(grid, ln_i, start, exponent=exponent, leakage_current_a=leak_a, leakage_slope_per_v=slope)
    assert fit.ok.dtype == np.bool_ and fit.ok.tolist() == [True] * 6 + [False]
    params = starts[0]
    assert params.shape == (7, 6)
    np.testing.assert_array_equal(params[:, 2], [0.8, 6.0, 2.0, 2.0, 2.0, 2.0, 2.0])
    np.testing.assert_array_equal(params[:, [0, 3, 4, 5]], np.column_stack([start, np.zeros(7), np.log(leak_a),
                                                                              slope]))
    for i in range(7):
        inside = (grid[i] >= start[i] - 3.0) & (grid[i] <= start[i] + 2.0)
        x = grid[i, inside] - start[i]
        aval = np.exp(ln_i[i, inside]) - np.exp(np.log(leak_a[i]) + slope[i] * x)
        pick = (x > 0.6) & (aval > 0)
        assert np.sum(x == 0.6) == (i == 4) and np.sum(aval[x > 0.6] == 0.0) == (i == 5), i
        if i == 6:
            assert not pick.any() and np.isnan(params[i, 1])
            continue
        expected = np.median(np.log(aval[pick]) - params[i, 2] * np.log(x[pick]))
        assert params[i, 1] == pytest.approx(expected, rel=1e-12, abs=0), i


def test_joint_fit_refuses_starts_without_a_positive_leakage():
    # A curve is fitted only with a finite start breakdown and a finite, positive leakage current and slope
    # (fit_joint's docstring: NaN is not fitted); the others are returned NaN with ok False, without a numpy
    # warning (the log of a zero or negative current is never taken), while the good curve beside them is fitted.
    grid, ln_i, start, _, _, _ = _start_curves()
    rows = [0] * 6
    fit = fit_joint(grid[rows], ln_i[rows], [24.52, np.nan, 24.52, 24.52, 24.52, 24.52],
                    exponent=np.full(6, 2.0), leakage_current_a=np.array([1e-10, 1e-10, 0.0, -1e-12, np.nan, 1e-10]),
                    leakage_slope_per_v=np.array([0.4, 0.4, 0.4, 0.4, 0.4, np.nan]))
    assert fit.ok.dtype == np.bool_ and fit.ok.tolist() == [True, False, False, False, False, False]
    assert fit.breakdown_v[0] == pytest.approx(24.5, abs=2e-3)
    for name in fit._fields[:-1]:
        assert np.isnan(getattr(fit, name)[1:]).all(), name


def test_variance_of_the_breakdown_by_hand():
    # The statistical variance: element (0, 0) of the inverse normal matrix (numpy.linalg.inv) times the residual
    # sum of squares over points - parameters (at least 1); NaN where the normal matrix is not finite or is
    # singular. Row 1 has 7 points for 6 parameters (1 degree of freedom) and a normal matrix of determinant
    # below 1; row 2 a NaN entry; row 3 an exactly singular matrix.
    from compensator.calibration.ivjoint import _Solution, _variance

    rng = np.random.default_rng(1)
    jac = rng.standard_normal((2, 12, 6))
    normal = np.concatenate([np.einsum("mki,mkj->mij", jac, jac), np.zeros((2, 6, 6))])
    normal[1] *= 0.01
    normal[2] = np.eye(6)
    normal[2, 3, 3] = np.nan
    normal[3] = np.diag([1.0, 2.0, 3.0, 4.0, 5.0, 0.0])
    assert 0 < np.linalg.det(normal[1]) < 1
    mask = np.zeros((4, 30))
    mask[0, :20] = mask[1, :7] = mask[2, :20] = mask[3, :20] = 1.0
    cost = np.array([2.0, 0.5, 1.0, 1.0])
    sol = _Solution(params=np.zeros((4, 6)), normal=normal.copy(), cost=cost, converged=np.ones(4, dtype=bool))
    var = _variance(sol, mask)
    assert var[0] == pytest.approx(np.linalg.inv(normal[0])[0, 0] * 2.0 / 14, rel=1e-12)
    assert var[1] == pytest.approx(np.linalg.inv(normal[1])[0, 0] * 0.5 / 1, rel=1e-9)
    assert np.isnan(var[2:]).all()


def test_fit_window_rows_padded_to_the_longest():
    # The window of each curve: the grid points from below_v under to above_v over its start, rows padded to
    # the longest (with the next points of the grid, or its last, masked out); a window of one point stays one
    # column wide.
    from compensator.calibration.ivjoint import _window

    grid = np.tile(np.round(np.arange(0.0, 1.0001, 0.1), 4), (2, 1))
    ln_i = grid * 10.0
    win = _window(grid, ln_i, np.array([0.3, 0.9]), 0.15, 0.2)
    np.testing.assert_array_equal(win.mask, [[1, 1, 1, 1], [1, 1, 1, 0]])
    np.testing.assert_array_equal(win.bias_v, [[0.2, 0.3, 0.4, 0.5], [0.8, 0.9, 1.0, 1.0]])
    np.testing.assert_array_equal(win.ln_current, win.bias_v * 10.0)
    one = _window(grid, ln_i, np.array([0.3, 0.5]), 0.05, 0.05)
    np.testing.assert_array_equal(one.mask, [[1], [1]])
    np.testing.assert_array_equal(one.bias_v, [[0.3], [0.5]])
