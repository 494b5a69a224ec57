"""Gain scans: weighted line fits against reference libraries, truth recovery of breakdown and capacitance."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import curve_fit

from compensator.calibration.gainscan import fit_gain_scan, fit_polynomial, gain_scan_from_spectra
from compensator.calibration.spectrum import simulate_spectrum
from compensator.calibration.synthetic import simulate_gain_scan
from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.errors import ModelError


def test_weighted_fit_matches_numpy_polyfit_and_scipy_curve_fit():
    # Reference libraries: numpy.polyfit (w = 1/sigma, cov="unscaled") and
    # scipy.optimize.curve_fit (absolute_sigma=True).
    rng = np.random.default_rng(2)
    x = np.linspace(-20, 40, 9)
    sigma = rng.uniform(0.002, 0.01, x.size)
    y = 24.5 + 0.0215 * x + 1e-5 * x ** 2 + sigma * rng.standard_normal(x.size)
    for degree in (1, 2):
        ours = fit_polynomial(x, y, degree, sigma, inflate=False)
        coef, cov = np.polyfit(x, y, degree, w=1 / sigma, cov="unscaled")
        assert ours.coef == pytest.approx(coef[::-1], rel=1e-9, abs=1e-12)
        assert ours.cov == pytest.approx(cov[::-1, ::-1], rel=1e-8, abs=1e-18)
    popt, pcov = curve_fit(lambda t, a, b: a + b * (t - 25.0), x, y, sigma=sigma, absolute_sigma=True)
    centred = fit_polynomial(x, y, 1, sigma, x0=25.0, inflate=False)
    assert centred.coef == pytest.approx(popt, rel=1e-7)
    assert centred.err == pytest.approx(np.sqrt(np.diag(pcov)), rel=1e-6)


def test_unweighted_fit_matches_numpy_polyfit_scaled_covariance():
    # numpy.polyfit(cov=True) scales the covariance by chi2 / (n - deg - 1), as we do without errors.
    rng = np.random.default_rng(4)
    x = np.linspace(0, 10, 12)
    y = 3.0 - 0.7 * x + 0.1 * rng.standard_normal(x.size)
    ours = fit_polynomial(x, y, 1)
    coef, cov = np.polyfit(x, y, 1, cov=True)
    assert ours.coef == pytest.approx(coef[::-1], rel=1e-10)
    assert ours.cov == pytest.approx(cov[::-1, ::-1], rel=1e-8)


def test_exact_line_gives_exact_breakdown_and_capacitance():
    # G = C (V - Vbd) / q (common practice): noise-free data return C and Vbd exactly.
    bias = np.array([26.0, 26.5, 27.0, 27.5, 28.0])
    gain = 160e-15 * (bias - 24.5) / ELEMENTARY_CHARGE_C
    fit = fit_gain_scan(bias, gain)
    assert fit.breakdown_v == pytest.approx(24.5, abs=1e-9)
    assert fit.capacitance_f == pytest.approx(160e-15, rel=1e-12)
    assert fit.slope_per_v * ELEMENTARY_CHARGE_C == pytest.approx(fit.capacitance_f)


def test_truth_recovery_and_calibrated_errors_on_seeded_scans():
    rng = np.random.default_rng(8)
    pulls_v, pulls_c, errs_mv = [], [], []
    for _ in range(300):
        vbd, cap = rng.uniform(24, 54), rng.uniform(50e-15, 400e-15)
        bias = vbd + np.linspace(1.5, 4.5, 7)
        gain, err = simulate_gain_scan(rng, bias, vbd, cap, relative_noise=0.003)
        fit = fit_gain_scan(bias, gain, err)
        pulls_v.append((fit.breakdown_v - vbd) / fit.breakdown_err_v)
        pulls_c.append((fit.capacitance_f - cap) / fit.capacitance_err_f)
        errs_mv.append(1e3 * abs(fit.breakdown_v - vbd))
        assert abs(fit.capacitance_f / cap - 1) < 0.01
    assert np.median(errs_mv) < 20.0
    # Errors are honest: pull spread near one (inflation by chi2/ndf only widens them).
    assert 0.7 < np.std(pulls_v) < 1.2
    assert 0.7 < np.std(pulls_c) < 1.2


def test_gain_scan_from_spectra_recovers_breakdown_and_capacitance():
    # Spectra simulated with the spectrum module's generator (gain in pC), fitted, then the scan.
    rng = np.random.default_rng(12)
    vbd, cap = 24.46, 158e-15
    bias = vbd + np.array([2.0, 3.0, 4.0])
    spectra = [simulate_spectrum(rng, gain=cap * (b - vbd) * 1e12, pedestal=0.05, sigma0=0.04, sigma1=0.015,
                                 mean_pe=2.0, crosstalk=0.08, n_events=20000, bin_width=0.01) for b in bias]
    result = gain_scan_from_spectra(bias, spectra, charge_per_unit_c=1e-12, charge_unit="pc")
    assert result.failures == ("", "", "")
    assert result.scan.breakdown_v == pytest.approx(vbd, abs=0.02)
    assert result.scan.capacitance_f == pytest.approx(cap, rel=0.01)
    assert result.scan.gain_unit == "pc"
    no_unit = gain_scan_from_spectra(bias, spectra)
    assert np.isnan(no_unit.scan.capacitance_f)


def test_gain_scan_errors():
    with pytest.raises(ModelError, match="at least 3"):
        fit_gain_scan([25.0, 26.0], [1e6, 2e6])
    with pytest.raises(ModelError, match="does not rise"):
        fit_gain_scan([25.0, 26.0, 27.0], [3e6, 2e6, 1e6])
    with pytest.raises(ModelError, match="positive"):
        fit_polynomial([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], 1, [0.1, 0.0, 0.1])


def test_errors_spanning_twenty_decades_are_refused_not_a_crash():
    # gain errors of 1e-10 next to 1e10 made the weighted normal equations singular (a traceback)
    from compensator.calibration.gainscan import MAX_ERROR_RATIO

    bias = np.array([26.0, 27.0, 28.0, 29.0])
    with pytest.raises(ModelError) as exc:
        fit_gain_scan(bias, 1e6 * (bias - 25.0), [1e-10, 1e10, 1e4, 1e4])
    assert exc.value.key == "gain_err" and "1e-10" in exc.value.reason and MAX_ERROR_RATIO == 1e6
    ok = fit_gain_scan(bias, 1e6 * (bias - 25.0), [1e3, 1e4, 1e4, 1e4])
    assert ok.breakdown_v == pytest.approx(25.0, abs=1e-9)
