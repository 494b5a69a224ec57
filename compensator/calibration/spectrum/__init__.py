"""Gain from a charge spectrum: multi-peak fit with prompt crosstalk.

A SiPM charge spectrum (pulses integrated in a fixed gate, light level low
enough that single photoelectrons are resolved) is a comb of peaks: the
pedestal (no cell fired) at ``Q0`` and one peak per number of fired cells ``n``
at ``Q0 + n G``. Electronic noise and cell-to-cell gain spread widen the peaks:
``sigma_n**2 = sigma_0**2 + n sigma_1**2`` (common practice).

The peak amplitudes follow the generalised Poisson distribution of a Poisson
number of primary photoelectrons (mean ``mu``), each of which may trigger a
branching chain of prompt optical crosstalk with mean ``lambda`` secondaries per
avalanche (Vinogradov, NIM A 695, 247, 2012)::

    P(k) = mu (mu + k lambda)**(k - 1) exp(-mu - k lambda) / k!

with mean ``mu / (1 - lambda)`` and variance ``mu / (1 - lambda)**3``. The
reported ``crosstalk`` is the branching ratio ``lambda`` (mean number of
secondary avalanches per avalanche); in this model the probability that an
avalanche triggers at least one neighbour is ``1 - exp(-lambda)``.

The fit
-------
1. Start values (:func:`spectrum_start_values`): the peak spacing and the comb
   phase come from the Fourier transform of the variance-stabilised spectrum
   (square root of the counts, first difference to suppress the envelope); a
   test in the charge domain catches octave errors (a harmonic or a
   sub-harmonic taken for the spacing); the pedestal is the first peak of the
   comb that carries a real local maximum; positions of the resolved peaks are
   refined by centroids and a straight-line fit ``position = Q0 + n G``; peak
   widths from windowed second moments; ``mu = -ln P0`` from the pedestal
   fraction and ``lambda = 1 - mu / <n>`` from the mean charge.
2. A binned Poisson maximum-likelihood fit of the model integrated over each
   bin (normal-distribution differences at the bin edges, so any bin width is
   exact; each peak is evaluated within 8.5 widths of its centre). The
   likelihood is maximised as a bounded Gauss-Newton problem on the deviance
   residuals (``scipy.optimize.least_squares``, method ``"trf"``) with an
   analytic Jacobian; minimising the deviance is maximising the Poisson
   likelihood, which stays correct for bins with few or zero counts. A missed
   weak pedestal and a poor fit trigger refits from alternative starts (the
   likelier result wins). With free amplitudes the generalised-Poisson fit
   fixes the peak labelling first, then a Fisher-scoring Levenberg-Marquardt
   iteration fits one amplitude per peak.
3. Uncertainties are the square roots of the diagonal of the inverse Fisher
   information ``J^T diag(1/m) J`` at the optimum (``m``: expected counts,
   ``J = dm/dtheta``), i.e. the inverse of the expected Hessian of the negative
   log-likelihood. Fit quality is the likelihood-ratio chi-square (the Poisson
   deviance, Baker and Cousins, NIM 221, 437, 1984; reference quoted from
   memory) with ``ndf = bins - free parameters``.

All charges are in the unit of the input (pC, ADC counts, V*s: any); the fit
works on an internally rescaled axis, so results do not depend on the unit.

Errors: malformed arrays (empty, wrong shape, mismatched lengths, non-finite,
negative counts, charges not increasing) raise
:class:`compensator.errors.InputError`; well-formed data that cannot be
analysed (no peak structure, only a pedestal, too few events) raise
:class:`compensator.errors.ModelError`. Both derive from ``ValueError``.
"""

from __future__ import annotations

from compensator.calibration.spectrum.fit import SpectrumFit, fit_spectrum
from compensator.calibration.spectrum.histogram import MAX_EVENT_BINS, MIN_EVENTS, bin_events
from compensator.calibration.spectrum.model import AMPLITUDE_MODELS, MAX_PEAKS
from compensator.calibration.spectrum.start import spectrum_start_values
from compensator.calibration.synthetic import simulate_events, simulate_spectrum
from compensator.physics.counting import borel_pmf, generalized_poisson_pmf

__all__ = [
    "AMPLITUDE_MODELS",
    "MAX_EVENT_BINS",
    "MAX_PEAKS",
    "MIN_EVENTS",
    "SpectrumFit",
    "bin_events",
    "borel_pmf",
    "fit_spectrum",
    "generalized_poisson_pmf",
    "simulate_events",
    "simulate_spectrum",
    "spectrum_start_values",
]
