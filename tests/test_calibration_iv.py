"""Breakdown voltage from I-V curves: truth recovery, published properties, failure reasons."""

from __future__ import annotations

import numpy as np
import pytest

from compensator.calibration.iv import (
    DEFINITIONS,
    MAX_GRID_POINTS,
    METHODS,
    choose_window,
    decimate,
    estimate_log_noise,
    find_breakdown,
)
from compensator.calibration.synthetic import iv_current_a, leakage_at_crossing_a, simulate_iv
from compensator.errors import ModelError

# No numpy RuntimeWarning may reach the user (see tests/test_calibration_iv_mutation.py).
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

GRID_V = np.round(np.arange(20.0, 31.0001, 0.05), 4)


def test_inverse_log_derivative_pure_power_law_is_exact():
    # Chmill et al., NIM A 845, 56, 2017: for I ~ (V - Vbd)^k the inverse
    # logarithmic derivative is (V - Vbd)/k, a line through Vbd with slope 1/k.
    # Noise-free power law over a negligible floor: breakdown and exponent come back,
    # exact up to the discretisation of the smoothed derivative (a tenth of the 50 mV step).
    for k in (1.5, 2.0, 3.0):
        current = iv_current_a(GRID_V, 24.5, exponent=k, leakage_a=1e-16, leakage_slope_per_v=0.0)
        r = find_breakdown(GRID_V, current)
        assert r.ok.all(), r.reason
        assert r.breakdown_v[0] == pytest.approx(24.5, abs=0.005)
        assert r.exponent[0] == pytest.approx(k, rel=0.02)


def test_log_derivative_peak_matches_analytic_maximum():
    # For I = I0 + A x^k (x = V - Vbd) the maximum of d ln I/dV lies at
    # x* = ((k - 1) I0 / A)^(1/k) (set the derivative of A k x^(k-1)/(I0 + A x^k)
    # to zero; derived here). Bonanno et al. 2014 take this peak as breakdown.
    grid = np.round(np.arange(22.0, 28.0001, 0.01), 4)
    i0, a, k = 1e-8, 1e-6, 2.0
    current = iv_current_a(grid, 24.5, exponent=k, avalanche_a=a, leakage_a=i0, leakage_slope_per_v=0.0)
    r = find_breakdown(grid, current, "log-derivative-peak")
    # the vertex of a parabola through the smoothed derivative on a 10 mV grid: within 2 mV (1.7 mV here)
    assert r.breakdown_v[0] == pytest.approx(24.5 + ((k - 1) * i0 / a) ** (1 / k), abs=0.002)
    # the peak methods' systematic part is half a grid step; the fit spans the vertex +- 2 to 6 points
    assert r.breakdown_sys_err_v[0] == pytest.approx(0.005, rel=1e-9)
    assert 4 <= round((r.fit_hi_v[0] - r.fit_lo_v[0]) / 0.01) <= 12


@pytest.mark.parametrize("k", [2.5, 3.0])
def test_second_derivative_matches_dense_numerical_maximum(k):
    # The maximum of d2 ln I/dV2, computed here by dense central differences (numpy.gradient)
    # on the noise-free model (k > 2 so that the second derivative is continuous at breakdown).
    grid = np.round(np.arange(22.0, 28.0001, 0.01), 4)
    kw = dict(exponent=k, avalanche_a=1e-6, leakage_a=1e-8, leakage_slope_per_v=0.0)
    fine = np.linspace(24.0, 25.5, 150001)
    d2 = np.gradient(np.gradient(np.log(iv_current_a(fine, 24.5, **kw)), fine), fine)
    expected = fine[np.argmax(d2)]
    r = find_breakdown(grid, iv_current_a(grid, 24.5, **kw), "second-derivative")
    assert r.ok.all()
    # within 1.5 mV on a 10 mV grid (1.2 mV at k = 2.5, 0.3 mV at k = 3)
    assert r.breakdown_v[0] == pytest.approx(expected, abs=0.0015)
    assert r.breakdown_sys_err_v[0] == pytest.approx(0.005, rel=1e-9)


@pytest.mark.parametrize("joint_fit, geiger_scale_v, relative_noise, median_mv, p90_mv", [
    # Median and 90th percentile of |error| over 200 seeded curves (this seed: the figures of
    # tools/bench/bench_calibration.py with about 25 % margin for the sample): the method's known
    # error. With the joint fit (default) the error at 2 % noise is within a few times the
    # Cramer-Rao bound the benchmark prints; the triggering-probability bend of 0.8 V leaves
    # about 3 mV, the limit of the first-order bending term g of the model.
    (True, None, 0.001, 0.1, 0.3), (True, 0.8, 0.001, 3.5, 4.2), (True, 2.0, 0.001, 0.7, 1.4),
    (True, None, 0.005, 0.25, 0.6), (True, 0.8, 0.005, 3.5, 4.5), (True, 2.0, 0.005, 0.8, 1.7),
    (True, None, 0.02, 0.7, 2.0), (True, 0.8, 0.02, 3.5, 6.2), (True, 2.0, 0.02, 1.6, 3.8),
    # The derivative method alone (joint_fit=False).
    (False, None, 0.001, 5.7, 8.5), (False, 0.8, 0.001, 3.8, 4.9), (False, 2.0, 0.001, 0.8, 1.9),
    (False, None, 0.005, 5.4, 9.3), (False, 0.8, 0.005, 5.1, 9.5), (False, 2.0, 0.005, 2.6, 5.8),
    (False, None, 0.02, 7.0, 18.2), (False, 0.8, 0.02, 17.2, 32.6), (False, 2.0, 0.02, 12.1, 25.6),
])
def test_default_method_recovers_truth(joint_fit, geiger_scale_v, relative_noise, median_mv, p90_mv):
    # Truth recovery on seeded synthetic curves (known truth), including curves that are
    # not pure power laws (triggering-probability factor).
    rng = np.random.default_rng(7)
    truth = rng.uniform(24.0, 25.0, 200)
    current = simulate_iv(rng, GRID_V, truth, geiger_scale_v=geiger_scale_v, relative_noise=relative_noise)
    r = find_breakdown(GRID_V, current, joint_fit=joint_fit)
    assert r.ok.all()
    assert r.joint_fit.all() == joint_fit and r.joint_fit.any() == joint_fit
    error_mv = np.abs(1e3 * (r.breakdown_v - truth))
    assert np.median(error_mv) <= median_mv
    assert np.percentile(error_mv, 90) <= p90_mv


def test_joint_fit_reaches_the_target_where_leakage_crosses_late_in_noise():
    # Leakage equal to the avalanche current 0.3 V above breakdown, 1 % current noise: the
    # derivative method alone errs by about 20 mV (median |error|); the joint fit of leakage and
    # avalanche current by 4.4 mV, near the Cramer-Rao bound of 3.5 mV (1 sigma, computed in
    # tools/bench/bench_calibration.py from the Fisher information of the generating model,
    # which knows the model form). About 68 % of the errors lie within the reported one sigma.
    rng = np.random.default_rng(3)
    truth = rng.uniform(24.0, 25.0, 300)
    leak = leakage_at_crossing_a(0.3, exponent=2.0, leakage_slope_per_v=0.5)
    current = simulate_iv(rng, GRID_V, truth, leakage_a=leak, leakage_slope_per_v=0.5, relative_noise=0.01)
    joint = find_breakdown(GRID_V, current)
    plain = find_breakdown(GRID_V, current, joint_fit=False)
    error_mv = np.abs(1e3 * (joint.breakdown_v - truth))
    assert np.median(error_mv) <= 5.0 and np.percentile(error_mv, 90) <= 12.0
    assert np.median(np.abs(1e3 * (plain.breakdown_v - truth))) >= 15.0
    assert 0.6 <= np.mean(error_mv <= 1e3 * joint.breakdown_err_v) <= 0.78
    assert np.median(joint.leakage_slope_per_v) == pytest.approx(0.5, abs=0.02)


def test_joint_fit_is_exact_on_its_model_from_a_poor_start():
    # Noise-free exponential leakage plus power law (the model of the joint fit with g = 0):
    # from start values 40 mV off, k 20 % off and the leakage a factor 2 off, the fit returns
    # the generating parameters (iv_current_a, an independent implementation of the model).
    from compensator.calibration.ivjoint import fit_joint

    grid = np.broadcast_to(GRID_V, (3, GRID_V.size))
    truth = np.array([24.3, 24.6, 24.9])
    leak = leakage_at_crossing_a(0.2, exponent=2.5, leakage_slope_per_v=0.4)
    current = iv_current_a(GRID_V[None, :], truth[:, None], exponent=2.5, leakage_a=leak, leakage_slope_per_v=0.4)
    fit = fit_joint(grid, np.log(current), truth + np.array([0.04, -0.04, 0.03]), exponent=np.full(3, 2.0),
                    leakage_current_a=np.full(3, 2 * leak), leakage_slope_per_v=np.full(3, 0.3))
    assert fit.ok.all()
    np.testing.assert_allclose(fit.breakdown_v, truth, atol=1e-5)
    np.testing.assert_allclose(fit.exponent, 2.5, rtol=1e-4)
    np.testing.assert_allclose(fit.leakage_current_a, leak, rtol=1e-3)
    np.testing.assert_allclose(fit.leakage_slope_per_v, 0.4, rtol=1e-3)
    assert np.all(fit.breakdown_stat_err_v < 1e-5)
    # A start value without leakage is not fitted (ok False, NaN), the others are unaffected.
    nan_start = fit_joint(grid, np.log(current), truth, exponent=np.full(3, 2.0),
                          leakage_current_a=np.array([leak, np.nan, leak]), leakage_slope_per_v=np.full(3, 0.4))
    assert nan_start.ok.tolist() == [True, False, True] and np.isnan(nan_start.breakdown_v[1])


def test_joint_fit_finds_the_least_squares_optimum_of_scipy():
    # The compiled Levenberg-Marquardt loop against scipy.optimize.least_squares (MINPACK's LM) on the same
    # model and window, from the same start, on noisy bent curves with leakage: the same optimum, to the
    # convergence tolerance of ten microvolts; the second-order model (the systematic part) likewise.
    from scipy.optimize import least_squares

    from compensator.calibration.ivjoint import _solve, _window

    rng = np.random.default_rng(11)
    truth = np.array([24.2, 24.5, 24.8, 24.4])
    leak = leakage_at_crossing_a(0.1, exponent=2.0, leakage_slope_per_v=0.5)
    current = simulate_iv(rng, GRID_V, truth, leakage_a=leak, leakage_slope_per_v=0.5, relative_noise=0.01,
                          geiger_scale_v=1.0)
    win = _window(np.broadcast_to(GRID_V, current.shape), np.log(current), truth + 0.01, 3.0, 2.0)
    start = np.column_stack([truth + 0.01, np.full(4, np.log(1e-6)), np.full(4, 2.0), np.zeros(4),
                             np.full(4, np.log(leak)), np.full(4, 0.5)])

    from iv_model import joint_model_residuals as residuals

    # The second-order model's optimum lies in a long flat valley, where a step below ten microvolts may stop
    # short of it by a few tenths of a millivolt (at a cost a few parts per million above the optimum).
    for params, tol_v, rel in ((start, 2e-5, 1e-6), (np.column_stack([start, np.zeros(4)]), 5e-4, 1e-4)):
        ours = _solve(win, params, 200)
        assert ours.converged.all()
        for i in range(4):
            n = int(win.mask[i].sum())
            ref = least_squares(residuals, params[i], method="lm", xtol=1e-12, ftol=1e-12,
                                args=(win.bias_v[i, :n], win.ln_current[i, :n]))
            assert ours.params[i, 0] == pytest.approx(ref.x[0], abs=tol_v)
            assert 2 * ref.cost * (1 - 1e-9) <= ours.cost[i] <= 2 * ref.cost * (1 + rel)  # scipy's is half the sum
            if params.shape[1] == 7:
                continue
            assert ours.params[i, 2] == pytest.approx(ref.x[2], abs=1e-3)  # the exponent k
            assert ours.params[i, 4] == pytest.approx(ref.x[4], abs=1e-3)  # ln of the leakage at breakdown


@pytest.mark.parametrize("crossing_v", [0.05, 0.1, 0.2, 0.3])
@pytest.mark.parametrize("k", [1.5, 2.0, 3.0])
def test_leakage_subtraction_is_exact_on_exponential_plus_power_law(crossing_v, k):
    # I = I_leak exp(s (V - Vbd)) + A (V - Vbd)^k: after the fitted exponential is removed the
    # inverse log-derivative of the rest is (V - Vbd)/k exactly (Chmill et al., NIM A 845, 56,
    # 2017), so breakdown, exponent, leakage slope and leakage at breakdown come back to the
    # precision of the smoothed derivative on a 10 mV grid (0.1 mV, 0.1 %).
    grid = np.round(np.arange(20.0, 31.0001, 0.01), 4)
    leak = leakage_at_crossing_a(crossing_v, exponent=k, leakage_slope_per_v=0.5)
    r = find_breakdown(grid, iv_current_a(grid, 24.5, exponent=k, leakage_a=leak, leakage_slope_per_v=0.5))
    assert r.ok.all(), r.reason
    assert r.breakdown_v[0] == pytest.approx(24.5, abs=1e-4)
    assert r.exponent[0] == pytest.approx(k, rel=1e-3)
    assert r.leakage_slope_per_v[0] == pytest.approx(0.5, rel=1e-4)
    assert r.leakage_current_a[0] == pytest.approx(leak, rel=1e-3, abs=0)
    assert 0.0 < r.leakage_fraction[0] <= 0.8 and r.leakage_points[0] > 100


def test_leakage_removal_takes_out_the_bias_of_the_plain_fit():
    # Leakage equal to the avalanche current 0.1 V above breakdown biases a fit on the total
    # current low by about 90 mV; with the leakage modelled the median error is within 5 mV.
    rng = np.random.default_rng(12)
    truth = rng.uniform(24.0, 25.0, 200)
    leak = leakage_at_crossing_a(0.1, exponent=2.0, leakage_slope_per_v=0.5)
    current = simulate_iv(rng, GRID_V, truth, leakage_a=leak, leakage_slope_per_v=0.5, relative_noise=0.002)
    r = find_breakdown(GRID_V, current)
    error_mv = np.abs(1e3 * (r.breakdown_v - truth))
    assert np.median(error_mv) <= 3.0 and np.percentile(error_mv, 90) <= 6.0
    # the pre-breakdown slope comes back from the fit below the knee
    assert np.median(r.leakage_slope_per_v) == pytest.approx(0.5, abs=0.03)


def test_reported_uncertainty_covers_the_error():
    # About 68 % of the errors should lie within the reported one-sigma uncertainty (statistical
    # and systematic parts in quadrature); the benchmark shows 60 to 100 % across categories.
    rng = np.random.default_rng(11)
    truth = rng.uniform(24.0, 25.0, 300)
    current = simulate_iv(rng, GRID_V, truth, relative_noise=0.01)
    r = find_breakdown(GRID_V, current)
    within = np.mean(np.abs(r.breakdown_v - truth) <= r.breakdown_err_v)
    assert 0.6 <= within <= 0.97
    assert np.allclose(r.breakdown_err_v, np.hypot(r.breakdown_stat_err_v, r.breakdown_sys_err_v))


def test_systematic_part_shows_a_bent_curve():
    # A strong triggering-probability bend at low noise: the window spread enters the error.
    rng = np.random.default_rng(2)
    truth = rng.uniform(24.0, 25.0, 50)
    r = find_breakdown(GRID_V, simulate_iv(rng, GRID_V, truth, geiger_scale_v=0.8, relative_noise=0.001))
    assert np.median(r.breakdown_sys_err_v) > 0.0
    assert np.all(r.breakdown_sys_err_v >= 0.0)


def test_a_million_points_are_decimated_by_block_means():
    # A 1,000,000-point sweep is analysed on block means of ceil(n / MAX_GRID_POINTS) points.
    grid = np.linspace(20.0, 31.0, 1_000_000)
    rng = np.random.default_rng(4)
    current = simulate_iv(rng, grid, [24.5], relative_noise=0.005, geiger_scale_v=1.5)
    r = find_breakdown(grid, current)
    assert r.decimation == -(-grid.size // MAX_GRID_POINTS) == 489
    assert r.bias_v.shape[1] == grid.size // 489
    assert r.breakdown_v[0] == pytest.approx(24.5, abs=0.005)
    b, ln = decimate(np.arange(7.0), np.arange(7.0)[None, :] * 2, 3)
    assert b.tolist() == [1.0, 4.0] and ln.tolist() == [[2.0, 8.0]]


@pytest.mark.parametrize("method", METHODS)
def test_vectorised_batch_equals_one_by_one_and_sweep_direction_does_not_matter(method):
    rng = np.random.default_rng(3)
    truth = rng.uniform(24.0, 25.0, 6)
    current = simulate_iv(rng, GRID_V, truth, relative_noise=0.005, geiger_scale_v=1.0)
    batch = find_breakdown(GRID_V, current, method)
    for i in range(len(truth)):
        single = find_breakdown(GRID_V, current[i], method)
        assert single.breakdown_v[0] == pytest.approx(batch.breakdown_v[i], abs=1e-9)
        down = find_breakdown(GRID_V[::-1], current[i, ::-1], method)
        assert down.breakdown_v[0] == pytest.approx(batch.breakdown_v[i], abs=1e-9)
    if method == METHODS[0]:
        assert np.all(np.abs(batch.breakdown_v - truth) < 3.5 * batch.breakdown_err_v)
    else:  # the peak definitions sit above the power-law breakdown by design (about 0.1 V here)
        assert np.all((batch.breakdown_v - truth > -0.05) & (batch.breakdown_v - truth < 0.15))
    assert np.all(np.isfinite(batch.breakdown_err_v)) and np.all(batch.breakdown_err_v > 0)


def test_non_uniform_grid_is_resampled():
    rng = np.random.default_rng(5)
    grid = np.sort(np.concatenate([np.arange(20.0, 24.0, 0.1), np.arange(24.0, 31.0, 0.04)]))
    current = simulate_iv(rng, grid, [24.5], relative_noise=0.002)
    r = find_breakdown(grid, current)
    assert r.ok[0]
    assert r.breakdown_v[0] == pytest.approx(24.5, abs=0.03)


def test_per_curve_failure_reasons_while_batch_goes_on():
    rng = np.random.default_rng(9)
    good = simulate_iv(rng, GRID_V, [24.4, 24.6], relative_noise=0.005)
    flat = np.full(GRID_V.size, 1e-10) * (1 + 0.01 * rng.standard_normal(GRID_V.size))
    negative = good[0].copy()
    negative[10] = -1e-12
    late = iv_current_a(GRID_V, 30.8)  # breakdown at the very end of the sweep
    batch = np.vstack([good[0], flat, negative, late, good[1]])
    r = find_breakdown(GRID_V, batch)
    assert r.ok.tolist() == [True, False, False, False, True]
    assert "no breakdown in range" in r.reason[1]
    assert "zero or negative" in r.reason[2] and "positive" in r.reason[2]
    assert "no breakdown in range" in r.reason[3]
    assert np.isnan(r.breakdown_v[1:4]).all()
    alone = find_breakdown(GRID_V, good)
    assert r.breakdown_v[[0, 4]] == pytest.approx(alone.breakdown_v, abs=1e-12)


def test_too_few_points_and_non_monotonic_bias():
    short = find_breakdown(GRID_V[:10], np.linspace(1e-10, 1e-6, 10))
    assert "too few points" in short.reason[0]
    bias = GRID_V.copy()
    bias[50] = bias[48]
    r = find_breakdown(bias, iv_current_a(GRID_V, 24.5))
    assert "not strictly monotonic" in r.reason[0]
    assert np.isnan(r.breakdown_err_v[0]) and not r.ok[0]
    with pytest.raises(ModelError, match="method"):
        find_breakdown(GRID_V, iv_current_a(GRID_V, 24.5), "nonsense")


def test_noise_estimate_and_window_choice_follow_the_data():
    rng = np.random.default_rng(1)
    x = np.linspace(0, 1, 400)
    smooth = np.log(1e-9 + x ** 3)
    for sigma in (0.001, 0.01, 0.05):
        noisy = smooth + sigma * rng.standard_normal(x.size)
        assert estimate_log_noise(noisy) == pytest.approx(sigma, rel=0.15)
    windows = choose_window([0.0005, 0.005, 0.05, 0.5], [10.0] * 4, 0.05, 221)
    assert np.all(np.diff(windows) >= 0) and windows[0] == 5 and windows[-1] > 5
    assert np.all(windows % 2 == 1)


def test_non_finite_values_are_a_reason_not_a_crash():
    current = iv_current_a(GRID_V, 24.5) * np.ones((2, 1))
    current[1, 40] = np.nan
    r = find_breakdown(GRID_V, current)
    assert r.ok.tolist() == [True, False]
    assert "non-finite" in r.reason[1]


@pytest.mark.parametrize("method", METHODS)
def test_every_result_names_its_definition(method):
    r = find_breakdown(GRID_V, iv_current_a(GRID_V, 24.5), method)
    assert r.definition == DEFINITIONS[method] == "iv_" + method.replace("-", "_")


def test_joint_fit_window_reaches_from_below_to_above_the_start_inclusive():
    # The window of each curve: every grid point from start - below to start + above, both ends
    # included; a window cut by the end of the sweep is padded (mask 0) with the last point.
    from compensator.calibration.ivjoint import _window

    grid = np.broadcast_to(np.arange(0.0, 10.001, 0.5), (2, 21))
    ln_i = np.log(1.0 + grid)
    win = _window(grid, ln_i, np.array([5.0, 9.5]), 1.0, 1.0)
    np.testing.assert_array_equal(win.bias_v, [[4.0, 4.5, 5.0, 5.5, 6.0], [8.5, 9.0, 9.5, 10.0, 10.0]])
    np.testing.assert_array_equal(win.mask, [[1, 1, 1, 1, 1], [1, 1, 1, 1, 0]])
    np.testing.assert_array_equal(win.ln_current, np.log(1.0 + win.bias_v))
    assert win.mask.dtype == float


def test_joint_fit_statistical_error_matches_the_scatter_of_repeated_curves():
    # 400 noisy copies of one bent curve (2 % current noise): the standard deviation of the
    # fitted breakdowns (the independent check, a Monte Carlo) equals the reported statistical
    # error to within the 3.5 % that 400 samples allow (about 1.5 mV here).
    rng = np.random.default_rng(9)
    current = simulate_iv(rng, GRID_V, np.full(400, 24.5), geiger_scale_v=0.8, relative_noise=0.02)
    r = find_breakdown(GRID_V, current)
    assert r.joint_fit.all()
    ratio = np.std(r.breakdown_v) / np.median(r.breakdown_stat_err_v)
    assert 0.88 <= ratio <= 1.12


def test_joint_fit_window_cut_by_the_end_of_the_sweep():
    # A sweep that ends 1.2 V above the first curve's breakdown (the window wants 2 V) while the
    # second curve's window fits: the first is padded to the second's width, the padded points
    # carry no weight, and both noise-free curves come back exactly (iv_current_a, the model).
    grid = np.round(np.arange(20.0, 25.7001, 0.05), 4)
    leak = leakage_at_crossing_a(0.1, exponent=2.0, leakage_slope_per_v=0.5)
    truth = np.array([24.52, 23.42])
    current = iv_current_a(grid[None, :], truth[:, None], exponent=2.0, leakage_a=leak, leakage_slope_per_v=0.5)
    r = find_breakdown(grid, current)
    assert r.joint_fit.all()
    np.testing.assert_allclose(r.breakdown_v, truth, atol=1e-5)
    # the windows: the first grid point at or above start - 3 V, the last at or below start + 2 V
    # (or the end of the sweep); the start values lie within 20 mV of the truth
    np.testing.assert_allclose(r.fit_lo_v, [21.55, 20.45], atol=1e-9)
    np.testing.assert_allclose(r.fit_hi_v, [25.7, 25.4], atol=1e-9)


def test_peak_vertex_and_its_error_against_numpy_polyfit():
    # The peak methods' refinement: the vertex of a parabola weighted by 1/sigma^2 through the points within
    # hw = clip(half window, 2, 6) of the sample peak (cut at the ends of the sweep), its error by the delta
    # method, scaled by sqrt(max(chi2/ndf, 1)) and by the correlation factor; against numpy.polyfit's weighted
    # fit and covariance. Curves: errors claimed 5x too small (the chi2 scale acts), a wide window with a
    # correlation factor, windows cut at both ends of the sweep (an asymmetric fit: the covariance of the
    # linear and quadratic terms counts), a slightly convex curve and a vertex beyond the window (both keep
    # the sample point with a uniform error of one step / sqrt(12)).
    from compensator.calibration.ivpeaks import _fit_peak

    rng = np.random.default_rng(5)
    grid = np.broadcast_to(np.round(np.arange(20.0, 22.0001, 0.05), 4), (6, 41)).copy()
    n = grid.shape[1]
    top = np.array([20.93, 21.04, 20.07, 21.21, 21.0, 21.97])
    values = 3.0 - 40.0 * (grid - top[:, None]) ** 2 + 0.05 * rng.standard_normal(grid.shape)
    values[3] = 1.0 + 0.5 * (grid[3] - top[3]) ** 2  # convex (0 < c2 < 1)
    p = np.argmin(np.abs(grid - top[:, None]), axis=1)
    p[4] += 12  # the sample peak 0.6 V from the vertex
    half = np.array([1, 4, 9, 3, 1, 4])  # hw = 2, 4, 6, 3, 2, 4
    sigma = np.array([0.01, 0.05, 0.2, 0.05, 0.05, 0.05])
    corr = np.array([1.0, 2.0, 1.5, 1.0, 1.0, 1.0])
    out = {k: np.full(6, np.nan) for k in ("breakdown_v", "breakdown_stat_err_v", "breakdown_sys_err_v",
                                          "fit_lo_v", "fit_hi_v")}
    _fit_peak(grid, values, p, half, sigma, corr, out)
    for i, hw in ((0, 2), (1, 4), (2, 6), (5, 4)):
        lo, hi = max(p[i] - hw, 0), min(p[i] + hw, n - 1)
        x, y = grid[i, lo:hi + 1] - grid[i, p[i]], values[i, lo:hi + 1]
        coef, cov = np.polyfit(x, y, 2, w=np.full(x.size, 1 / sigma[i]), cov="unscaled")
        c2, c1 = coef[0], coef[1]
        vertex = -c1 / (2 * c2)
        g = np.array([c1 / (2 * c2 ** 2), -1 / (2 * c2)])  # d vertex / d(c2, c1)
        chi2 = np.sum(((y - np.polyval(coef, x)) / sigma[i]) ** 2)
        err = np.sqrt(g @ cov[:2, :2] @ g) * np.sqrt(max(chi2 / (x.size - 3), 1.0)) * corr[i]
        assert out["breakdown_v"][i] == pytest.approx(grid[i, p[i]] + vertex, abs=1e-9)
        assert out["breakdown_stat_err_v"][i] == pytest.approx(err, rel=1e-6)
        assert (out["fit_lo_v"][i], out["fit_hi_v"][i]) == pytest.approx((grid[i, lo], grid[i, hi]))
        assert out["breakdown_v"][i] == pytest.approx(top[i], abs=0.02)
    assert (p[2] - 6 < 0 and p[5] + 4 > n - 1) and out["fit_lo_v"][2] == 20.0 and out["fit_hi_v"][5] == 22.0
    for i in (3, 4):
        assert out["breakdown_v"][i] == grid[i, p[i]]
        assert out["breakdown_stat_err_v"][i] == pytest.approx(0.05 / 12 ** 0.5, rel=1e-12)
    np.testing.assert_allclose(out["breakdown_sys_err_v"], 0.025)


def test_second_derivative_needs_a_maximum_below_the_knee():
    # A breakdown 0.1 V above the start of the sweep leaves no maximum of d2 ln I/dV2 below the knee (it sits
    # within half a filter window of the start): a failed curve with its reason; 0.3 V above, the maximum is
    # found, below the breakdown (the onset of the knee, within one 50 mV step).
    grid = np.round(np.arange(20.0, 31.0001, 0.05), 4)
    truth = np.array([20.1, 20.3, 24.5])
    current = iv_current_a(grid[None, :], truth[:, None], exponent=2.0, leakage_a=1e-12, leakage_slope_per_v=0.05)
    r = find_breakdown(grid, current, "second-derivative")
    assert r.reason[0] == "no breakdown in range: no maximum of d2 ln I/dV2 below the knee"
    assert np.isnan(r.breakdown_v[0]) and not r.ok[0]
    assert r.ok[1:].all() and r.reason[1:] == ("", "")
    assert np.all(r.breakdown_v[1:] <= truth[1:]) and np.all(r.breakdown_v[1:] >= truth[1:] - 0.05)


def test_second_derivative_point_errors_are_the_filter_noise_gain(monkeypatch):
    # The second-derivative method weights its parabola by the noise of the smoothed d2 ln I/dV2: the noise of
    # ln I times the norm of the Savitzky-Golay coefficients of the chosen window (scipy.signal.savgol_coeffs,
    # cubic, second derivative, step dV), and scales the vertex error by sqrt(window / 2) for the correlation
    # of neighbouring smoothed points.
    from iv_model import spy_on_the_peak_fit
    from scipy.signal import savgol_coeffs

    from compensator.calibration.ivsignal import estimate_log_noise

    seen = spy_on_the_peak_fit(monkeypatch)
    rng = np.random.default_rng(9)
    current = simulate_iv(rng, GRID_V, np.array([24.2, 24.8]), relative_noise=0.01, geiger_scale_v=1.0)
    find_breakdown(GRID_V, current, "second-derivative")
    windows = 2 * seen["half"] + 1
    noise = estimate_log_noise(seen["ln_i"])  # of the curve the method analyses (its leakage growth removed)
    step = seen["step_v"]
    assert step == pytest.approx(GRID_V[1] - GRID_V[0])
    for i, w in enumerate(windows):
        gain = np.linalg.norm(savgol_coeffs(int(w), 3, deriv=2, delta=step))
        assert seen["sigma"][i] == pytest.approx(noise[i] * gain, rel=1e-9)
        assert seen["corr"][i] == pytest.approx(np.sqrt(max(w / 2.0, 1.0)), rel=1e-12)
    assert np.all(windows >= 5)
