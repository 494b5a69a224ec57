"""calibration.ivpeaks: the second-derivative method's pilot, window and search region.

Checks added for mutation testing, against scipy.signal (Savitzky-Golay filters and their coefficients).
"""

import numpy as np
import pytest
from scipy.signal import savgol_coeffs, savgol_filter

from compensator.calibration.synthetic import simulate_iv
from iv_model import spy_on_the_peak_fit

# No numpy RuntimeWarning may reach the user (see tests/test_calibration_iv_mutation.py).
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

GRID_V = np.round(np.arange(20.0, 31.0001, 0.05), 4)  # 221 points


def test_second_derivative_window_and_peak_follow_the_documented_rule_with_scipy(monkeypatch):
    # The rule of calibration.iv's docstring for the second derivative, rebuilt here with scipy.signal: a pilot
    # cubic Savitzky-Golay d2 ln I/dV2 over the widest window (the odd number at most n / 4: 55 points) gives the
    # peak height over the knee's interior points up to half a (first-derivative) window above the knee; the
    # window is the narrowest odd width >= 5 whose noise gain noise ||savgol_coeffs(w, 3, deriv=2)|| / dV^2 is
    # at most 50 % of that height; the peak is the maximum of d2 with that window at least half of it from both
    # ends and not above the same upper end; the parabola is weighted by that noise gain. The knee (its window,
    # peak, noise and interior) is ivknee's, pinned against scipy in tests/test_calibration_ivknee_mutation.py.
    import compensator.calibration.iv as iv_module

    seen = spy_on_the_peak_fit(monkeypatch)
    rng = np.random.default_rng(21)
    rows = [(24.2, 0.001, 2e-10), (24.5, 0.005, 2e-10), (24.8, 0.01, 2e-10), (25.1, 0.02, 2e-10),
            (24.4, 0.05, 2e-10), (24.7, 0.1, 2e-10), (24.5, 0.01, 2e-12), (24.6, 0.01, 2e-8)]
    current = np.vstack([simulate_iv(rng, GRID_V, [vbd], relative_noise=noise, geiger_scale_v=1.0,
                                     leakage_a=leak)[0] for vbd, noise, leak in rows])
    current[0, 150] *= np.exp(2.0)  # a spike at 27.5 V: d2 ln I/dV2 beside it exceeds its maximum below the knee
    # an upturn of ln I by 8 (V - 29 V)^2 above 29 V: the pilot's d2 there exceeds its maximum up to the knee
    current[6] *= np.exp(8.0 * np.clip(GRID_V - 29.0, 0.0, None) ** 2)
    # two curves built from ln I: a soft knee (d ln I/dV a Gaussian of 2 V width and height 1 per volt above 0.2
    # per volt) and a cubic upturn at the end of the sweep (d2 grows to the end)
    v = GRID_V - 20.0
    slope = 0.2 + 1.0 * np.exp(-0.5 * ((v - 5.5) / 2.0) ** 2)
    soft = np.log(1e-9) + np.concatenate(([0.0], np.cumsum(0.5 * (slope[1:] + slope[:-1]) * 0.05)))
    late = np.log(1e-9) + 2.0 * np.clip(v - 9.0, 0.0, None) ** 3
    current = np.vstack([current, np.exp([soft, late])])
    res = iv_module.find_breakdown(GRID_V, current, "second-derivative")
    ln_i, knee = seen["ln_i"], seen["knee"]
    n, w_max = GRID_V.size, 55
    cut = 0
    heights, above = [], []
    gain = {w: np.linalg.norm(savgol_coeffs(w, 3, deriv=2, delta=0.05)) for w in range(5, w_max + 1, 2)}
    for i in range(current.shape[0]):
        hi = min(knee.peak_index[i] + knee.windows[i] // 2, n - 1)
        region = knee.interior[i] & (np.arange(n) <= hi)
        pilot2 = savgol_filter(ln_i[i], w_max, 3, deriv=2, delta=0.05, mode="nearest")
        height = max(np.max(pilot2[region]), 1e-12)
        heights.append(height)
        above.append(np.max(pilot2[knee.interior[i] & ~region], initial=-np.inf))
        window = min([w for w in gain if knee.noise[i] * gain[w] <= 0.5 * height] or [w_max])
        assert 2 * seen["half"][i] + 1 == window, i
        h2 = window // 2
        d2 = savgol_filter(ln_i[i], window, 3, deriv=2, delta=0.05, mode="nearest")
        lo2, hi2 = h2, min(hi, n - h2 - 1)
        assert seen["p"][i] == lo2 + int(np.argmax(d2[lo2:hi2 + 1])), i
        assert seen["sigma"][i] == pytest.approx(knee.noise[i] * gain[window], rel=1e-12)
        cut += int(np.argmax(d2[h2:n - h2]) + h2 > hi2)
    assert len(set(seen["half"].tolist())) >= 3 and cut >= 1
    assert above[6] > 1.3 * heights[6] and max(heights) > 1.5 * min(heights)
    # the soft knee is found although its d2 peak is below 1 per volt squared; the upturn's d2 is cut half a
    # window before the end
    soft_row, late_row = len(rows), len(rows) + 1
    assert res.reason[soft_row] == "" and 0.0 < seen["top"][soft_row] < 1.0
    assert seen["p"][late_row] == GRID_V.size - seen["half"][late_row] - 1


def test_log_derivative_peak_weights_and_correlation_factor(monkeypatch):
    # The log-derivative-peak method fits its parabola to the smoothed d ln I/dV of the knee's window and scales
    # the vertex error by sqrt(window / 2) for the correlation of neighbouring smoothed points, as the second
    # derivative does (calibration.iv's docstring); a noisy curve gets a wider window than a quiet one.
    import compensator.calibration.iv as iv_module

    seen = {}
    real_fit = iv_module._fit_peak

    def spy_fit(grid, values, p, half, sigma, corr, out):
        seen.update(half=half.copy(), sigma=sigma.copy(), corr=corr.copy())
        return real_fit(grid, values, p, half, sigma, corr, out)

    monkeypatch.setattr(iv_module, "_fit_peak", spy_fit)
    rng = np.random.default_rng(9)
    current = simulate_iv(rng, GRID_V, np.array([24.2, 24.8]), relative_noise=np.array([[0.005], [0.2]]),
                          geiger_scale_v=1.0)
    r = iv_module.find_breakdown(GRID_V, current, "log-derivative-peak")
    windows = 2 * seen["half"] + 1
    assert windows.tolist() == r.window_points.tolist() and windows[1] > windows[0]
    for i, w in enumerate(windows):
        assert seen["corr"][i] == pytest.approx(np.sqrt(w / 2.0), rel=1e-12)
