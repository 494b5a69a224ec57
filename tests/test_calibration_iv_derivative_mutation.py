"""calibration.iv, the derivative method (``joint_fit=False``): its fit, window, errors and refusals.

Checks added for mutation testing, each against an independent library (numpy.polyfit, numpy.roots,
scipy.signal), a hand calculation or the scatter of repeated seeded curves.
"""

import numpy as np
import pytest
from scipy.signal import savgol_coeffs, savgol_filter

from compensator.calibration import iv

# No numpy RuntimeWarning may reach the user (see tests/test_calibration_iv_mutation.py).
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")


def _nearest_root_and_jacobian(coef):
    """Real root of the polynomial (numpy.roots, highest power first) nearest x = 0 and its gradient
    with respect to the coefficients, by central differences of numpy.roots."""

    def nearest(c):
        r = np.roots(c)
        r = r[np.abs(r.imag) < 1e-12].real
        return r[np.argmin(np.abs(r))]

    root = nearest(coef)
    grad = np.empty(coef.size)
    for j in range(coef.size):
        h = 1e-6 * max(abs(coef[j]), 1e-3)
        up, down = coef.copy(), coef.copy()
        up[j] += h
        down[j] -= h
        grad[j] = (nearest(up) - nearest(down)) / (2 * h)
    return root, grad


def test_ild_root_and_its_error_against_numpy_polyfit():
    # The root of the weighted parabola through 1/D nearest the window start, its error by the delta method from
    # the fit's covariance, scaled by max(chi2/ndf, 1); a weighted line where the parabola has no real root, does
    # not rise (a1 <= 0) or rests on fewer than 6 points. Against numpy.polyfit (weights 1/sigma, unscaled
    # covariance) and numpy.roots (the root, and its gradient by central differences). Rows: 0 errors claimed
    # 5x too small (the chi2 scale acts), 1 errors claimed 10x too large (no scale), 2 no real root, 3 five
    # points, 4 six points, 5 a parabola that falls at the start (its line's errors are claimed too small).
    from compensator.calibration.iv import _ild_root

    rng = np.random.default_rng(3)
    x = np.broadcast_to(np.arange(30) * 0.05, (6, 30)).copy()
    coef = np.array([(-0.05, 0.5, 0.02), (-0.05, 0.5, 0.02), (0.5, 0.1, 0.3), (-0.05, 0.5, 0.02),
                     (-0.05, 0.5, 0.02), (0.5, -0.1, -0.05)])  # c2, c1, c0
    y = np.array([np.polyval(c, xi) for c, xi in zip(coef, x)]) + 0.005 * rng.standard_normal(x.shape)
    sigma = np.array([0.001, 0.05, 0.01, 0.01, 0.01, 0.01])
    mask = np.ones(x.shape, dtype=bool)
    mask[3, 5:] = False
    mask[4, 6:] = False
    weights = np.broadcast_to((1.0 / sigma ** 2)[:, None], x.shape)
    r = _ild_root(x, np.where(mask, y, 0.0), np.where(mask, weights, 0.0), mask)
    assert r.n_used.tolist() == [30, 30, 30, 5, 6, 30]
    scales = []
    for i, parabola in enumerate([True, True, False, False, True, False]):
        xi, yi = x[i, mask[i]], y[i, mask[i]]
        degree = 2 if parabola else 1
        c, cov = np.polyfit(xi, yi, degree, w=np.full(xi.size, 1.0 / sigma[i]), cov="unscaled")
        root, grad = _nearest_root_and_jacobian(c)
        chi2 = np.sum(((yi - np.polyval(c, xi)) / sigma[i]) ** 2)
        scale = max(chi2 / (xi.size - degree - 1), 1.0)
        scales.append(scale)
        assert r.root[i] == pytest.approx(root, abs=1e-9), i
        assert r.var[i] == pytest.approx(grad @ cov @ grad * scale, rel=1e-5), i
        assert r.slope[i] == pytest.approx(c[-2], rel=1e-9), i
    assert scales[0] > 1.5 and scales[5] > 1.5 and scales[1] == scales[3] == 1.0


GRID_V = np.round(np.arange(20.0, 31.0001, 0.05), 4)  # 221 points


def _curves_for_the_window_rules():
    """ln I of four curves that reach each rule of the derivative method's fit window (noise seeded)."""
    from compensator.calibration.synthetic import iv_current_a, leakage_at_crossing_a

    rng = np.random.default_rng(8)
    power = [iv_current_a(GRID_V, vbd, geiger_scale_v=1.0, leakage_a=1e-30) for vbd in (24.5, 24.6, 30.0, 24.9)]
    # 0: a leakage that stops growing near 22.5 V: the line through ln I below the knee overstates it above, so
    # more than 80 % of the current at the knee is counted as leakage and the window moves up (leakage-limited);
    # the short window's root and the leakage's error both move its root
    leak0 = 1e-10 * np.exp(2.0 * (GRID_V - 20.0)) / (1.0 + np.exp(2.0 * (GRID_V - 22.5)))
    # 3: exponential leakage equal to the avalanche current 0.3 V above breakdown
    leak3 = leakage_at_crossing_a(0.3, exponent=2.0, geiger_scale_v=1.0, leakage_slope_per_v=0.5)
    leak = [leak0, 2e-10 * np.exp(0.05 * (GRID_V - 24.6)), 2e-10 * np.exp(0.05 * (GRID_V - 30.0)),
            leak3 * np.exp(0.5 * (GRID_V - 24.9))]
    # 1: noise of 0.5 in ln I asks for a 25-point window: two windows' worth of points exceed 2 V;
    # 2: breakdown 1 V before the end of the sweep: the window ends half a filter window before it
    sigma = np.array([0.005, 0.5, 0.002, 0.01])
    return np.log(np.array(power) + np.array(leak)) + sigma[:, None] * rng.standard_normal((4, GRID_V.size))


def test_ild_fit_window_weights_and_errors_follow_the_documented_rules(monkeypatch):
    # The derivative method's fit, rebuilt here from the module docstring with scipy.signal.savgol_filter: the
    # leakage fraction f = I_leak / I (I from the smoothing filter of the same window), the avalanche derivative
    # D = (d ln I/dV - b f) / (1 - f), the window from half a filter window above the knee (or the first point
    # above it with f <= 0.8), spanning max(2 V, two windows) and ending half a window before the end of the
    # sweep; 1/D weighted by D^4 (1 - f)^2 / sigma_d^2 (the error of 1/D is sigma_d / D^2, amplified by the
    # leakage subtraction by 1 / (1 - f)); the short window spans max(half the span, a window + 3 points);
    # the leakage shifted by its one-sigma error (f exp(err)). The result: breakdown and statistical error from
    # the full window; systematic part sqrt(max(dr^2 - (var_short - var_full), 0) + shift^2), dr the difference
    # of the short and full roots (nested fits: the variance of the difference is the difference of the
    # variances); exponent 1 / slope; the fit range; the leakage fraction at the start; the leakage-limited flag.
    # The knee and the leakage line come from ivknee (pinned against scipy and numpy.polyfit there).
    from compensator.calibration.ivknee import _fit_leakage, _knee

    calls = []
    real = iv._ild_root

    def spy(x, inv, weights, mask):
        r = real(x, inv, weights, mask)
        calls.append((x, inv, weights, mask, r))
        return r

    monkeypatch.setattr(iv, "_ild_root", spy)
    ln_i = _curves_for_the_window_rules()
    res = iv.find_breakdown(GRID_V, np.exp(ln_i), joint_fit=False)
    assert res.reason == ("",) * 4 and len(calls) == 3
    knee = _knee(ln_i, 0.05)
    leak = _fit_leakage(np.broadcast_to(GRID_V, ln_i.shape), ln_i, knee, 0.05)
    n = GRID_V.size
    spans = []
    for i in range(4):
        w, p, sigma_d = knee.windows[i], knee.peak_index[i], knee.sigma_d[i]
        h = w // 2
        smooth = savgol_filter(ln_i[i], w, 3, mode="nearest")
        dx = GRID_V - leak.v0[i]
        frac = np.exp(leak.a[i] + leak.b[i] * dx - smooth)
        d_av = (knee.deriv[i] - leak.b[i] * frac) / (1.0 - frac)
        start = next(j for j in range(p + h, n) if frac[j] <= 0.8)
        span = max(40, 2 * w)
        stop = min(start + span, n - h)
        short_stop = min(start + max(span // 2, w + 3), stop)
        spans.append((start - (p + h), stop - start, short_stop - start, n - h - stop))
        err = np.sqrt(leak.cov[i, 0, 0] + 2 * dx * leak.cov[i, 0, 1] + dx * dx * leak.cov[i, 1, 1])
        d_hi = (knee.deriv[i] - leak.b[i] * frac * np.exp(err)) / (1.0 - frac * np.exp(err))
        for (x, inv, weights, mask, _), d, end in zip(calls, (d_av, d_av, d_hi), (stop, short_stop, stop)):
            cols = np.arange(start, end)
            use = d[cols] > 0
            assert mask[i].tolist() == use.tolist() + [False] * (mask.shape[1] - cols.size), i
            np.testing.assert_allclose(x[i, :cols.size], GRID_V[cols] - GRID_V[start], atol=1e-12)
            np.testing.assert_allclose(inv[i, :cols.size][use], 1.0 / d[cols][use], rtol=1e-9)
            expected_w = d[cols] ** 4 * (1.0 - np.clip(frac[cols], 0.0, 0.99)) ** 2 / sigma_d ** 2
            np.testing.assert_allclose(weights[i, :cols.size][use], expected_w[use], rtol=1e-9)
        full, short, shifted = (c[4] for c in calls)
        assert res.breakdown_v[i] == pytest.approx(GRID_V[start] + full.root[i], abs=1e-12)
        assert res.breakdown_stat_err_v[i] == pytest.approx(np.sqrt(full.var[i]), rel=1e-12)
        window2 = max((short.root[i] - full.root[i]) ** 2 - max(short.var[i] - full.var[i], 0.0), 0.0)
        assert res.breakdown_sys_err_v[i] == pytest.approx(
            np.sqrt(window2 + (shifted.root[i] - full.root[i]) ** 2), rel=1e-9)
        assert res.exponent[i] == pytest.approx(1.0 / full.slope[i], rel=1e-12)
        assert (res.fit_lo_v[i], res.fit_hi_v[i]) == (GRID_V[start], GRID_V[stop - 1])
        assert res.leakage_fraction[i] == pytest.approx(frac[start], rel=1e-9)
        assert res.leakage_limited[i] == (start > p + h)
        if i == 0:  # both parts of the systematic error act
            assert window2 > 1e-5 and abs(shifted.root[i] - full.root[i]) > 0.01  # 11 mV and 41 mV here
    # each rule acts on some curve (points moved up by leakage, full and short span, points left before the end
    # of the sweep less half a window): 0 moved up; 1 two 25-point windows and a window + 3; 2 cut by the end
    assert knee.windows.tolist() == [5, 25, 5, 5]
    assert spans[0][0] > 0 and spans[1][:3] == (0, 50, 28) and spans[2][3] == 0 and spans[3][:3] == (0, 40, 20)
    assert res.leakage_limited.tolist() == [True, False, False, False]


def test_ild_statistical_error_covers_the_scatter_of_repeated_curves():
    # 300 noisy copies (2 % current noise, seeded) of one power-law curve, analysed by the derivative method
    # alone: the standard deviation of the breakdowns (the independent check, a Monte Carlo) must lie within
    # the reported statistical error (median over the curves) and not far below it. The reported error is
    # conservative by design: the fit treats the smoothed derivatives as independent points, while the noise
    # of a cubic Savitzky-Golay derivative is anticorrelated between neighbours (its coefficients sum to zero,
    # scipy.signal.savgol_coeffs), so repeated curves scatter by 0.74 to 0.81 of it over four seeds (measured;
    # 0.60 to 0.67 at 1 % noise). 300 samples resolve the ratio to about 4 %.
    from compensator.calibration.synthetic import simulate_iv

    rng = np.random.default_rng(2)
    r = iv.find_breakdown(GRID_V, simulate_iv(rng, GRID_V, np.full(300, 24.5), relative_noise=0.02),
                          joint_fit=False)
    assert r.ok.all() and not r.joint_fit.any()
    ratio = np.std(r.breakdown_v) / np.median(r.breakdown_stat_err_v)
    assert 0.65 <= ratio <= 0.95


def _ln_i_from_slope(slope_per_v):
    """ln I whose derivative is the given slope on GRID_V (trapezoidal integral, from 1 nA)."""
    steps = 0.5 * (slope_per_v[1:] + slope_per_v[:-1]) * 0.05
    return np.log(1e-9) + np.concatenate(([0.0], np.cumsum(steps)))


def _bump(centre, height_per_v, base_per_v=0.2):
    """d ln I/dV: a base plus a Gaussian knee of 10 points' width centred on a grid point."""
    j = np.arange(GRID_V.size)
    return base_per_v + height_per_v * np.exp(-0.5 * ((j - centre) / 10.0) ** 2)


def test_curves_on_each_refusal_boundary():
    # Curves built from their d ln I/dV, a Gaussian knee centred on a chosen point, whose smoothed derivative
    # (symmetric filter, symmetric knee) peaks on that point p; noise-free, so the window is 5 points (half 2)
    # on the 221-point grid. The rules: "peaks at the start" for p <= half + 1 = 3; "still rising at the end"
    # for p >= n - half - 2 = 217; the fit needs 4 points between p + half and n - half (exclusive): p = 214
    # leaves 3, p = 213 four. Each point on and beside its boundary, with the bias the reason names.
    rows = {3: "no breakdown in range: d ln I/dV peaks at the start of the sweep (20 V)",
            4: "",
            217: "no breakdown in range: d ln I/dV is still rising at the end of the sweep (31 V)",
            216: "no breakdown in range: too few points above the knee at 30.8 V for the fit (1; need 4) before "
                 "the end of the sweep at 31 V",
            214: "no breakdown in range: too few points above the knee at 30.7 V for the fit (3; need 4) before "
                 "the end of the sweep at 31 V",
            213: ""}
    ln_i = np.array([_ln_i_from_slope(_bump(p, 20.0)) for p in rows])
    r = iv.find_breakdown(GRID_V, np.exp(ln_i), joint_fit=False)
    assert r.reason == tuple(rows.values())
    assert r.window_points.tolist() == [5] * len(rows)
    # Leakage that stops growing (as in _curves_for_the_window_rules) while the line through ln I below the knee
    # does not: where that line exceeds 80 % of the current everywhere above the knee no point is left for the
    # fit; where it bends 1/D down above the knee the fit falls. Analysed beside a plain curve.
    from compensator.calibration.synthetic import iv_current_a

    power = iv_current_a(GRID_V, 24.5, geiger_scale_v=1.0, leakage_a=1e-30)
    leaks = [level * np.exp(b * (GRID_V - 20.0)) / (1.0 + np.exp(b * (GRID_V - stop)))
             for level, b, stop in ((3e-10, 2.0, 23.0), (1e-9, 2.5, 22.0))]
    r = iv.find_breakdown(GRID_V, np.vstack([power + leaks[0], power + leaks[1], iv_current_a(GRID_V, 24.5)]),
                          joint_fit=False)
    assert r.reason == ("no breakdown in range: too few points above the knee at 25.05 V for the fit (0; need 4) "
                        "before the end of the sweep at 31 V",
                        "no breakdown in range: 1/(d ln I/dV) does not rise above the knee", "")
    # The knee must stand 5 sigma above the noise of the smoothed derivative: the same seeded noise of 0.3 in
    # ln I on a weak knee (0.345 and 0.37 per volt above a base of 0.3 per volt) asks for the widest window,
    # 55 points, where the peak is 4.93 and 5.11 times sigma_d = noise ||savgol_coeffs(55, 3, deriv=1)|| / dV
    # (scipy.signal), the noise from 1.4826 MAD of the second differences / sqrt(6).
    noise = 0.3 * np.random.default_rng(1).standard_normal(GRID_V.size)
    weak = np.array([_ln_i_from_slope(_bump(110, h, 0.3)) + noise for h in (0.345, 0.37)])
    r = iv.find_breakdown(GRID_V, np.exp(weak), joint_fit=False)
    assert r.reason == ("no breakdown in range: no significant knee in d ln I/dV above the noise", "")
    assert r.window_points.tolist() == [55, 55]
    gain = np.linalg.norm(savgol_coeffs(55, 3, deriv=1, delta=0.05))
    ratios = []
    for row in weak:
        d2 = np.diff(row, 2)
        sigma_d = 1.4826 * np.median(np.abs(d2 - np.median(d2))) / np.sqrt(6.0) * gain
        deriv = savgol_filter(row, 55, 3, deriv=1, delta=0.05)
        assert 27 + np.argmax(deriv[27:194]) == 111
        ratios.append(deriv[111] / sigma_d)
    assert 4.85 < ratios[0] < 5.0 < ratios[1] < 5.15


@pytest.mark.parametrize("method", iv.METHODS)
def test_rows_on_their_own_grids_give_what_each_gives_alone(method):
    # A batch of curves each on its own bias row (two of one step, one shifted by 13 mV, one of another step,
    # which is analysed in its own group) gives for every curve what the curve gives alone, for each method
    # with the derivative method alone (joint_fit=False).
    from compensator.calibration.synthetic import simulate_iv

    rng = np.random.default_rng(5)
    grids = [GRID_V, GRID_V + 0.013, np.round(np.arange(20.0, 31.0001, 0.04), 4)[:GRID_V.size], GRID_V]
    truth = [24.4, 24.6, 24.5, 24.9]
    current = np.vstack([simulate_iv(rng, g, [t], relative_noise=0.005, geiger_scale_v=1.0)[0]
                         for g, t in zip(grids, truth)])
    batch = iv.find_breakdown(np.vstack(grids), current, method, joint_fit=False)
    assert batch.ok.all()
    for i, g in enumerate(grids):
        alone = iv.find_breakdown(g, current[i], method, joint_fit=False)
        for name in ("breakdown_v", "breakdown_err_v", "fit_lo_v", "fit_hi_v", "leakage_current_a"):
            assert getattr(batch, name)[i] == pytest.approx(getattr(alone, name)[0], rel=1e-12, abs=1e-15), name
        assert batch.window_points[i] == alone.window_points[0]
