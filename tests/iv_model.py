"""The joint fit's model of ln I written out independently, for checks against scipy.optimize.least_squares."""

import numpy as np


def joint_model_residuals(theta, bias, ln_i):
    """ln I minus the model ln(exp(a + b x) + exp(c + k ln x + (g + h x) x)), x = V - Vbd (no avalanche below Vbd).

    ``theta`` is (Vbd, c, k, g, a, b) or (Vbd, c, k, g, a, b, h) as in calibration.ivjoint's docstring.
    """
    vb, c, k, g, la, b = theta[:6]
    h = theta[6] if theta.size > 6 else 0.0
    xr = bias - vb
    x = np.where(xr > 0, xr, 1.0)
    aval = np.where(xr > 0, np.exp(c + k * np.log(x) + (g + h * x) * x), 0.0)
    return ln_i - np.log(np.exp(la + b * xr) + aval)
