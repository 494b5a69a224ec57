"""calibration.ivknee: the knee (window, smoothed d ln I/dV, its peak) and the leakage model.

Checks added for mutation testing, each against scipy.signal (Savitzky-Golay filters and their coefficients),
numpy.polyfit with its covariance, or a hand calculation.
"""

import numpy as np
import pytest
from scipy.signal import savgol_coeffs, savgol_filter

from compensator.calibration.ivknee import _fit_leakage, _Knee, _knee
from compensator.calibration.synthetic import iv_current_a

# No numpy RuntimeWarning may reach the user (see tests/test_calibration_iv_mutation.py).
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

GRID_V = np.round(np.arange(20.0, 31.0001, 0.05), 4)  # 221 points


def _check_knee_rule(k, ln_i, step_v):
    """The knee of every row against the documented rule, computed with scipy.signal; returns the pilot peaks."""
    n = ln_i.shape[1]
    w_max = max(5, (n // 4) - 1 + (n // 4) % 2)  # the odd number at most n / 4, at least 5
    h_max = w_max // 2
    peaks = []
    for i in range(ln_i.shape[0]):
        d2 = np.diff(ln_i[i], 2)
        noise = max(1.4826 * np.median(np.abs(d2 - np.median(d2))) / np.sqrt(6.0), 1e-7)
        assert k.noise[i] == pytest.approx(noise, rel=1e-12)
        pilot = savgol_filter(ln_i[i], w_max, 3, deriv=1, delta=step_v, mode="nearest")
        p_pilot = h_max + int(np.argmax(pilot[h_max:n - h_max]))
        gain = {w: np.linalg.norm(savgol_coeffs(w, 3, deriv=1, delta=step_v)) for w in range(5, w_max + 1, 2)}
        window = min([w for w in gain if noise * gain[w] <= 0.1 * pilot[p_pilot]] or [w_max])
        assert k.windows[i] == window, i
        half = window // 2
        deriv = savgol_filter(ln_i[i], window, 3, deriv=1, delta=step_v, mode="nearest")
        np.testing.assert_allclose(k.deriv[i, half:n - half], deriv[half:n - half], rtol=1e-12, atol=1e-12)
        assert np.isnan(k.deriv[i, :half]).all() and np.isnan(k.deriv[i, n - half:]).all()
        lo, hi = max(p_pilot - h_max, half), min(p_pilot + h_max, n - half - 1)
        assert k.peak_index[i] == lo + int(np.argmax(deriv[lo:hi + 1])), i
        assert k.sigma_d[i] == pytest.approx(noise * gain[window], rel=1e-12)
        assert k.interior[i].tolist() == [half <= j < n - half for j in range(n)]
        peaks.append((p_pilot, pilot[p_pilot]))
    return peaks


def test_knee_window_and_peak_follow_the_documented_rule_with_scipy():
    # The rule of calibration.iv's docstring, computed here with scipy.signal: the noise of ln I is
    # 1.4826 MAD(second differences) / sqrt(6); a pilot cubic Savitzky-Golay derivative over the widest window
    # (the odd number at most n / 4: 55 of 221 points) gives the peak height D over the points where the filter
    # has full support; the window is the narrowest odd width >= 5 whose noise gain
    # noise * ||savgol_coeffs(w, 3, deriv=1)|| / dV is at most 10 % of D; the knee is the maximum of the
    # derivative with that window within a pilot half-window of the pilot's peak and at least half a window
    # from the ends (NaN there). Rows with growing noise get growing windows; row 3 carries a spike far
    # below the knee, taller in the narrow derivative than the knee itself, which the pilot ignores; rows 4 and 6
    # a steep rise in the last 8 points, where the pilot has no full support (row 6 with a noise that asks for a
    # wider window, which a higher peak there would narrow); row 5 a soft knee (a leakage of 1e-8 A, 50 times the
    # others': a lower peak) whose window its own peak sets, not the others'; row 7 a spike just above a pilot
    # half-window (27 points) over the pilot's peak, so that the largest narrow derivative within reach lies at
    # its very end.
    rng = np.random.default_rng(4)
    truth = np.array([24.3, 24.6, 25.0, 24.8, 24.4, 24.7, 24.5, 24.5])
    sigma = np.array([0.001, 0.1, 0.3, 0.02, 0.02, 0.05, 0.15, 0.001])
    ln_i = np.log(iv_current_a(GRID_V[None, :], truth[:, None], geiger_scale_v=1.0))
    ln_i[5] = np.log(iv_current_a(GRID_V, truth[5], leakage_a=1e-8, geiger_scale_v=1.0))
    ln_i = ln_i + sigma[:, None] * rng.standard_normal(ln_i.shape)
    ln_i[3, 30] += 3.0  # a spike at 21.5 V: the narrow derivative peaks a point before it
    ln_i[[4, 6], -8:] += 2.0 * np.arange(1, 9)  # a steep rise in the last 8 points
    n, h_max = 221, 27
    p7 = h_max + int(np.argmax(savgol_filter(ln_i[7], 55, 3, deriv=1, delta=0.05, mode="nearest")[h_max:n - h_max]))
    ln_i[7, p7 + h_max + 1] += 3.0  # the narrow derivative peaks a pilot half-window above the pilot's peak
    k = _knee(ln_i, 0.05)
    peaks = _check_knee_rule(k, ln_i, 0.05)
    assert k.windows[0] < k.windows[1] < k.windows[2] and k.windows[5] > k.windows[3] and k.windows[6] > 5
    assert peaks[5][1] < 0.8 * min(p[1] for p in peaks[:5])
    assert np.argmax(k.deriv[3, 10:-10]) + 10 == 29 and abs(GRID_V[k.peak_index[3]] - 24.8) < 0.3
    for i in (4, 6):
        edge = savgol_filter(ln_i[i], 55, 3, deriv=1, delta=0.05, mode="nearest")
        assert np.argmax(edge) >= n - h_max and edge.max() > 2 * peaks[i][1]
        assert abs(GRID_V[k.peak_index[i]] - truth[i]) < 0.3
    assert peaks[7][0] == p7 and k.peak_index[7] == p7 + h_max  # the search reaches that far, not farther


def test_knee_of_a_short_curve_uses_the_smallest_pilot_window():
    # A curve of 20 points (more than MIN_POINTS, 15): n / 4 = 5 points of pilot window, the smallest allowed
    # (odd, at least 5); the same rule with scipy.signal.
    rng = np.random.default_rng(9)
    grid = np.round(np.arange(20.0, 24.9999, 0.25), 4)
    ln_i = np.log(iv_current_a(grid[None, :], np.array([[22.0], [22.5]]))) + 0.01 * rng.standard_normal((2, 20))
    k = _knee(ln_i, 0.25)
    _check_knee_rule(k, ln_i, 0.25)
    assert k.windows.tolist() == [5, 5]


def _knee_at(windows, peak_index):
    return _Knee(noise=None, windows=np.asarray(windows), deriv=None, peak_index=np.asarray(peak_index),
                 sigma_d=None, interior=None)


def test_leakage_line_and_its_covariance_against_numpy_polyfit():
    # The straight line through ln I over the points more than ceil(0.3 V / dV) + window points below the knee
    # (all points before index p - 6 - w on a 50 mV grid), expanded about the first point excluded, v0, with the
    # covariance scaled by chi2 / (n - 2): numpy.polyfit(cov=True) on the same points. Its one-sigma error of
    # ln I_leak at V is the delta method, sqrt(J C J^T) with J = (V - v0, 1). Row 0: 40 points; row 1: exactly
    # MIN_LEAKAGE_POINTS (8) are enough; row 2: 7 are not (NaN, 0 points).
    rng = np.random.default_rng(6)
    ln_i = np.log(1e-10) + 0.3 * (GRID_V - 20.0) + 0.02 * rng.standard_normal((3, GRID_V.size))
    windows, peak = np.array([9, 5, 5]), np.array([55, 19, 18])
    leak = _fit_leakage(np.broadcast_to(GRID_V, ln_i.shape), ln_i, _knee_at(windows, peak), 0.05)
    ends = peak - 6 - windows
    assert ends.tolist() == [40, 8, 7] and leak.points.tolist() == [40, 8, 0]
    np.testing.assert_array_equal(leak.v0, GRID_V[ends])
    assert np.isnan(leak.a[2]) and np.isnan(leak.b[2])
    v = np.array([21.0, 24.5, 26.0])
    for i in (0, 1):
        x = GRID_V[:ends[i]] - GRID_V[ends[i]]
        (b, a), cov = np.polyfit(x, ln_i[i, :ends[i]], 1, cov=True)
        assert (leak.a[i], leak.b[i]) == pytest.approx((a, b), rel=1e-9)
        np.testing.assert_allclose(leak.cov[i], cov[::-1, ::-1], rtol=1e-9)
        dx = v - GRID_V[ends[i]]
        err = np.sqrt(cov[1, 1] + 2 * dx * cov[0, 1] + dx * dx * cov[0, 0])
        np.testing.assert_allclose(leak.ln_rel_err(np.broadcast_to(v, (3, 3)))[i], err, rtol=1e-9)
        np.testing.assert_allclose(leak.ln_current(np.broadcast_to(v, (3, 3)))[i], a + b * dx, rtol=1e-12)
    assert np.all(leak.ln_current(np.broadcast_to(v, (3, 3)))[2] == -np.inf)
