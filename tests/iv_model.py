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


def spy_on_the_peak_fit(monkeypatch):
    """Record what calibration.iv hands to the second-derivative search and the peak's parabola fit.

    Returns the dict the spies fill: ``ln_i``, ``knee``, ``step_v`` (the search's inputs) and ``p``, ``half``,
    ``sigma``, ``corr``, ``top`` (each row's peak index, half-width, point error, correlation factor and the
    value at the peak) from the last call of each.
    """
    import compensator.calibration.iv as iv_module
    import compensator.calibration.ivpeaks as peaks

    seen = {}
    real_fit, real_d2 = peaks._fit_peak, peaks._second_derivative

    def spy_fit(grid, values, p, half, sigma, corr, out):
        seen.update(p=p.copy(), half=half.copy(), sigma=sigma.copy(), corr=corr.copy(),
                    top=values[np.arange(len(p)), p])
        return real_fit(grid, values, p, half, sigma, corr, out)

    def spy_d2(grid, ln_i, knee, step_v, out, reasons):
        seen.update(ln_i=ln_i.copy(), knee=knee, step_v=step_v)
        return real_d2(grid, ln_i, knee, step_v, out, reasons)

    monkeypatch.setattr(peaks, "_fit_peak", spy_fit)
    monkeypatch.setattr(iv_module, "_second_derivative", spy_d2)
    return seen
