"""Breakdown voltage from I-V curves: truth recovery, published properties, failure reasons."""

from __future__ import annotations

import numpy as np
import pytest

from compensator.calibration.iv import (
    METHODS,
    choose_window,
    estimate_log_noise,
    find_breakdown,
)
from compensator.calibration.synthetic import iv_current_a, simulate_iv
from compensator.errors import ModelError

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
    assert r.breakdown_v[0] == pytest.approx(24.5 + ((k - 1) * i0 / a) ** (1 / k), abs=0.01)


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
    assert r.breakdown_v[0] == pytest.approx(expected, abs=0.005)


@pytest.mark.parametrize("geiger_scale_v", [None, 0.8, 2.0])
@pytest.mark.parametrize("relative_noise", [0.001, 0.005, 0.02])
def test_default_method_recovers_truth_within_20_mv(geiger_scale_v, relative_noise):
    # Truth recovery on seeded synthetic curves (known truth), including curves that are
    # not pure power laws (triggering-probability factor): median error within 20 mV.
    rng = np.random.default_rng(7)
    truth = rng.uniform(24.0, 25.0, 200)
    current = simulate_iv(rng, GRID_V, truth, geiger_scale_v=geiger_scale_v, relative_noise=relative_noise)
    r = find_breakdown(GRID_V, current)
    assert r.ok.all()
    error_mv = 1e3 * (r.breakdown_v - truth)
    assert abs(np.median(error_mv)) < 20.0
    assert np.percentile(np.abs(error_mv), 90) < 60.0


def test_reported_uncertainty_matches_scatter():
    # Pulls (error / reported sigma) should have a spread of order one for moderate noise.
    rng = np.random.default_rng(11)
    truth = rng.uniform(24.0, 25.0, 300)
    current = simulate_iv(rng, GRID_V, truth, relative_noise=0.01)
    r = find_breakdown(GRID_V, current)
    err = r.breakdown_v - truth
    spread = np.std(err - np.median(err))
    assert 0.3 < spread / np.median(r.breakdown_err_v) < 3.0


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
    assert np.all(np.abs(batch.breakdown_v - truth) < 0.3)
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
