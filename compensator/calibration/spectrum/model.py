"""The binned likelihood model of a charge spectrum and its fitter.

Expected counts per bin (Gaussian peaks integrated over each bin, amplitudes
from the amplitude model) with their Jacobian, the Poisson deviance, and the
bounded fits (``scipy.optimize.least_squares`` on deviance residuals; a
Fisher-scoring Levenberg-Marquardt iteration for free amplitudes).
"""

from __future__ import annotations

import numpy as np
from scipy import optimize, special

from compensator.calibration.spectrum.amplitudes import AMPLITUDE_MODEL_TABLE, AMPLITUDE_MODELS

__all__ = ["AMPLITUDE_MODELS", "MAX_PEAKS"]

#: Most peaks a model carries (pedestal included); keeps the fit bounded in time.
MAX_PEAKS = 64

_SQRT_2PI = np.sqrt(2.0 * np.pi)


#: Peaks are evaluated within this many standard deviations of their centre
#: (the bin integral beyond is below 1e-17 of the peak).
_BAND_SIGMAS = 8.5


def _banded_shapes(edges, means, sigmas):
    """Bin integrals of unit Gaussians and their derivatives, near each peak only.

    Returns flat arrays over the (peak, bin) pairs within ``_BAND_SIGMAS`` of
    each peak: peak index, bin index, the bin integral and its derivatives
    with respect to the peak mean and width.
    """
    n_edges = edges.size
    lo = np.maximum(np.searchsorted(edges, means - _BAND_SIGMAS * sigmas) - 1, 0)
    hi = np.minimum(np.searchsorted(edges, means + _BAND_SIGMAS * sigmas) + 1, n_edges)
    lengths = np.maximum(hi - lo, 0)
    total = int(lengths.sum())
    peak = np.repeat(np.arange(means.size), lengths)
    starts = np.cumsum(lengths) - lengths
    edge = np.arange(total) - np.repeat(starts - lo, lengths)
    inv = 1.0 / sigmas[peak]
    u = (edges[edge] - means[peak]) * inv
    cdf = special.ndtr(u)
    pdf = np.exp(-0.5 * u * u) / _SQRT_2PI
    upd = u * pdf
    same = peak[1:] == peak[:-1]  # consecutive edges of one peak bound a bin
    shape = (cdf[1:] - cdf[:-1])[same]
    d_mean = -((pdf[1:] - pdf[:-1]) * inv[1:])[same]
    d_sigma = -((upd[1:] - upd[:-1]) * inv[1:])[same]
    return peak[:-1][same], edge[:-1][same], shape, d_mean, d_sigma


class _Model:
    """Expected counts per bin and their Jacobian for one amplitude model (see :mod:`.amplitudes`)."""

    def __init__(self, edges, n_peaks, method):
        self.edges = edges
        self.n_bins = edges.size - 1
        self.kind = AMPLITUDE_MODEL_TABLE[method]
        first = self.kind.first_peak  # no pedestal peak in a dark-count spectrum
        self.n = np.arange(first, first + n_peaks, dtype=float)
        self.method = method

    def amplitudes(self, p):
        """The peak amplitudes and their derivatives (:class:`~.amplitudes.Amplitudes`)."""
        return self.kind.amplitudes(self.n, p[4:])

    def __call__(self, p, jac=True):
        q0, g, s0, s1 = p[:4]
        sig = np.sqrt(s0 * s0 + self.n * s1 * s1)
        k, i, shape, d_mean, d_sigma = _banded_shapes(self.edges, q0 + self.n * g, sig)
        amp, columns = self.amplitudes(p)
        B = self.n_bins

        def column(weights, values):
            return np.bincount(i, weights=weights[k] * values, minlength=B)

        m = column(amp, shape)
        if not jac:
            return m, None
        cols = [
            column(amp, d_mean),
            column(amp * self.n, d_mean),
            column(amp * s0 / sig, d_sigma),
            column(amp * self.n * s1 / sig, d_sigma),
        ]
        if columns is not None:
            cols += [column(weights, shape) for weights in columns]
            return m, np.column_stack(cols)
        J = np.zeros((B, 4 + self.n.size))
        J[:, :4] = np.column_stack(cols)
        J[i, 4 + k] = shape
        return m, J


def _fisher(J, weights):
    """``J^T diag(weights) J`` by plain loops (numpy.einsum without BLAS).

    The matrices are small; a threaded BLAS on a busy machine costs far more
    in synchronisation than it saves here.
    """
    return np.einsum("ij,ik->jk", J * weights[:, None], J)


def _deviance_terms(m, c):
    """Per-bin Poisson deviance 2 (m - c + c ln(c/m)), safe for c = 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t = m - c + special.xlogy(c, c) - special.xlogy(c, m)
    return 2.0 * np.maximum(t, 0.0)


def _fit(edges, c, start, method):
    """Maximum-likelihood fit on the rescaled axis; returns (p, cov, m, nfev)."""
    K = _peaks_needed(edges, start["pedestal"], start["gain"], method, start["sigma0"], start["sigma1"])
    model = _Model(edges, K, method)
    total = float(c.sum())
    g0 = start["gain"]
    p0 = [start["pedestal"], g0, start["sigma0"], start["sigma1"]]
    bw = float(np.median(np.diff(edges)))
    lo = [edges[0] - g0, 0.3 * g0, 1e-3 * min(g0, bw), 0.0]
    hi = [edges[-1], 3.0 * g0, 5.0 * g0, 5.0 * g0]
    own = model.kind.bounds(dict(start, total=total), K,
                            lambda params: model(np.array([*p0, *params]), jac=False)[0].sum())
    p0 += own.start
    lo += own.lower
    hi += own.upper
    lo, hi = np.asarray(lo, dtype=float), np.asarray(hi, dtype=float)
    margin = 1e-6 * np.minimum(np.where(np.isfinite(hi), hi - lo, 1.0), 1.0)
    p0 = np.clip(np.asarray(p0, dtype=float), lo + margin, hi - margin)
    tiny = 1e-12 * total / c.size

    cache = {}

    def evaluate(p):
        key = p.tobytes()
        if key not in cache:
            cache.clear()
            m, J = model(p)
            cache[key] = (np.maximum(m, tiny), J)
        return cache[key]

    def resid(p):
        m, _ = evaluate(p)
        d = _deviance_terms(m, c)
        return np.sign(c - m) * np.sqrt(d)

    def jac(p):
        m, J = evaluate(p)
        r = np.sign(c - m) * np.sqrt(_deviance_terms(m, c))
        with np.errstate(divide="ignore", invalid="ignore"):
            drdm = (m - c) / (m * r)
        close = np.abs(r) < 1e-6
        drdm[close] = -1.0 / np.sqrt(m[close])
        return J * drdm[:, None]

    if model.kind.optimiser == "fisher_scoring":
        p, nfev = _fisher_scoring(model, p0, lo, hi, c, tiny)
    else:
        res = optimize.least_squares(
            resid, p0, jac=jac, bounds=(lo, hi), method="trf", x_scale="jac",
            xtol=1e-10, ftol=1e-10, gtol=1e-10, max_nfev=200,
        )
        p, nfev = res.x, res.nfev
    m, J = model(p)
    m = np.maximum(m, tiny)
    fisher = _fisher(J, 1.0 / m)
    try:
        cov = np.linalg.inv(fisher)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(fisher)
    return p, cov, m, nfev, model


def _fisher_scoring(model, p0, lo, hi, c, tiny, max_eval=200):
    """Bounded Levenberg-Marquardt on the Poisson likelihood with the Fisher matrix.

    Used for free amplitudes (one parameter per peak): it solves the small
    normal equations ``(F + l diag F) d = -g`` with ``F = J^T diag(1/m) J``
    and ``g = J^T (1 - c/m)`` instead of factorising the tall Jacobian, which
    is several times faster for tens of parameters. Steps are clipped to the
    bounds; ``l`` shrinks after a successful step and grows after a failed
    one. Stops when the log-likelihood gains less than 1e-6 in a step (a
    thousandth of a standard deviation of any parameter).

    Returns (parameters, number of model evaluations).
    """
    def nll(m):
        return float(np.sum(m - special.xlogy(c, m)))

    p = p0.copy()
    m, J = model(p)
    m = np.maximum(m, tiny)
    f = nll(m)
    lam = 1e-3
    n_eval = 1
    while n_eval < max_eval:
        g = np.einsum("ij,i->j", J, 1.0 - c / m)
        F = _fisher(J, 1.0 / m)
        d = np.diag(F).copy()
        d[d <= 0] = 1.0
        improved = False
        while n_eval < max_eval and lam < 1e12:
            try:
                step = np.linalg.solve(F + lam * np.diag(d), -g)
            except np.linalg.LinAlgError:
                lam *= 10.0
                continue
            trial = np.clip(p + step, lo, hi)
            m_t, J_t = model(trial)
            m_t = np.maximum(m_t, tiny)
            n_eval += 1
            f_t = nll(m_t)
            if f_t < f:
                gain = f - f_t
                p, m, J, f = trial, m_t, J_t, f_t
                lam = max(lam / 3.0, 1e-9)
                improved = True
                break
            lam *= 4.0
        if not improved or gain < 1e-6:
            break
    return p, n_eval


def _peaks_needed(edges, pedestal, gain, method="gpoisson", sigma0=0.0, sigma1=0.0):
    """Number of peaks (n = 0 .. K-1) the model carries.

    With generalised-Poisson amplitudes, peaks up to two spacings past the last
    bin (their tails reach into the histogram). A free amplitude needs its peak
    centre inside the histogram, or at most one peak width past its end, else
    nothing constrains it.
    """
    if AMPLITUDE_MODEL_TABLE[method].peaks_inside:
        n = np.arange(MAX_PEAKS)
        inside = pedestal + n * gain <= edges[-1] + np.sqrt(sigma0**2 + n * sigma1**2)
        return int(np.clip(np.count_nonzero(inside), 2, MAX_PEAKS))
    return int(np.clip(np.ceil((edges[-1] - pedestal) / gain) + 2, 2, MAX_PEAKS))


def _best_fit(xs, edges, c, start, amplitudes):
    """Fit from the start values, then from the alternatives that can beat it.

    * A weak pedestal (large mean_pe, few events) can be missed, making the
      one-photoelectron peak look like the pedestal: if more events sit one
      spacing below the pedestal than the fit explains, the labelling shifted
      by one peak is fitted too.
    * If the fit is poor (deviance above ndf by more than five standard
      deviations), starts at twice and half the spacing are fitted too.
    * If the fitted spacing needs more peaks to cover the histogram than the
      start gave, the fit is repeated from the fitted values with enough peaks.

    The fit with the smallest deviance (the largest likelihood; the
    alternatives have the same number of parameters) wins.
    """
    total = float(c.sum())

    def run(sv):
        out = _fit(edges, c, sv, amplitudes)
        return float(np.sum(_deviance_terms(out[2], c))), out

    best_dev, best = run(start)
    alternatives = []
    g, q0 = start["gain"], start["pedestal"]
    m = best[2]
    win = (xs >= q0 - 1.5 * g) & (xs < q0 - 0.5 * g)
    below, expected = float(c[win].sum()), float(m[win].sum())
    if AMPLITUDE_MODEL_TABLE[amplitudes].relabel_pedestal and below >= 2.0 \
            and below > expected + 3.0 * np.sqrt(expected):
        alternatives.append(dict(start, pedestal=q0 - g, mean_pe=float(-np.log(below / total))))
    ndf = c.size - best[0].size
    if best_dev > ndf + 5.0 * np.sqrt(2.0 * max(ndf, 1)):
        for factor in (2.0, 0.5):
            alternatives.append(dict(start, gain=g * factor, sigma0=min(start["sigma0"], 0.3 * g * factor),
                                     sigma1=min(start["sigma1"], 0.2 * g * factor)))
    for sv in alternatives:
        dev, out = run(sv)
        if dev < best_dev:
            best_dev, best = dev, out
    p, model = best[0], best[4]
    if _peaks_needed(edges, p[0], p[1], amplitudes, abs(p[2]), abs(p[3])) > model.n.size:
        sv = dict(start, pedestal=float(p[0]), gain=float(p[1]), sigma0=float(abs(p[2])),
                  sigma1=float(max(abs(p[3]), 1e-3 * p[1])))
        sv.update(model.kind.restart(p[4:]))
        dev, out = run(sv)
        if dev < best_dev:
            best_dev, best = dev, out
    return best
