"""calibration.iv, the derivative method (``joint_fit=False``): its fit, window, errors and refusals.

Checks added for mutation testing, each against an independent library (numpy.polyfit, numpy.roots,
scipy.signal), a hand calculation or the scatter of repeated seeded curves.
"""

import numpy as np
import pytest

from compensator.calibration import iv


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
