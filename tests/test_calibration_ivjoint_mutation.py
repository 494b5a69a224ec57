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
