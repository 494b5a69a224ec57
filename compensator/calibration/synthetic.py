"""Seeded synthetic bench data with known truth, for tests, demos and benchmarks.

Nothing here is measured data: every generator takes a ``numpy.random.Generator``
and returns arrays whose true parameters the caller chose.

I-V model (reverse bias, above and below breakdown)::

    I(V) = I_leak exp(s (V - Vbd)) + A x^k P(x) / P(1 V),    x = max(V - Vbd, 0)

where the first term is the surface/bulk leakage floor below breakdown, ``A`` is
the avalanche current at 1 V overvoltage, ``k`` the power-law exponent and
``P(x) = 1 - exp(-x / x_g)`` an avalanche-triggering (Geiger) probability factor
that makes the curve depart from a pure power law near breakdown (common
practice; with ``geiger_scale_v=None`` the factor is left out and the avalanche
term is a pure power law). Noise: relative (multiplicative, Gaussian) plus an
absolute floor (picoammeter noise); currents are kept positive.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.errors import ModelError

__all__ = ["IvTruth", "breakdown_at", "iv_current_a", "leakage_at_crossing_a", "simulate_breakdown_scan",
           "simulate_events", "simulate_gain_scan", "simulate_iv", "simulate_spectrum"]


@dataclass(frozen=True)
class IvTruth:
    """True parameters of synthetic I-V curves (arrays over curves).

    Attributes
    ----------
    breakdown_v : ndarray
        True breakdown voltage per curve, volt.
    exponent : float
        Power-law exponent k of the avalanche current.
    geiger_scale_v : float or None
        Overvoltage scale of the triggering-probability factor, volt (None: pure power law).
    """

    breakdown_v: np.ndarray
    exponent: float
    geiger_scale_v: float | None


def iv_current_a(bias_v, breakdown_v, *, exponent=2.0, geiger_scale_v=None, avalanche_a=1e-6,
                 leakage_a=2e-10, leakage_slope_per_v=0.05):
    """Noise-free reverse current of the synthetic I-V model (see module docstring).

    Parameters
    ----------
    bias_v : array_like
        Reverse bias, volt.
    breakdown_v : array_like
        True breakdown voltage, volt (broadcast against ``bias_v``).
    exponent : float
        Power-law exponent k (> 0).
    geiger_scale_v : float or None
        Triggering-probability scale x_g, volt; None for a pure power law.
    avalanche_a : float
        Avalanche current at 1 V overvoltage, ampere.
    leakage_a : float
        Leakage current at the breakdown voltage, ampere.
    leakage_slope_per_v : float
        Logarithmic slope of the leakage floor, per volt.

    Returns
    -------
    ndarray
        Current, ampere.
    """
    if exponent <= 0:
        raise ModelError(f"exponent must be positive, got {exponent!r}")
    bias_v = np.asarray(bias_v, dtype=float)
    breakdown_v = np.asarray(breakdown_v, dtype=float)
    x = np.maximum(bias_v - breakdown_v, 0.0)
    avalanche = avalanche_a * x ** exponent
    if geiger_scale_v is not None:
        if geiger_scale_v <= 0:
            raise ModelError(f"geiger_scale_v must be positive, got {geiger_scale_v!r}")
        avalanche = avalanche * -np.expm1(-x / geiger_scale_v) / -np.expm1(-1.0 / geiger_scale_v)
    return leakage_a * np.exp(leakage_slope_per_v * (bias_v - breakdown_v)) + avalanche


def leakage_at_crossing_a(crossing_v, *, exponent=2.0, geiger_scale_v=None, avalanche_a=1e-6,
                          leakage_slope_per_v=0.05):
    """Leakage current at breakdown that equals the avalanche current ``crossing_v`` above breakdown.

    Parameters
    ----------
    crossing_v : float
        Overvoltage where leakage and avalanche current are equal, volt (> 0).
    exponent, geiger_scale_v, avalanche_a, leakage_slope_per_v
        See :func:`iv_current_a`.

    Returns
    -------
    float
        ``leakage_a`` for :func:`iv_current_a`, ampere.
    """
    if not crossing_v > 0:
        raise ModelError(f"crossing_v must be positive, got {crossing_v!r}", key="crossing_v")
    avalanche = iv_current_a(crossing_v, 0.0, exponent=exponent, geiger_scale_v=geiger_scale_v,
                             avalanche_a=avalanche_a, leakage_a=0.0)
    return float(avalanche / np.exp(leakage_slope_per_v * crossing_v))


def simulate_iv(rng, bias_v, breakdown_v, *, exponent=2.0, geiger_scale_v=None, avalanche_a=1e-6,
                leakage_a=2e-10, leakage_slope_per_v=0.05, relative_noise=0.01, noise_floor_a=2e-12):
    """Noisy synthetic I-V curves on a common bias grid.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of randomness (seed it for reproducible data).
    bias_v : array_like, shape (n_points,)
        Bias grid, volt.
    breakdown_v : array_like, shape (n_curves,)
        True breakdown voltage per curve, volt.
    exponent, geiger_scale_v, avalanche_a, leakage_a, leakage_slope_per_v
        See :func:`iv_current_a`.
    relative_noise : float
        Standard deviation of the multiplicative noise, fraction.
    noise_floor_a : float
        Standard deviation of the additive noise, ampere.

    Returns
    -------
    ndarray, shape (n_curves, n_points)
        Currents, ampere (always positive).
    """
    bias_v = np.asarray(bias_v, dtype=float)
    breakdown_v = np.atleast_1d(np.asarray(breakdown_v, dtype=float))
    clean = iv_current_a(bias_v[None, :], breakdown_v[:, None], exponent=exponent,
                         geiger_scale_v=geiger_scale_v, avalanche_a=avalanche_a, leakage_a=leakage_a,
                         leakage_slope_per_v=leakage_slope_per_v)
    noisy = clean * (1.0 + relative_noise * rng.standard_normal(clean.shape))
    noisy += noise_floor_a * rng.standard_normal(clean.shape)
    return np.maximum(noisy, 0.05 * clean)


def simulate_gain_scan(rng, bias_v, breakdown_v, capacitance_f, *, relative_noise=0.002):
    """Gain (electrons per avalanche) against bias, with relative noise.

    Parameters
    ----------
    rng : numpy.random.Generator
    bias_v : array_like
        Bias points (above breakdown), volt.
    breakdown_v : float
        True breakdown voltage, volt.
    capacitance_f : float
        True microcell capacitance, farad.
    relative_noise : float
        Standard deviation of the relative gain error, fraction.

    Returns
    -------
    gain, gain_err : ndarray
        Gain and its one-sigma error (dimensionless).
    """
    bias_v = np.asarray(bias_v, dtype=float)
    true = capacitance_f * (bias_v - breakdown_v) / ELEMENTARY_CHARGE_C
    if np.any(true <= 0):
        raise ModelError("every gain-scan bias must lie above the breakdown voltage")
    err = relative_noise * true
    return true + err * rng.standard_normal(true.shape), err


def breakdown_at(temp_c, breakdown_v_at_ref, tempco_mv_per_k, *, ref_temp_c=25.0, curvature_mv_per_k2=0.0):
    """Breakdown voltage Vbd(T) = Vbd0 + a (T - Tref) + b (T - Tref)^2.

    Parameters
    ----------
    temp_c : array_like
        Temperature, degree Celsius.
    breakdown_v_at_ref : float
        Vbd0, volt.
    tempco_mv_per_k : float
        a, millivolt per kelvin.
    ref_temp_c : float
        Tref, degree Celsius.
    curvature_mv_per_k2 : float
        b, millivolt per kelvin squared.

    Returns
    -------
    ndarray
        Breakdown voltage, volt.
    """
    dt_k = np.asarray(temp_c, dtype=float) - ref_temp_c
    return breakdown_v_at_ref + 1e-3 * dt_k * (tempco_mv_per_k + curvature_mv_per_k2 * dt_k)


def simulate_breakdown_scan(rng, temp_c, breakdown_v_at_ref, tempco_mv_per_k, *, ref_temp_c=25.0,
                            curvature_mv_per_k2=0.0, noise_v=0.005):
    """Breakdown voltage against temperature with Gaussian noise.

    Parameters
    ----------
    rng : numpy.random.Generator
    temp_c : array_like
        Temperatures, degree Celsius.
    breakdown_v_at_ref : float
        Breakdown at ``ref_temp_c``, volt.
    tempco_mv_per_k : float
        Linear coefficient, millivolt per kelvin.
    ref_temp_c : float
        Reference temperature, degree Celsius.
    curvature_mv_per_k2 : float
        Quadratic coefficient, millivolt per kelvin squared.
    noise_v : float
        Standard deviation of the measurement noise, volt.

    Returns
    -------
    breakdown_v, breakdown_err_v : ndarray
        Noisy breakdown voltages and their one-sigma errors, volt.
    """
    true = breakdown_at(temp_c, breakdown_v_at_ref, tempco_mv_per_k, ref_temp_c=ref_temp_c,
                        curvature_mv_per_k2=curvature_mv_per_k2)
    err = np.full(np.shape(true), float(noise_v))
    return true + noise_v * rng.standard_normal(np.shape(true)), err


def simulate_spectrum(rng, *, gain, pedestal, sigma0, sigma1, mean_pe, crosstalk, n_events, bin_width, dark=False):
    """Seeded synthetic charge histogram with known truth.

    The number of fired cells per event is drawn as a branching process: a
    Poisson number of primaries (mean ``mean_pe``), then generation after
    generation each new avalanche triggers a Poisson number (mean
    ``crosstalk``) of further ones. The total follows the generalised Poisson
    distribution (Vinogradov 2012). Charges are ``pedestal + n gain`` plus
    Gaussian noise of width ``sqrt(sigma0**2 + n sigma1**2)``.

    Parameters
    ----------
    rng : numpy.random.Generator or int
        Random generator (or a seed for one).
    gain, pedestal, sigma0, sigma1 : float
        Charge per fired cell, pedestal position, widths (any charge unit).
    mean_pe : float
        Mean number of primary photoelectrons, >= 0.
    crosstalk : float
        Branching ratio, 0 <= crosstalk < 1.
    n_events : int
        Number of events.
    bin_width : float
        Histogram bin width (same unit); bins are aligned on
        ``pedestal + bin_width * (j + 1/2)``.
    dark : bool
        A self-triggered dark-count spectrum: every event starts from exactly
        one primary avalanche (``mean_pe`` is ignored), so there is no
        pedestal and the cells fired follow the Borel distribution.

    Returns
    -------
    charge : numpy.ndarray
        Bin centres, contiguous from the lowest to the highest event.
    counts : numpy.ndarray
        Events per bin (float array of integers).

    Raises
    ------
    ModelError
        Parameters outside their domain.
    """
    if not (np.isfinite(bin_width) and bin_width > 0):
        raise ModelError("simulate_spectrum: bin_width must be > 0")
    charges = simulate_events(
        rng, gain=gain, pedestal=pedestal, sigma0=sigma0, sigma1=sigma1,
        mean_pe=mean_pe, crosstalk=crosstalk, n_events=n_events, dark=dark,
    )
    j = np.floor((charges - pedestal) / bin_width).astype(np.int64)
    j_lo, j_hi = int(j.min()), int(j.max())
    counts = np.bincount(j - j_lo, minlength=j_hi - j_lo + 1).astype(float)
    centres = pedestal + bin_width * (np.arange(j_lo, j_hi + 1) + 0.5)
    return centres, counts


def simulate_events(rng, *, gain, pedestal, sigma0, sigma1, mean_pe, crosstalk, n_events, dark=False):
    """Seeded synthetic event list (one charge per event).

    Same model as :func:`simulate_spectrum`, without the binning.

    Parameters
    ----------
    rng : numpy.random.Generator or int
        Random generator (or a seed for one).
    gain, pedestal, sigma0, sigma1 : float
        Charge per fired cell, pedestal position, widths (any charge unit).
    mean_pe : float
        Mean number of primary photoelectrons, >= 0.
    crosstalk : float
        Branching ratio, 0 <= crosstalk < 1.
    n_events : int
        Number of events.
    dark : bool
        Exactly one primary per event (dark counts); ``mean_pe`` is ignored.

    Returns
    -------
    numpy.ndarray
        Charges, one per event, in the unit of ``gain``.

    Raises
    ------
    ModelError
        Parameters outside their domain.
    """
    rng = np.random.default_rng(rng)
    n_events = int(n_events)
    if n_events < 1:
        raise ModelError("simulate_spectrum: n_events must be >= 1")
    if not (gain > 0 and sigma0 > 0 and sigma1 >= 0):
        raise ModelError("simulate_spectrum: need gain > 0, sigma0 > 0, sigma1 >= 0")
    if not (mean_pe >= 0 and 0 <= crosstalk < 1):
        raise ModelError("simulate_spectrum: need mean_pe >= 0 and 0 <= crosstalk < 1")
    fired = np.ones(n_events, dtype=np.int64) if dark else rng.poisson(mean_pe, n_events)
    generation = fired.copy()
    while crosstalk > 0 and generation.any():
        generation = rng.poisson(crosstalk * generation)
        fired += generation
    width = np.sqrt(sigma0**2 + fired * sigma1**2)
    return pedestal + fired * gain + width * rng.standard_normal(n_events)
