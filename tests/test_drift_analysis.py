"""Drift analysis: known synthetic drift and tempco recovered within their intervals, collinearity, faults, gaps."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import stats

from compensator.drift import GainSource, analyse_run, andrews_lag, fit_hac, newey_west_lag
from compensator.drift.fleet import fleet_summary
from compensator.drift.synthetic import START_UNIX_S, synthetic_run
from compensator.errors import ModelError
from compensator.firmware.faults import FaultFlag


def _inside(interval, value):
    return interval[0] <= value <= interval[1]


@pytest.mark.parametrize("dark_peak_every", [1, 0])
def test_known_drift_and_tempco_are_recovered_within_their_intervals(dark_peak_every):
    # Invented data with a known truth; the 95 % intervals must hold it and be narrow enough to mean something.
    run, truth = synthetic_run(days=12, rate_hz=1 / 60, drift_pct_per_day=-0.03, tempco_pct_per_k=0.025,
                               dark_peak_every=dark_peak_every, seed=21)
    report = analyse_run(run)
    assert report.gain_source == (GainSource.DARK_PEAK if dark_peak_every else GainSource.OVERVOLTAGE_READBACK)
    assert _inside(report.drift_ci_pct_per_day, truth.drift_pct_per_day)
    assert _inside(report.residual_tempco_ci_pct_per_k, truth.tempco_pct_per_k)
    assert np.diff(report.drift_ci_pct_per_day)[0] < 0.01          # truth is -0.03: resolved
    assert np.diff(report.residual_tempco_ci_pct_per_k)[0] < 0.005
    assert report.samples == 12 * 24 * 60
    assert report.bins == 12 * 24 and report.bin_s == 3600.0
    assert not report.collinear


def test_intervals_cover_the_truth_about_as_often_as_they_claim():
    # Coverage over 40 seeded runs with autocorrelated gain noise. Nominal 95 %; the Newey-West intervals
    # are known to run a little short in finite samples (measured about 0.90 for the drift over 200 seeds),
    # so require at least 33 of 40 (P(X <= 32) < 1 % for a true coverage of 0.93, scipy.stats.binom)
    # and that they are not wildly conservative either (at most 40).
    hits_drift = hits_tempco = 0
    for seed in range(40):
        run, truth = synthetic_run(days=6, rate_hz=1 / 120, seed=500 + seed)
        report = analyse_run(run)
        hits_drift += _inside(report.drift_ci_pct_per_day, truth.drift_pct_per_day)
        hits_tempco += _inside(report.residual_tempco_ci_pct_per_k, truth.tempco_pct_per_k)
    assert stats.binom.cdf(32, 40, 0.93) < 0.01
    assert hits_drift >= 33 and hits_tempco >= 33


def test_plain_least_squares_errors_would_be_far_too_small():
    # Over seeds, the spread of the drift estimate is several times the error plain least squares on the raw
    # samples claims (the noise is correlated), while the reported Newey-West error matches the spread.
    estimates, reported, naive = [], [], []
    for seed in range(10):
        run, _ = synthetic_run(days=6, rate_hz=1 / 120, correlated_noise_pct=0.08, seed=700 + seed)
        report = analyse_run(run)
        estimates.append(report.drift_pct_per_day)
        reported.append(report.drift_err_pct_per_day)
        t_day = (run.time_unix_s - run.time_unix_s[0]) / 86400.0
        gain_pct = 100 * (run.bias_measured_v - run.bias_set_v) / 3.0
        x = np.column_stack([np.ones_like(t_day), run.temp_c - run.temp_c.mean(), t_day - t_day.mean()])
        naive.append(fit_hac(x, gain_pct, lag=0, prewhiten=False).se[2])
    spread = np.std(estimates, ddof=1)
    assert spread > 3 * np.mean(naive)
    assert 0.6 < np.mean(reported) / spread < 1.6      # the spread of 10 draws is itself known to about 25 %


def test_collinear_time_and_temperature_are_measured_and_reported():
    # A steady seasonal warming of 1 K per day against a small daily swing: temperature follows time.
    run, truth = synthetic_run(days=10, rate_hz=1 / 60, seasonal_k_per_day=1.0, daily_swing_k=0.5,
                               weather_k=0.2, seed=4)
    report = analyse_run(run)
    binned_t = np.arange(report.bins)
    assert report.time_temp_correlation > 0.9
    assert report.variance_inflation == pytest.approx(1 / (1 - report.time_temp_correlation ** 2))
    assert report.collinear
    assert "time_temperature_collinear" in {f.code for f in report.findings}
    # Still honest: the wide intervals hold the truth.
    assert _inside(report.drift_ci_pct_per_day, truth.drift_pct_per_day)
    assert _inside(report.residual_tempco_ci_pct_per_k, truth.tempco_pct_per_k)
    assert binned_t.size == report.bins


def test_constant_temperature_fits_drift_alone():
    run, truth = synthetic_run(days=4, rate_hz=1 / 60, daily_swing_k=0.0, weather_k=0.0, seed=6)
    run = dataclasses.replace(run, temp_c=np.full(run.samples, 12.5))
    report = analyse_run(run)
    assert np.isnan(report.residual_tempco_pct_per_k)
    assert "temperature_constant" in {f.code for f in report.findings}
    assert _inside(report.drift_ci_pct_per_day, truth.drift_pct_per_day)


def test_fault_samples_are_excluded_and_timed():
    day = 86400.0
    run, truth = synthetic_run(days=5, rate_hz=1 / 30, faults=[(1.5, 3600.0, int(FaultFlag.SENSOR_OPEN)),
                                                            (3.0, 600.0, int(FaultFlag.REQUEST_REFUSED))],
                               dark_peak_every=1, seed=7)
    report = analyse_run(run)
    assert report.samples - report.samples_used == 120        # one hour at 30 s; the refusal is harmless
    assert _inside(report.drift_ci_pct_per_day, truth.drift_pct_per_day)
    by_name = {i.fault: i for i in report.fault_intervals}
    assert by_name["sensor_open"].start_unix_s == pytest.approx(START_UNIX_S + 1.5 * day)
    assert by_name["sensor_open"].duration_s == pytest.approx(3600.0)
    assert by_name["request_refused"].duration_s == pytest.approx(600.0)
    assert {s.fault: s.samples for s in report.fault_summary} == {"sensor_open": 120, "request_refused": 20}


def test_gaps_are_found_and_their_causes_named():
    run, _ = synthetic_run(days=3, rate_hz=1 / 10, gaps=[(1.0, 1800.0)], restarts=[(2.0, 600.0)], seed=8)
    report = analyse_run(run)
    causes = sorted((g.cause, round(g.duration_s)) for g in report.gaps)
    assert causes == [("link_lost", 1810), ("logger_stopped", 610)]
    assert report.gap_total_s == pytest.approx(2420.0)
    assert report.sessions == 2
    gain = next(c for c in report.allan if c.quantity == "gain_pct")
    assert gain.tau_s[0] == pytest.approx(10.0)


def test_short_run_says_it_is_too_short_and_empty_run_is_an_error():
    run, _ = synthetic_run(days=0.001, rate_hz=1 / 60, seed=9)
    report = analyse_run(run)
    assert np.isnan(report.drift_pct_per_day)
    assert "run_too_short" in {f.code for f in report.findings}
    empty = dataclasses.replace(run, time_unix_s=np.zeros(0))
    with pytest.raises(ModelError):
        analyse_run(empty)
    with pytest.raises(ModelError):
        analyse_run(run, confidence=1.5)


def test_profile_breakdown_proxy_uses_bias_minus_breakdown():
    run, truth = synthetic_run(days=6, rate_hz=1 / 60, seed=10)
    breakdown_v = 24.0 + 0.035 * (run.temp_c - 25.0)      # the synthetic sensor's own line
    report = analyse_run(run, breakdown_v=breakdown_v)
    assert report.gain_source == GainSource.OVERVOLTAGE_PROFILE
    assert report.overvoltage_reference_v == pytest.approx(3.0, abs=0.01) and np.isnan(report.gain_reference)
    assert _inside(report.residual_tempco_ci_pct_per_k, truth.tempco_pct_per_k)


def test_fit_hac_coefficients_equal_least_squares_and_lag_rule():
    rng = np.random.default_rng(0)
    x = np.column_stack([np.ones(300), rng.normal(size=300), np.arange(300.0)])
    y = x @ [1.0, 2.0, -0.01] + rng.normal(0, 0.1, 300)
    fit = fit_hac(x, y, prewhiten=False)
    assert np.allclose(fit.coef, np.linalg.lstsq(x, y, rcond=None)[0], rtol=1e-10)   # numpy reference
    assert fit.dof == 297
    # Newey and West (1994): floor(4 (n/100)^(2/9)); n = 1000 gives floor(6.67) = 6.
    assert newey_west_lag(100) == 4 and newey_west_lag(1000) == 6
    # Lag 0 without prewhitening is White's covariance scaled by n/(n-k): compare with the formula.
    fit0 = fit_hac(x, y, lag=0, prewhiten=False)
    resid = y - x @ fit0.coef
    bread = np.linalg.inv(x.T @ x)
    white = bread @ (x.T * resid ** 2) @ x @ bread * 300 / 297
    assert np.allclose(fit0.se, np.sqrt(np.diag(white)), rtol=1e-10)
    with pytest.raises(ModelError):
        fit_hac(x[:4], y[:4])                   # 4 rows, 3 coefficients: no error estimate
    assert fit_hac(x[:5], y[:5], prewhiten=False).dof == 2


def test_fleet_spread_is_the_spread_of_the_units():
    reports = []
    for k, (d, c) in enumerate([(-0.02, 0.03), (-0.01, -0.01), (-0.05, 0.05)]):
        run, _ = synthetic_run(days=5, rate_hz=1 / 120, drift_pct_per_day=d, tempco_pct_per_k=c,
                               unit_id=f"hut-{k}", seed=30 + k)
        reports.append(analyse_run(run))
    summary = fleet_summary(reports)
    spread = {s.quantity: s for s in summary.spread}["drift_pct_per_day"]
    values = np.array([r.drift_pct_per_day for r in reports])
    assert spread.mean_in_quantity_unit == pytest.approx(values.mean()) and spread.std_in_quantity_unit == pytest.approx(values.std(ddof=1))
    assert spread.largest_abs_unit == "hut-2"
    assert spread.minimum_in_quantity_unit == pytest.approx(values.min()) and spread.unit_count == 3


def test_prewhitened_fit_is_generalised_least_squares_with_the_ar1_covariance():
    # Independent computation: GLS with the AR(1) correlation matrix rho^|i-j| inverted by numpy
    # (Prais and Winsten 1954 give the same estimate through their transform).
    rng = np.random.default_rng(12)
    n, rho_true = 400, 0.7
    noise = np.zeros(n)
    for i in range(1, n):
        noise[i] = rho_true * noise[i - 1] + rng.normal()
    x = np.column_stack([np.ones(n), np.sin(np.arange(n) / 9.0), np.linspace(-1, 1, n)])
    y = x @ [0.5, 2.0, -1.0] + noise
    fit = fit_hac(x, y)
    assert fit.rho == pytest.approx(rho_true, abs=0.1)
    omega = fit.rho ** np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    w = np.linalg.inv(omega)
    gls = np.linalg.solve(x.T @ w @ x, x.T @ w @ y)
    assert np.allclose(fit.coef, gls, rtol=1e-8, atol=1e-10)
    assert fit_hac(x, y, prewhiten=False).rho == 0.0


def test_lag_rules():
    # Newey and West (1994): floor(4 (n/100)^(2/9)).
    assert [newey_west_lag(n) for n in (50, 100, 300, 1000, 10000)] == [3, 4, 5, 6, 11]
    # Andrews (1991), one AR(1) column: alpha = 4 rho^2 / ((1 - rho)^2 (1 + rho)^2), lag floor(1.1447 (alpha n)^(1/3)).
    rng = np.random.default_rng(1)
    u = np.zeros(2000)
    for i in range(1, u.size):
        u[i] = 0.6 * u[i - 1] + rng.normal()
    rho = np.dot(u[:-1], u[1:]) / np.dot(u[:-1], u[:-1])
    alpha = 4 * rho ** 2 / ((1 - rho) ** 2 * (1 + rho) ** 2)
    assert andrews_lag(u[:, None]) == int(np.floor(1.1447 * (alpha * u.size) ** (1 / 3)))
    assert andrews_lag(np.zeros((10, 1))) == 0


def test_fleet_findings_and_every_spread():
    reports = []
    for k, (unit, d, every) in enumerate([("hut-1", -0.02, 1), ("hut-2", -0.01, 0), ("hut-1", -0.04, 1)]):
        run, _ = synthetic_run(days=3, rate_hz=1 / 120, drift_pct_per_day=d, dark_peak_every=every, unit_id=unit,
                               seed=60 + k)
        reports.append(analyse_run(run))
    summary = fleet_summary(reports)
    assert {f.code for f in summary.findings} == {"unit_repeated", "mixed_gain_sources"}
    spread = {s.quantity: s for s in summary.spread}
    allan = np.array([next(c.minimum_deviation_in_quantity_unit for c in r.allan if c.quantity == "gain_pct")
                      for r in reports])
    g = spread["gain_allan_minimum_pct"]
    assert g.mean_in_quantity_unit == pytest.approx(allan.mean()) and g.maximum_in_quantity_unit == allan.max()
    tempco = np.array([r.residual_tempco_pct_per_k for r in reports])
    t = spread["residual_tempco_pct_per_k"]
    assert t.minimum_in_quantity_unit == tempco.min() and t.maximum_in_quantity_unit == tempco.max()
    assert t.unit_count == 3 and t.largest_abs_unit == reports[int(np.argmax(np.abs(tempco)))].unit_id
    p2p = spread["gain_peak_to_peak_pct"]
    assert p2p.std_in_quantity_unit == pytest.approx(np.std([r.gain_peak_to_peak_pct for r in reports], ddof=1))
    pair = {s.quantity: s for s in fleet_summary(reports[:2]).spread}["drift_pct_per_day"]
    assert pair.std_in_quantity_unit == pytest.approx(abs(reports[0].drift_pct_per_day - reports[1].drift_pct_per_day)
                                                      / np.sqrt(2))
    single = fleet_summary(reports[:1])
    assert np.isnan({s.quantity: s for s in single.spread}["drift_pct_per_day"].std_in_quantity_unit)
    assert single.findings == ()
