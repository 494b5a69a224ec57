"""calibration.ivsignal: noise estimate, window choice, weighted fits, decimation and resampling.

Checks added for mutation testing, each against numpy (polyfit, interp, median), scipy.signal
(Savitzky-Golay coefficients and filters) or a hand calculation.
"""

import numpy as np
import pytest
from scipy.signal import savgol_coeffs, savgol_filter

from compensator.calibration import ivsignal

# No numpy RuntimeWarning may reach the user (see tests/test_calibration_iv_mutation.py).
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")


def test_noise_is_the_mad_of_second_differences_over_sqrt_6():
    # For white noise of standard deviation s the second differences have standard deviation sqrt(6) s, and
    # 1.4826 MAD estimates a Gaussian standard deviation (common practice); computed here with numpy.median on
    # every row of a (2, 3, n) array, and the floor of 1e-7 for a noise-free straight line.
    rng = np.random.default_rng(1)
    y = rng.standard_normal((2, 3, 50)) * np.array([0.01, 0.1, 1.0])[None, :, None]
    got = ivsignal.estimate_log_noise(y)
    assert got.shape == (2, 3)
    for idx in np.ndindex(2, 3):
        d2 = y[idx][2:] - 2 * y[idx][1:-1] + y[idx][:-2]
        mad = np.median(np.abs(d2 - np.median(d2)))
        assert got[idx] == pytest.approx(1.4826 * mad / np.sqrt(6.0), rel=1e-12)
    assert ivsignal.estimate_log_noise(np.linspace(0.0, 1.0, 20)) == 1e-7


@pytest.mark.parametrize("deriv, fraction", [(1, None), (2, None), (1, 0.3), (2, 0.05)])
def test_window_is_the_narrowest_whose_noise_gain_meets_the_fraction(deriv, fraction):
    # The narrowest odd window from 5 up to the odd number at most n / 4 whose noise gain
    # noise ||savgol_coeffs(w, 3, deriv)|| / dV^deriv (scipy.signal) is at most the fraction (0.1 for the first
    # derivative, 0.5 for the second by default) of the peak height (its magnitude); the widest window when
    # none is. Noise levels from 1e-3 to 1e3 straddle every window; 97 points allow windows up to 23.
    noise = np.geomspace(1e-3, 1e3, 25)
    height = np.where(np.arange(25) % 2, 10.0, -10.0)
    got = ivsignal.choose_window(noise, height, 0.05, 97, deriv=deriv, fraction=fraction)
    limit = (fraction if fraction is not None else (0.1 if deriv == 1 else 0.5)) * np.abs(height)
    gain = {w: np.linalg.norm(savgol_coeffs(w, 3, deriv=deriv, delta=0.05)) for w in range(5, 24, 2)}
    for i in range(noise.size):
        fits = [w for w in gain if noise[i] * gain[w] <= limit[i]]
        assert got[i] == (fits[0] if fits else 23), i
    assert got[0] == 5 and got[-1] == 23 and len(set(got.tolist())) >= 4


def test_the_widest_window_is_an_odd_quarter_of_the_curve_and_at_least_5():
    # w_max = max(5, the largest odd number <= n // 4): 15 and 20 points -> 5, 28 -> 7, 32 -> 7, 36 -> 9.
    for n, w_max in ((15, 5), (20, 5), (28, 7), (32, 7), (36, 9)):
        assert ivsignal.choose_window([10.0], [1.0], 0.05, n).tolist() == [w_max], n
    assert ivsignal._odd(8) == 7 and ivsignal._odd(9) == 9


def test_grouped_savgol_is_scipy_row_by_row():
    rng = np.random.default_rng(2)
    y = np.cumsum(rng.standard_normal((4, 60)), axis=1)
    windows = np.array([7, 5, 7, 11])
    got = ivsignal._savgol_grouped(y, windows, 0.05, 1)
    for i, w in enumerate(windows):
        np.testing.assert_allclose(got[i], savgol_filter(y[i], w, 3, deriv=1, delta=0.05, mode="nearest"),
                                   rtol=1e-12, atol=1e-12)
    assert ivsignal._gains(windows, 2).tolist() == [
        pytest.approx(np.linalg.norm(savgol_coeffs(w, 3, deriv=2))) for w in windows]
    assert ivsignal._gains(np.array([], dtype=int), 1).shape == (0,)


def test_weighted_polynomials_of_many_rows_against_numpy_polyfit():
    # Each row's weighted fit over its masked points (values outside the mask, NaN here, must not count): the
    # coefficients (low to high), the unscaled covariance, chi2 = sum w r^2 and the points used; with ``also``
    # the lower degree from the same sums. numpy.polyfit with weights sqrt(w) and cov="unscaled". A row with no
    # more points than the degree, and a row whose points all share one x (a singular normal matrix), give NaN.
    rng = np.random.default_rng(3)
    x = np.broadcast_to(np.linspace(-1.0, 2.0, 25), (4, 25)).copy()
    y = 0.3 - 0.5 * x + 0.8 * x ** 2 + 0.05 * rng.standard_normal(x.shape)
    w = rng.uniform(0.5, 2.0, x.shape)
    mask = np.ones(x.shape, dtype=bool)
    mask[1, ::3] = False
    y[1, ::3] = np.nan
    mask[2, 2:] = False  # two points: a parabola is not determined, a line is
    x[3] = 0.0  # one x
    quad, line = ivsignal._weighted_poly(x, y, w, mask, 2, also=1)
    assert quad.n_used.tolist() == [25, 16, 2, 25] == line.n_used.tolist()
    for fit, degree in ((quad, 2), (line, 1)):
        for i in (0, 1) + ((2,) if degree == 1 else ()):
            xi, yi, wi = x[i, mask[i]], y[i, mask[i]], w[i, mask[i]]
            coef, cov = np.polyfit(xi, yi, degree, w=np.sqrt(wi), cov="unscaled") if xi.size > degree + 1 else (
                np.polyfit(xi, yi, degree, w=np.sqrt(wi)), None)
            np.testing.assert_allclose(fit.coef[i], coef[::-1], rtol=1e-8, atol=1e-10)
            if cov is not None:
                np.testing.assert_allclose(fit.cov[i], cov[::-1, ::-1], rtol=1e-8)
            chi2 = np.sum(wi * (yi - np.polyval(coef, xi)) ** 2)
            assert fit.chi2[i] == pytest.approx(chi2, rel=1e-6, abs=1e-20)
        assert np.isnan(fit.coef[3]).all()
    assert np.isnan(quad.coef[2]).all()
    single = ivsignal._weighted_poly(x, y, w, mask, 1)
    np.testing.assert_array_equal(single.coef[:3], line.coef[:3])


def test_decimation_by_block_means_and_resampling_of_uneven_steps():
    # Block means of 3 points, the trailing partial block dropped, a shared 1-D grid or one row per curve.
    b, ln = ivsignal.decimate(np.arange(8.0), np.arange(16.0).reshape(2, 8), 3)
    assert b.tolist() == [1.0, 4.0] and ln.tolist() == [[1.0, 4.0], [9.0, 12.0]]
    b2, _ = ivsignal.decimate(np.arange(16.0).reshape(2, 8), np.arange(16.0).reshape(2, 8), 2)
    assert b2.tolist() == [[0.5, 2.5, 4.5, 6.5], [8.5, 10.5, 12.5, 14.5]]
    same = np.arange(5.0)
    assert ivsignal.decimate(same, same[None, :], 1)[0] is same
    # Steps that vary by at most 1 % of their mean are kept; more is resampled by numpy.interp onto as many
    # evenly spaced points from the first to the last bias.
    rng = np.random.default_rng(4)
    ln_i = rng.standard_normal((2, 11))
    close = np.cumsum(np.r_[0.0, np.full(10, 0.1)]) + np.r_[0.0, 0.0004, np.zeros(9)]  # steps 0.1004, 0.0996
    assert ivsignal._uniform(close, ln_i)[0] is close
    uneven = np.cumsum(np.r_[0.0, np.full(10, 0.1)]) + np.r_[0.0, 0.0006, np.zeros(9)]  # 1.2 % apart
    grid, res = ivsignal._uniform(uneven, ln_i)
    np.testing.assert_allclose(grid, np.linspace(0.0, 1.0, 11), atol=1e-15)
    for i in range(2):
        np.testing.assert_allclose(res[i], np.interp(grid, uneven, ln_i[i]), rtol=1e-15)
    grid1, res1 = ivsignal._uniform(uneven, ln_i[0])
    np.testing.assert_allclose(res1, res[0], rtol=1e-15)
