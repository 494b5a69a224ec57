"""The amplitude models of the spectrum fit, as a table of model objects.

Every model turns its own parameters (after the four shared ones: pedestal,
gain, sigma0, sigma1) into the amplitude of each peak, gives the derivatives
of the amplitudes with respect to its parameters (the Jacobian columns),
its start values and bounds, the start values of a refit from a solution,
and the mean photoelectrons and crosstalk branching ratio of a solution.

``gpoisson``
    Generalised Poisson (Vinogradov, NIM A 695, 247, 2012): parameters
    ``n_total``, ``mean_pe`` (mu), ``crosstalk`` (lambda); peaks from n = 0.
``borel``
    A dark-count spectrum without a pedestal: one primary per event, the
    Borel distribution of the cells fired; parameters ``n_total``,
    ``crosstalk``; peaks from n = 1.
``free``
    One free amplitude per peak; mu and lambda follow from the amplitudes
    (``mu = -ln(A0 / sum A)``, ``lambda = 1 - mu / <n>``) with propagated errors.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from scipy import special

from compensator.errors import ModelError
from compensator.physics.counting import generalized_poisson_pmf

__all__ = ["AMPLITUDE_MODEL_TABLE", "AMPLITUDE_MODELS", "AmplitudeModel", "Moments"]

#: Upper bound of the branching ratio in a fit.
LAMBDA_MAX = 0.95


class Amplitudes(NamedTuple):
    """Peak amplitudes and their derivatives.

    ``columns`` holds d amplitude / d parameter, one row per model parameter
    (shape ``(n_parameters, n_peaks)``), or None when every peak has its own
    free amplitude (the derivative is then one for its own peak).
    """

    amplitude: np.ndarray
    columns: np.ndarray | None


class Bounds(NamedTuple):
    """Start values, lower and upper bounds of a model's own parameters."""

    start: list
    lower: list
    upper: list


class Moments(NamedTuple):
    """Mean primary photoelectrons and crosstalk branching ratio of a solution, with one-sigma errors."""

    mean_pe: float
    mean_pe_err: float
    branching_ratio: float
    branching_ratio_err: float


def _borel_log_terms(n, lam):
    """log P(n) and d log P/d lam for n >= 1 (lam > 0 assumed)."""
    logp = -lam * n + (n - 1.0) * np.log(lam * n) - special.gammaln(n + 1.0)
    return logp, (n - 1.0) / lam - n


def _gp_log_terms(n, mu, lam):
    """log P(n), d log P/d mu, d log P/d lam for the fit (mu > 0 assumed)."""
    s = mu + n * lam
    logp = np.log(mu) + (n - 1.0) * np.log(s) - mu - n * lam - special.gammaln(n + 1.0)
    dmu = 1.0 / mu + (n - 1.0) / s - 1.0
    dlam = n * (n - 1.0) / s - n
    return logp, dmu, dlam


@dataclass(frozen=True, kw_only=True)
class AmplitudeModel:
    """One amplitude model (the base: subclasses fill in the methods).

    Attributes
    ----------
    name : str
        The name ``fit_spectrum(amplitudes=...)`` takes.
    first_peak : int
        Number of fired cells of the first peak (0: the pedestal; 1 without one).
    optimiser : {"least_squares", "fisher_scoring"}
        Which fitter suits the model (Fisher scoring for many free amplitudes).
    peaks_inside : bool
        Every peak needs its centre inside the histogram (a free amplitude
        is otherwise unconstrained); else peaks reach two spacings past it.
    relabel_pedestal : bool
        A missed weak pedestal is tried by refitting with the labels shifted by one peak.
    seeded_by : str or None
        The model whose solution gives this one's start values (it cannot
        find the peak labelling itself).
    no_peak_reason : str
        Why a solution without a peak beyond the first cannot give a gain.
    """

    name: str
    first_peak: int = 0
    optimiser: str = "least_squares"
    peaks_inside: bool = False
    relabel_pedestal: bool = False
    seeded_by: str | None = None
    no_peak_reason: str = "no photoelectron peak beyond the pedestal"

    def prepare_start(self, start: dict) -> dict:
        """The start values of the shared search adapted to this model."""
        return start

    def amplitudes(self, n, params) -> Amplitudes:
        """Amplitudes of the peaks ``n`` from the model's parameters ``params`` (after the shared four)."""
        raise NotImplementedError

    def bounds(self, start: dict, n_peaks: int, normalisation) -> Bounds:
        """Start values and bounds of the model's own parameters.

        Parameters
        ----------
        start : dict
            Start values of the search (``gain``, ``mean_pe``, ``crosstalk``,
            ``total`` events ...).
        n_peaks : int
            Peaks the model carries.
        normalisation : callable
            ``normalisation(params)``: the model's expected events inside the
            histogram for the given own parameters with ``n_total = 1``.

        Returns
        -------
        Bounds
        """
        raise NotImplementedError

    def restart(self, params) -> dict:
        """Start values of a refit from the solution's own parameters."""
        return {}

    def moments(self, params, errors, amplitude, covariance) -> Moments:
        """Mean photoelectrons and branching ratio of a solution.

        Parameters
        ----------
        params, errors : ndarray
            The model's own parameters and their one-sigma errors.
        amplitude : ndarray
            The peak amplitudes of the solution.
        covariance : ndarray
            Covariance of the model's own parameters.

        Returns
        -------
        Moments
        """
        raise NotImplementedError

    def parameter_names(self, n_peaks: int) -> tuple:
        """Names of the model's own parameters."""
        raise NotImplementedError


@dataclass(frozen=True, kw_only=True)
class _GeneralisedPoisson(AmplitudeModel):
    def amplitudes(self, n, params):
        total, mu, lam = params[0], params[1], params[2]
        logp, dmu, dlam = _gp_log_terms(n, mu, lam)
        prob = np.exp(logp)
        amp = total * prob
        return Amplitudes(amp, np.stack([prob, amp * dmu, amp * dlam]))

    def bounds(self, start, n_peaks, normalisation):
        mu0, lam0 = start["mean_pe"], start["crosstalk"]
        frac = normalisation([1.0, mu0, lam0])
        return Bounds([start["total"] / max(frac, 1e-3), mu0, lam0], [0.0, 1e-4, 0.0], [np.inf, 200.0, LAMBDA_MAX])

    def restart(self, params):
        return {"mean_pe": float(params[1]), "crosstalk": float(min(max(params[2], 0.01), 0.9))}

    def moments(self, params, errors, amplitude, covariance):
        return Moments(float(params[1]), float(errors[1]), float(params[2]), float(errors[2]))

    def parameter_names(self, n_peaks):
        return ("n_total", "mean_pe", "crosstalk")


@dataclass(frozen=True, kw_only=True)
class _Borel(AmplitudeModel):
    def prepare_start(self, start):
        # the first peak is one fired cell; the zero-cell position lies one
        # spacing below it; P(1) = exp(-lambda)
        g0, s0, s1 = start["gain"], start["sigma0"], start["sigma1"]
        return dict(start, pedestal=start["pedestal"] - g0,
                    sigma0=float(np.sqrt(max(s0**2 - s1**2, (0.03 * g0) ** 2))),
                    crosstalk=float(np.clip(start["mean_pe"], 0.01, 0.9)))

    def amplitudes(self, n, params):
        total, lam = params[0], params[1]
        logp, dlam = _borel_log_terms(n, lam)
        prob = np.exp(logp)
        amp = total * prob
        return Amplitudes(amp, np.stack([prob, amp * dlam]))

    def bounds(self, start, n_peaks, normalisation):
        lam0 = start["crosstalk"]
        frac = normalisation([1.0, lam0])
        return Bounds([start["total"] / max(frac, 1e-3), lam0], [0.0, 1e-6], [np.inf, LAMBDA_MAX])

    def restart(self, params):
        return {"crosstalk": float(min(max(params[1], 0.01), 0.9))}

    def moments(self, params, errors, amplitude, covariance):
        return Moments(float("nan"), float("nan"), float(params[1]), float(errors[1]))

    def parameter_names(self, n_peaks):
        return ("n_total", "crosstalk")


@dataclass(frozen=True, kw_only=True)
class _Free(AmplitudeModel):
    def amplitudes(self, n, params):
        return Amplitudes(np.asarray(params, dtype=float), None)

    def bounds(self, start, n_peaks, normalisation):
        prob = generalized_poisson_pmf(np.arange(n_peaks), start["mean_pe"], start["crosstalk"])
        amp = np.maximum(prob * start.get("n_total", start["total"]), 0.5)
        return Bounds(list(amp), [0.0] * n_peaks, [np.inf] * n_peaks)

    def moments(self, params, errors, amplitude, covariance):
        """mu = -ln(A0/sum A), lambda = 1 - mu/<n>, with propagated errors."""
        amp = np.asarray(amplitude, dtype=float)
        n = np.arange(amp.size, dtype=float)
        total = float(amp.sum())
        if amp[0] <= 0 or total <= 0:
            raise ModelError("spectrum: the fitted pedestal peak is empty; mean_pe cannot be measured")
        mu = -np.log(amp[0] / total)
        mean_n = float(np.sum(n * amp) / total)
        d_mu = np.full(amp.size, 1.0 / total)
        d_mu[0] -= 1.0 / amp[0]
        d_mean = (n - mean_n) / total
        if mean_n > 0:
            lam = 1.0 - mu / mean_n
            d_lam = -d_mu / mean_n + mu * d_mean / mean_n**2
        else:
            lam, d_lam = 0.0, np.zeros(amp.size)
        mu_err = float(np.sqrt(max(d_mu @ covariance @ d_mu, 0.0)))
        lam_err = float(np.sqrt(max(d_lam @ covariance @ d_lam, 0.0)))
        return Moments(float(mu), mu_err, float(lam), lam_err)

    def parameter_names(self, n_peaks):
        return tuple(f"amplitude_{k}" for k in range(n_peaks))


#: The amplitude models by name.
AMPLITUDE_MODEL_TABLE = {model.name: model for model in (
    _GeneralisedPoisson(name="gpoisson", relabel_pedestal=True),
    _Free(name="free", optimiser="fisher_scoring", peaks_inside=True, seeded_by="gpoisson"),
    _Borel(name="borel", first_peak=1, no_peak_reason="only one peak (no crosstalk peak beyond it)"),
)}
#: The amplitude models :func:`~compensator.calibration.spectrum.fit_spectrum` accepts.
AMPLITUDE_MODELS = tuple(AMPLITUDE_MODEL_TABLE)
