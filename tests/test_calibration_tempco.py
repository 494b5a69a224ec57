"""Temperature coefficients: fits against references, the quadratic test, truth recovery, profiles."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from compensator.calibration.iv import find_breakdown
from compensator.calibration.synthetic import breakdown_at, simulate_breakdown_scan, simulate_iv
from compensator.calibration.tempco import constant_gain_slope, fit_tempco, write_calibrated_profile
from compensator.errors import InputError, ModelError
from compensator.profiles import load_sipm

TEMPS_C = np.arange(-20.0, 40.1, 5.0)


def test_linear_fit_matches_numpy_polyfit():
    # Reference library: numpy.polyfit on (T - Tref), weights 1/sigma, unscaled covariance.
    rng = np.random.default_rng(1)
    vbd, err = simulate_breakdown_scan(rng, TEMPS_C, 38.2, 34.0, noise_v=0.004)
    fit = fit_tempco(TEMPS_C, vbd, err)
    coef, cov = np.polyfit(TEMPS_C - 25.0, vbd, 1, w=1 / err, cov="unscaled")
    scale = max(1.0, np.sqrt(fit.linear.chi2 / fit.linear.ndf))
    assert fit.linear.coef[::-1] == pytest.approx(coef, rel=1e-10)
    assert fit.linear.err[1] == pytest.approx(np.sqrt(cov[0, 0]) * scale, rel=1e-8)
    if fit.model == "linear":
        assert fit.tempco_mv_per_k == pytest.approx(1e3 * coef[0], rel=1e-10)
        assert fit.breakdown_v_at_ref == pytest.approx(coef[1], rel=1e-12)


@pytest.mark.parametrize("tempco", [21.5, 34.0, 55.0])
def test_tempco_recovered_within_one_percent(tempco):
    # Seeded synthetic breakdown scans with known truth: the tempco comes back within 1 %.
    rng = np.random.default_rng(int(tempco))
    rel = []
    for _ in range(50):
        vbd, err = simulate_breakdown_scan(rng, TEMPS_C, 30.0, tempco, noise_v=0.005)
        rel.append(fit_tempco(TEMPS_C, vbd, err).tempco_mv_per_k / tempco - 1)
    assert abs(np.median(rel)) < 0.01
    assert np.percentile(np.abs(rel), 90) < 0.02


def test_tempco_from_iv_curves_end_to_end_within_its_error():
    # I-V curves (with a triggering-probability factor) at -20 ... +40 C -> breakdown -> tempco.
    rng = np.random.default_rng(21)
    grid = np.round(np.arange(18.0, 32.0001, 0.05), 4)
    temps = np.repeat(np.arange(-20.0, 40.1, 10.0), 4)
    truth = breakdown_at(temps, 24.5, 21.5)
    currents = simulate_iv(rng, grid, truth, geiger_scale_v=1.5, relative_noise=0.005)
    r = find_breakdown(grid, currents)
    assert r.ok.all()
    # The joint fit's systematic part is common to the curves (fit_tempco's common_err_v).
    fit = fit_tempco(temps, r.breakdown_v, r.breakdown_stat_err_v, common_err_v=r.breakdown_sys_err_v)
    assert fit.tempco_mv_per_k == pytest.approx(21.5, abs=3 * fit.tempco_err_mv_per_k)
    assert fit.tempco_err_mv_per_k < 0.02  # 0.1 % of the tempco
    assert fit.breakdown_v_at_ref == pytest.approx(24.5, abs=3 * fit.breakdown_err_v)
    assert fit.model == "linear"


def test_quadratic_term_found_when_present():
    rng = np.random.default_rng(5)
    vbd, err = simulate_breakdown_scan(rng, TEMPS_C, 53.5, 55.0, curvature_mv_per_k2=0.08, noise_v=0.003)
    fit = fit_tempco(TEMPS_C, vbd, err)
    assert fit.quadratic_significant and fit.model == "quadratic"
    assert fit.curvature_mv_per_k2 == pytest.approx(0.08, abs=4 * fit.curvature_err_mv_per_k2)
    assert fit.tempco_mv_per_k == pytest.approx(55.0, rel=0.01)


@pytest.mark.parametrize("weighted", [True, False])
def test_quadratic_test_false_alarm_rate_matches_its_level(weighted):
    # Under a truly linear law the p-value is uniform, so the term is kept in about
    # alpha = 5 % of scans (likelihood-ratio test with errors, F-test without).
    rng = np.random.default_rng(99)
    kept = 0
    n = 600
    for _ in range(n):
        vbd, err = simulate_breakdown_scan(rng, TEMPS_C, 24.5, 21.5, noise_v=0.005)
        kept += fit_tempco(TEMPS_C, vbd, err if weighted else None).quadratic_significant
    assert 0.025 < kept / n < 0.085


def test_likelihood_ratio_equals_wald_test_for_linear_models():
    # For linear least squares with known errors the chi-square drop from line to parabola
    # equals (b / sigma_b)^2 of the quadratic coefficient (unscaled errors), and the p-value
    # is scipy.stats.chi2.sf(drop, 1).
    from compensator.calibration.gainscan import fit_polynomial

    rng = np.random.default_rng(3)
    vbd, err = simulate_breakdown_scan(rng, TEMPS_C, 24.5, 21.5, curvature_mv_per_k2=0.01, noise_v=0.005)
    lin = fit_polynomial(TEMPS_C, vbd, 1, err, x0=25.0, inflate=False)
    quad = fit_polynomial(TEMPS_C, vbd, 2, err, x0=25.0, inflate=False)
    z = quad.coef[2] / quad.err[2]
    assert lin.chi2 - quad.chi2 == pytest.approx(z ** 2, rel=1e-8)
    fit = fit_tempco(TEMPS_C, vbd, err)
    assert fit.quadratic_p_value == pytest.approx(stats.chi2.sf(z ** 2, 1), rel=1e-8)


def test_constant_gain_slope_adds_the_capacitance_drift():
    # V(T) = Vbd(T) + G0 / s(T) with s = C(T)/q and C(T) = C0 (1 + alpha dT): the slope is
    # tempco - Vov * alpha (first order; derived here), exact data.
    temps = np.arange(-20.0, 40.1, 10.0)
    alpha = -200e-6
    slope = 1e6 * (1 + alpha * (temps - 25.0))
    res = constant_gain_slope(temps, breakdown_at(temps, 24.5, 21.5), slope, overvoltage_v=3.0)
    target_ov = res.target_gain / 1e6
    assert res.slope_mv_per_k == pytest.approx(21.5 - 1e3 * target_ov * alpha, rel=2e-3)
    assert res.capacitance_tempco_ppm_per_k == pytest.approx(-200.0, rel=1e-6)


def test_write_calibrated_profile_loads_and_never_overwrites(tmp_path, sipm_a):
    rng = np.random.default_rng(4)
    vbd, err = simulate_breakdown_scan(rng, TEMPS_C, 24.61, 22.3, noise_v=0.004)
    fit = fit_tempco(TEMPS_C, vbd, err)
    out = tmp_path / "cal.yaml"
    written = write_calibrated_profile(out, sipm_a, fit, data_file="scan.csv", capacitance_f=1.55e-13)
    loaded = load_sipm(out)
    assert loaded.name == "hut-sipm-a-calibrated" == written.name
    bd = loaded.device.breakdown
    assert bd.breakdown_v_at_ref == pytest.approx(fit.breakdown_v_at_ref, abs=1e-6)
    assert bd.tempco_mv_per_k == pytest.approx(fit.tempco_mv_per_k, abs=1e-4)
    assert bd.breakdown_err_v == pytest.approx(fit.breakdown_err_v, abs=1e-6)
    assert bd.tempco_err_mv_per_k == pytest.approx(fit.tempco_err_mv_per_k, abs=1e-4)
    assert loaded.device.cell_capacitance_f == pytest.approx(1.55e-13)
    assert loaded.device.cell_count == sipm_a.device.cell_count
    before = out.read_bytes()
    with pytest.raises(InputError, match="already exists"):
        write_calibrated_profile(out, sipm_a, fit)
    assert out.read_bytes() == before
    write_calibrated_profile(out, sipm_a, fit, force=True, name="batch-7")
    assert load_sipm(out).name == "batch-7"


def test_non_physical_fit_is_refused_and_nothing_written(tmp_path, sipm_a):
    fit = fit_tempco(TEMPS_C, 24.5 - 0.02 * (TEMPS_C - 25), np.full(TEMPS_C.size, 0.004))
    out = tmp_path / "neg.yaml"
    with pytest.raises(InputError, match="tempco_mv_per_k"):
        write_calibrated_profile(out, sipm_a, fit)
    assert not out.exists()
    assert not list(tmp_path.iterdir())


def test_too_few_temperatures():
    with pytest.raises(ModelError, match="2 distinct"):
        fit_tempco([25.0, 25.0, 25.0], [24.5, 24.51, 24.49])
    fit = fit_tempco([0.0, 25.0, 40.0], [24.0, 24.5, 24.8])
    assert np.isnan(fit.quadratic_p_value) and fit.model == "linear"


def test_common_systematic_error_enters_the_reference_breakdown_only():
    # A systematic error common to every point (covariance diag(sigma^2) + c^2 1 1^T) computed
    # here by generalised least squares with the full covariance matrix (independent of the
    # code): by the Woodbury identity it adds c^2 to the intercept's variance and nothing to the
    # slope's, whatever the temperatures.
    temps = np.array([-20.0, -10.0, 0.0, 10.0, 20.0, 30.0, 40.0])
    rng = np.random.default_rng(5)
    sigma = rng.uniform(0.0005, 0.002, temps.size)
    volts = 24.5 + 0.0215 * (temps - 25.0) + sigma * rng.standard_normal(temps.size)
    common = 0.003
    x = np.column_stack([np.ones_like(temps), temps - 25.0])
    cov = np.diag(sigma ** 2) + common ** 2 * np.ones((temps.size, temps.size))
    gls = np.linalg.inv(x.T @ np.linalg.solve(cov, x))
    fit = fit_tempco(temps, volts, sigma, common_err_v=np.full(temps.size, common))
    scale = max(fit.chi2 / fit.ndf, 1.0)  # the fit scales its statistical errors by sqrt(chi2/ndf) when above 1
    plain = fit_tempco(temps, volts, sigma)
    assert fit.breakdown_err_v == pytest.approx(np.sqrt((gls[0, 0] - common ** 2) * scale + common ** 2), rel=1e-9)
    assert fit.tempco_err_mv_per_k == pytest.approx(1e3 * np.sqrt(gls[1, 1] * scale), rel=1e-9)
    assert fit.breakdown_v_at_ref == plain.breakdown_v_at_ref and fit.breakdown_sys_err_v == pytest.approx(common)
    with pytest.raises(ModelError):
        fit_tempco(temps, volts, sigma, common_err_v=-1.0)


def test_definition_offset_is_the_weighted_mean_of_matched_differences():
    # Weighted mean and its error computed here by hand (independent of the code): the gain
    # intercepts at 0, 20 and 40 C are matched to the I-V breakdowns within 0.5 K (the I-V point
    # at 10 C has no partner); offsets 118, 121 and 124 mV with errors 2, 2 and 4 mV in quadrature
    # with the I-V errors of 1 mV.
    from compensator.calibration.definitions import definition_offset

    iv_t, iv_v, iv_e = [0.0, 10.0, 20.0, 40.2], [24.1, 24.3, 24.5, 24.9], [0.001] * 4
    gi_t, gi_v, gi_e = [0.1, 20.0, 40.0], [23.982, 24.379, 24.776], [0.002, 0.002, 0.004]
    r = definition_offset(iv_t, iv_v, iv_e, gi_t, gi_v, gi_e, from_definition="iv_inverse_log_derivative",
                          to_definition="gain_intercept")
    d = np.array([-0.118, -0.121, -0.124])
    w = 1.0 / (np.array(gi_e) ** 2 + 0.001 ** 2)
    mean = np.sum(w * d) / np.sum(w)
    chi2 = np.sum(w * (d - mean) ** 2)
    assert r.offset_v == pytest.approx(mean, abs=1e-12) and r.matched_points == 3 and r.ndf == 2
    assert r.chi2 == pytest.approx(chi2, rel=1e-9)
    assert r.chi2_p_value == pytest.approx(stats.chi2.sf(chi2, 2), rel=1e-9)
    assert r.offset_err_v == pytest.approx(np.sqrt(1 / np.sum(w)) * max(1.0, np.sqrt(chi2 / 2)), rel=1e-9)
    assert r.findings == ()
    # Differences that scatter far beyond their errors: a finding, and the error scaled up.
    wild = definition_offset(iv_t, iv_v, iv_e, gi_t, [23.9, 24.4, 24.7], gi_e)
    assert [f.code for f in wild.findings] == ["definition_offset_scatter"] and wild.offset_err_v > 0.02
    with pytest.raises(ModelError, match="no temperature"):
        definition_offset(iv_t, iv_v, iv_e, [60.0], [25.0], [0.002])
    with pytest.raises(ModelError, match="same definition|both breakdown sets"):
        definition_offset(iv_t, iv_v, iv_e, gi_t, gi_v, gi_e, from_definition="gain_intercept",
                          to_definition="gain_intercept")
    # fit_tempco moves the breakdown by the offset and adds its error to the common part.
    plain = fit_tempco(np.array(iv_t), np.array(iv_v), np.array(iv_e))
    moved = fit_tempco(np.array(iv_t), np.array(iv_v), np.array(iv_e), offset_v=r.offset_v, offset_err_v=r.offset_err_v)
    assert moved.breakdown_v_at_ref == pytest.approx(plain.breakdown_v_at_ref + r.offset_v, abs=1e-12)
    assert moved.breakdown_err_v == pytest.approx(np.hypot(plain.breakdown_err_v, r.offset_err_v), rel=1e-12)
    assert moved.tempco_mv_per_k == plain.tempco_mv_per_k
