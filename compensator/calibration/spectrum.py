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

from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, special

from compensator.errors import InputError, ModelError

__all__ = [
    "SpectrumFit",
    "fit_spectrum",
    "simulate_spectrum",
    "simulate_events",
    "generalized_poisson_pmf",
    "borel_pmf",
    "naive_gain",
    "spectrum_start_values",
    "bin_events",
    "AMPLITUDE_MODELS",
]

#: The amplitude models :func:`fit_spectrum` accepts.
AMPLITUDE_MODELS = ("gpoisson", "free", "borel")

#: Most peaks a model carries (pedestal included); keeps the fit bounded in time.
MAX_PEAKS = 64
#: Most bins an event list is binned into.
MAX_EVENT_BINS = 4096
#: Fewest events a spectrum must hold.
MIN_EVENTS = 50

_SQRT_2PI = np.sqrt(2.0 * np.pi)
_LAMBDA_MAX = 0.95


# ---------------------------------------------------------------------------
# result


@dataclass(frozen=True, eq=False)
class SpectrumFit:
    """Result of :func:`fit_spectrum`.

    All charges are in the unit of the input charge axis; ``*_err`` are
    one-sigma uncertainties from the inverse Fisher information.

    Attributes
    ----------
    gain, gain_err : float
        Peak spacing ``G`` (charge per fired cell).
    pedestal, pedestal_err : float
        Position ``Q0`` of the zero-photoelectron peak.
    sigma0, sigma0_err : float
        Width of the pedestal (electronic noise).
    sigma1, sigma1_err : float
        Extra width per fired cell (cell-to-cell gain spread).
    mean_pe, mean_pe_err : float
        Mean number of primary photoelectrons ``mu`` (before crosstalk); nan
        for a dark-count (``"borel"``) fit.
    crosstalk, crosstalk_err : float
        Prompt-crosstalk branching ratio ``lambda`` (mean secondaries per
        avalanche).
    chi2 : float
        Likelihood-ratio chi-square (Poisson deviance) at the optimum.
    ndf : int
        Number of bins minus number of free parameters.
    n_peaks : int
        Number of peaks in the model (n = 0 .. n_peaks - 1; n = 1 .. n_peaks
        for ``"borel"``).
    method : str
        ``"gpoisson"``, ``"free"`` or ``"borel"``.
    charge, counts, model_counts : numpy.ndarray
        Bin centres, observed counts and fitted expected counts (for plots and
        residuals).
    n_events : float
        Sum of the counts.
    bin_width : float
        Median bin width of the histogram that was fitted.
    peak_amplitudes : numpy.ndarray
        Fitted number of events in each peak (length ``n_peaks``).
    covariance : numpy.ndarray
        Covariance matrix of the parameters named in ``parameter_names``.
    parameter_names : tuple of str
        Names of the free parameters, in the order of ``covariance``.
    n_iterations : int
        Number of model evaluations the optimiser used.
    """

    gain: float
    gain_err: float
    pedestal: float
    pedestal_err: float
    sigma0: float
    sigma0_err: float
    sigma1: float
    sigma1_err: float
    mean_pe: float
    mean_pe_err: float
    crosstalk: float
    crosstalk_err: float
    chi2: float
    ndf: int
    n_peaks: int
    method: str
    charge: np.ndarray
    counts: np.ndarray
    model_counts: np.ndarray
    n_events: float = 0.0
    bin_width: float = 0.0
    peak_amplitudes: np.ndarray = field(default_factory=lambda: np.zeros(0))
    covariance: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    parameter_names: tuple = ()
    n_iterations: int = 0

    @property
    def chi2_per_ndf(self) -> float:
        """``chi2 / ndf`` (nan when ``ndf`` is not positive)."""
        return self.chi2 / self.ndf if self.ndf > 0 else float("nan")

    @property
    def mean_fired(self) -> float:
        """Mean number of fired cells per event: ``mu / (1 - lambda)``, or
        ``1 / (1 - lambda)`` for a dark-count (``"borel"``) fit."""
        primaries = 1.0 if self.method == "borel" else self.mean_pe
        return primaries / (1.0 - self.crosstalk)

    def summary(self) -> dict:
        """The scalar results as a plain dict (for JSON and tables)."""
        keys = (
            "gain", "gain_err", "pedestal", "pedestal_err", "sigma0", "sigma0_err",
            "sigma1", "sigma1_err", "mean_pe", "mean_pe_err", "crosstalk", "crosstalk_err",
            "chi2", "ndf", "n_peaks", "method", "n_events", "bin_width",
        )
        return {k: getattr(self, k) for k in keys}


# ---------------------------------------------------------------------------
# generalised Poisson


def _check_counts_and_branching(name, k, lam):
    """k as non-negative whole floats and lam in [0, 1), or a ModelError."""
    kf = np.asarray(k).astype(float)
    lam = np.asarray(lam, dtype=float)
    if not np.all(np.isfinite(kf)) or np.any(kf < 0) or np.any(kf != np.round(kf)):
        raise ModelError(f"{name}: k must be non-negative integers")
    if not np.all(np.isfinite(lam)) or np.any(lam < 0) or np.any(lam >= 1):
        raise ModelError(f"{name}: lam must lie in [0, 1)")
    return kf, lam


def generalized_poisson_pmf(k, mu, lam) -> np.ndarray:
    """Generalised Poisson probabilities for prompt optical crosstalk.

    ``P(k) = mu (mu + k lam)**(k-1) exp(-mu - k lam) / k!`` (Vinogradov, NIM A
    695, 247, 2012): the number of fired cells when a Poisson number of primary
    photoelectrons (mean ``mu``) each start a branching Poisson chain with mean
    ``lam`` secondaries per avalanche.

    Parameters
    ----------
    k : array_like of int
        Numbers of fired cells, >= 0.
    mu : array_like
        Mean number of primary photoelectrons, >= 0.
    lam : array_like
        Crosstalk branching ratio, 0 <= lam < 1.

    Returns
    -------
    numpy.ndarray
        Probabilities, broadcast over ``k``, ``mu`` and ``lam``.

    Raises
    ------
    ModelError
        For negative or non-integer ``k``, negative ``mu`` or ``lam`` outside
        [0, 1).
    """
    kf, lam = _check_counts_and_branching("generalized_poisson_pmf", k, lam)
    mu = np.asarray(mu, dtype=float)
    if not np.all(np.isfinite(mu)) or np.any(mu < 0):
        raise ModelError("generalized_poisson_pmf: mu must be finite and >= 0")
    kf, mu, lam = np.broadcast_arrays(kf, mu, lam)
    out = np.zeros(kf.shape)
    pos = mu > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        logp = (
            np.log(np.where(pos, mu, 1.0))
            + special.xlogy(kf - 1.0, np.where(pos, mu + kf * lam, 1.0))
            - mu - kf * lam - special.gammaln(kf + 1.0)
        )
    out[pos] = np.exp(logp[pos])
    out[~pos & (kf == 0)] = 1.0
    return out


def borel_pmf(k, lam) -> np.ndarray:
    """Borel probabilities: cells fired by one primary avalanche with crosstalk.

    ``P(k) = exp(-lam k) (lam k)**(k-1) / k!`` for ``k >= 1``: the total size
    of a branching Poisson chain started by a single avalanche, each avalanche
    triggering on average ``lam`` more. It is the ``mu -> 0`` limit of the
    generalised Poisson distribution (Vinogradov, NIM A 695, 247, 2012) given
    that at least one cell fired, and describes self-triggered dark-count
    spectra (no pedestal). Mean ``1/(1 - lam)``, variance ``lam/(1 - lam)**3``.

    Parameters
    ----------
    k : array_like of int
        Numbers of fired cells, >= 1 (``P(0) = 0``; 0 is accepted).
    lam : array_like
        Crosstalk branching ratio, 0 <= lam < 1.

    Returns
    -------
    numpy.ndarray
        Probabilities, broadcast over ``k`` and ``lam``.

    Raises
    ------
    ModelError
        For negative or non-integer ``k`` or ``lam`` outside [0, 1).
    """
    kf, lam = np.broadcast_arrays(*_check_counts_and_branching("borel_pmf", k, lam))
    with np.errstate(divide="ignore", invalid="ignore"):
        logp = -lam * kf + special.xlogy(kf - 1.0, lam * kf) - special.gammaln(kf + 1.0)
    out = np.where(kf >= 1, np.exp(logp), 0.0)
    return np.where((kf == 1) & (lam == 0), 1.0, out)


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


# ---------------------------------------------------------------------------
# simulation


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


# ---------------------------------------------------------------------------
# input checking and binning


def _check_range(fit_range):
    if fit_range is None:
        return -np.inf, np.inf
    try:
        lo, hi = (float(v) for v in fit_range)
    except (TypeError, ValueError):
        raise InputError("fit_range: give two charges, (lowest, highest)") from None
    if np.isnan(lo) or np.isnan(hi) or not lo < hi:
        raise InputError(f"fit_range: the lowest charge must be below the highest (got {lo:g}, {hi:g})")
    return lo, hi


def _check_histogram(charge, counts, where=""):
    where = f" {where}" if where else ""
    x = np.asarray(charge, dtype=float)
    c = np.asarray(counts, dtype=float)
    if x.ndim != 1 or c.ndim != 1:
        raise InputError("charge/counts: must be one-dimensional")
    if x.size != c.size:
        raise InputError(f"charge/counts: lengths differ ({x.size} charges, {c.size} counts)")
    if x.size == 0:
        raise InputError(f"charge: the spectrum is empty{where}")
    if x.size < 5:
        raise InputError(f"charge: {x.size} bins{where} are too few for a spectrum (need at least 5)")
    if not np.all(np.isfinite(x)):
        raise InputError(f"charge: non-finite value at bin {int(np.flatnonzero(~np.isfinite(x))[0])}")
    if not np.all(np.isfinite(c)):
        raise InputError(f"counts: non-finite value at bin {int(np.flatnonzero(~np.isfinite(c))[0])}")
    neg = np.flatnonzero(c < 0)
    if neg.size:
        raise InputError(f"counts: {neg.size} negative value(s), first at bin {int(neg[0])} ({c[neg[0]]:g})")
    steps = np.diff(x)
    bad = np.flatnonzero(steps <= 0)
    if bad.size:
        raise InputError(f"charge: bin centres must increase strictly (bin {int(bad[0]) + 1} does not)")
    total = float(c.sum())
    if total <= 0:
        raise InputError(f"counts: the spectrum is empty{where} (all counts are zero)")
    if total < MIN_EVENTS:
        raise ModelError(f"counts: {total:g} events{where} are too few for a spectrum fit (need at least {MIN_EVENTS})")
    return x, c


def _fill_gaps(x, c):
    """Put back empty bins that a histogram export left out.

    When every step between bin centres is a whole multiple of the smallest
    step (within 0.1 %), the missing bins were empty: they are inserted with
    zero counts so the bins keep one width. Otherwise the bins are taken as
    genuinely non-uniform.
    """
    steps = np.diff(x)
    width = float(steps.min())
    ratio = steps / width
    whole = np.rint(ratio)
    if np.all(whole == 1.0) or not np.all(np.abs(ratio - whole) <= 1e-3 * whole):
        return x, c
    if whole.sum() + 1 > 64 * x.size:  # sparse exports of huge ranges: leave them as they are
        return x, c
    index = np.concatenate(([0], np.cumsum(whole).astype(np.int64)))
    full_x = x[0] + width * np.arange(index[-1] + 1)
    full_x[index] = x
    full_c = np.zeros(full_x.size)
    full_c[index] = c
    return full_x, full_c


def _edges_from_centres(x):
    mid = 0.5 * (x[1:] + x[:-1])
    return np.concatenate(([x[0] - (mid[0] - x[0])], mid, [x[-1] + (x[-1] - mid[-1])]))


def _check_events(charge):
    q = np.asarray(charge, dtype=float)
    if q.ndim != 1:
        raise InputError("charge: an event list must be one-dimensional")
    if q.size == 0:
        raise InputError("charge: the event list is empty")
    if not np.all(np.isfinite(q)):
        raise InputError(f"charge: non-finite value at event {int(np.flatnonzero(~np.isfinite(q))[0])}")
    if q.size < MIN_EVENTS:
        raise ModelError(f"charge: {q.size} events are too few for a spectrum fit (need at least {MIN_EVENTS})")
    return q


def _histogram(q, width):
    lo, hi = float(q.min()), float(q.max())
    n_bins = max(int(np.floor((hi - lo) / width + 0.5)) + 1, 5)
    edges = lo - 0.5 * width + width * np.arange(n_bins + 1)
    j = np.clip(((q - edges[0]) / width).astype(np.int64), 0, n_bins - 1)
    counts = np.bincount(j, minlength=n_bins).astype(float)
    return 0.5 * (edges[1:] + edges[:-1]), counts


def bin_events(charge):
    """Histogram an event list with a data-driven bin width.

    The rule: a pilot histogram with a quarter of the Freedman-Diaconis width
    (``2 IQR n**(-1/3)``; Freedman and Diaconis, Z. Wahrscheinlichkeitstheorie
    57, 453, 1981, quoted from memory) gives start values for the peak spacing
    ``G`` and the pedestal width ``sigma0``; the final width is the smaller of
    ``sigma0 / 2`` and ``G / 8`` (peaks resolved by several bins; the binned fit
    integrates the model over each bin, so narrower bins cost only time), but
    never so narrow that the events' range needs more than 4096 bins.

    Parameters
    ----------
    charge : array_like
        One charge per event (any unit).

    Returns
    -------
    charge : numpy.ndarray
        Bin centres.
    counts : numpy.ndarray
        Events per bin.
    """
    q = _check_events(charge)
    lo, hi = float(q.min()), float(q.max())
    span = hi - lo
    if not span > 0:
        raise ModelError("charge: all events have the same charge; there is no spectrum")
    iqr = float(np.subtract(*np.percentile(q, [75, 25])))
    fd = 2.0 * iqr * q.size ** (-1.0 / 3.0) if iqr > 0 else span / 64
    pilot_width = max(fd / 4.0, span / MAX_EVENT_BINS)
    x, c = _histogram(q, pilot_width)
    start = _start_values(x, c, _edges_from_centres(x))
    width = min(start["sigma0"] / 2.0, start["gain"] / 8.0)
    width = max(width, span / (MAX_EVENT_BINS - 2))
    return _histogram(q, width)


# ---------------------------------------------------------------------------
# start values


def _uniform_density(x, c):
    """Counts per unit charge resampled on a uniform grid (for the FFT)."""
    dx = np.diff(x)
    if dx.max() <= dx.min() * 1.001:
        return x, c, float(np.mean(dx))
    step = float(dx.min())
    n = int(min(np.ceil((x[-1] - x[0]) / step) + 1, 16384))
    grid = np.linspace(x[0], x[-1], n)
    widths = np.diff(_edges_from_centres(x))
    dens = np.interp(grid, x, c / widths) * (grid[1] - grid[0])
    return grid, dens, float(grid[1] - grid[0])


def _comb_from_fft(x, c):
    """Peak spacing and comb phase from the Fourier transform.

    The spectrum is variance-stabilised (square root of the counts) and
    resampled on a uniform grid. Its transform ``Y(f)`` shows a lobe around
    zero frequency (the envelope) and a line at ``1/G`` (the comb of peaks),
    with harmonics. Candidates are the local maxima of ``|f Y(f)|`` (the
    transform of the first difference, which turns the line into a maximum even
    on the flank of the lobe) beyond the lobe; a candidate must rise above the
    lowest point between the lobe and itself by five times the noise
    (``Var sqrt(n) <= 0.42`` per occupied bin for Poisson counts), and the
    strongest one wins. The phase of ``Y`` at the line
    gives the comb offset. Octave errors (a harmonic or sub-harmonic picked
    instead of the fundamental) are caught later in the charge domain.

    Returns (spacing, offset, significance): peaks sit at
    ``offset + n spacing``; significance is the line over the noise rms.
    """
    grid, dens, step = _uniform_density(x, c)
    y = np.sqrt(np.clip(dens, 0.0, None))
    n = y.size
    if n < 8:
        raise ModelError("spectrum: too few bins to find a peak structure")
    # take out the straight line between the mean end values, so a histogram
    # cut off with counts at its ends does not ring like a box
    k_end = max(2, n // 50)
    y_lo, y_hi = float(y[:k_end].mean()), float(y[-k_end:].mean())
    y_flat = y - (y_lo + (y_hi - y_lo) * np.arange(n) / (n - 1))
    m = 1 << int(np.ceil(np.log2(8 * n)))
    spec_y = np.fft.rfft(y_flat, m)
    freq = np.fft.rfftfreq(m, step)
    amp_y = np.abs(spec_y)
    amp = amp_y * np.abs(2.0 * np.sin(np.pi * freq * step))  # transform of the difference
    noise = np.sqrt(0.42 * max(int(np.count_nonzero(dens > 0)), 1))
    # skip the lobe around zero frequency: the envelope of the sqrt spectrum
    # has an rms width s, its transform a width 1/(2 pi s); start one width
    # out, then walk down to the first minimum
    w = np.clip(y, 0.0, None)
    centre = np.sum(w * grid) / np.sum(w)
    s_env = np.sqrt(np.sum(w * (grid - centre) ** 2) / np.sum(w))
    i = max(int(np.ceil(1.0 / (2.0 * np.pi * s_env) * m * step)), int(np.ceil(m / n)), 1)
    while i + 1 < amp.size and amp[i + 1] <= amp[i]:
        i += 1
    inner = amp[i:-1]
    is_max = np.r_[False, (inner[1:-1] > inner[:-2]) & (inner[1:-1] >= inner[2:]), False]
    cand = i + np.flatnonzero(is_max)
    # significance: height of the line above the lowest point between the
    # lobe and the line, in units of the noise rms at that frequency
    noise_d = noise * np.abs(2.0 * np.sin(np.pi * freq * step))
    floor = np.minimum.accumulate(amp[i:])[cand - i]
    signif = (amp[cand] - floor) / noise_d[cand]
    keep = signif > 5.0
    if not keep.any():
        raise ModelError("spectrum: no peak structure found (no comb line above the noise in the Fourier transform)")
    j = int(cand[keep][np.argmax(amp[cand[keep]])])
    # parabolic interpolation of the line position
    a, b, cc = np.log(amp[j - 1:j + 2] + 1e-300)
    den = a - 2 * b + cc
    delta = float(np.clip(0.5 * (a - cc) / den, -0.5, 0.5)) if den < 0 else 0.0
    f0 = (j + delta) / (m * step)
    spacing = 1.0 / f0
    # phase: the transform of y at f0 exactly
    phase = np.angle(np.sum(y * np.exp(-2j * np.pi * f0 * (grid - grid[0]))))
    offset = grid[0] - phase / (2 * np.pi * f0)
    return spacing, offset, float(signif[cand == j][0])


class _Counts:
    """A histogram with prefix sums: O(log n) window sums and moments.

    ``x`` must increase; a window ``[lo, hi)`` is the contiguous run of bins
    whose centres fall inside it.
    """

    def __init__(self, x, c):
        self.x, self.c = x, c
        self.s0 = np.concatenate(([0.0], np.cumsum(c)))
        self.s1 = np.concatenate(([0.0], np.cumsum(c * x)))
        self.s2 = np.concatenate(([0.0], np.cumsum(c * x * x)))
        kern = np.array([1.0, 2.0, 3.0, 2.0, 1.0])
        self.smooth = np.convolve(c, kern / kern.sum(), mode="same")

    def index(self, lo, hi):
        return int(np.searchsorted(self.x, lo)), int(np.searchsorted(self.x, hi))

    def content(self, lo, hi):
        i, j = self.index(lo, hi)
        return float(self.s0[j] - self.s0[i])

    def moments(self, centre, half):
        """Centroid, variance and content of the counts within centre +- half."""
        i, j = self.index(centre - half, centre + half)
        tot = float(self.s0[j] - self.s0[i])
        if tot <= 0:
            return np.nan, np.nan, 0.0
        mean = float(self.s1[j] - self.s1[i]) / tot
        var = max(float(self.s2[j] - self.s2[i]) / tot - mean * mean, 0.0)
        return mean, var, tot

    def peak_at(self, position, half, min_half=0.0):
        """True when the counts show a significant peak at ``position``.

        The content within ``half`` of the position must exceed the content
        of the two flanking bands of the same total width by four standard
        deviations (and hold at least 8 events). ``half`` is raised to
        ``min_half`` (a bin width) so the test never looks at a fraction of a
        bin.
        """
        half = max(half, min_half)
        inner = self.content(position - half, position + half)
        outer = self.content(position - 2 * half, position + 2 * half) - inner
        return inner >= 8.0 and inner - outer > 4.0 * np.sqrt(inner + outer)

    def first_peak(self, spacing, offset):
        """Index n of the first comb position ``offset + n spacing`` with a real peak.

        A real peak: the window of one spacing around the position holds at
        least 3 events, and the maximum of the lightly smoothed counts in it
        lies within 0.3 spacings of the position, not on the window's edge.
        """
        x = self.x
        n_first = int(np.floor((x[0] - offset) / spacing))
        n_last = int(np.ceil((x[-1] - offset) / spacing))
        for n in range(n_first, n_last + 1):
            centre = offset + n * spacing
            i, j = self.index(centre - 0.5 * spacing, centre + 0.5 * spacing)
            if j - i < 3 or self.s0[j] - self.s0[i] < 3.0:
                continue
            k = i + int(np.argmax(self.smooth[i:j]))
            if abs(x[k] - centre) <= 0.3 * spacing and i < k < j - 1:
                return n
        raise ModelError("spectrum: no peak structure found (no peak in the comb positions)")


def _start_values(x, c, edges):
    total = float(c.sum())
    spacing, offset, significance = _comb_from_fft(x, c)
    widths = np.diff(edges)
    bw = float(np.median(widths))
    # pad with empty bins so a peak at the edge of the histogram still counts
    # as a local maximum
    pad = int(np.ceil(2 * spacing / bw)) + 3
    x = np.concatenate((x[0] - bw * np.arange(pad, 0, -1), x, x[-1] + bw * np.arange(1, pad + 1)))
    c = np.concatenate((np.zeros(pad), c, np.zeros(pad)))
    h = _Counts(x, c)
    ped_index = h.first_peak(spacing, offset)
    # octave errors, tested around the strongest comb position: peaks half-way
    # (or a third of the way) to the neighbouring positions mean the spacing
    # is a multiple of the true one; no peaks at the neighbouring positions
    # but peaks one further out mean it is a fraction of it
    for _ in range(3):
        n_all = np.arange(ped_index, int(np.ceil((x[-1] - offset) / spacing)) + 1)
        centres = offset + n_all * spacing
        bounds = np.searchsorted(x, np.concatenate((centres - spacing / 2, centres + spacing / 2)))
        content = h.s0[bounds[n_all.size:]] - h.s0[bounds[:n_all.size]]
        pk = h.moments(centres[int(np.argmax(content))], spacing / 4)[0]

        def peak(position, half):
            return h.peak_at(position, half, min(bw, spacing / 4))

        def both(d, half, pk=pk):
            return peak(pk + d, half) and (pk - d < x[0] + 2 * half or peak(pk - d, half))

        def neither(d, half, pk=pk):
            return not peak(pk + d, half) and not peak(pk - d, half)

        if both(spacing / 2, spacing / 8):
            spacing /= 2
        elif both(spacing / 3, spacing / 12) and both(2 * spacing / 3, spacing / 12):
            spacing /= 3
        elif neither(spacing, spacing / 4) and (peak(pk + 2 * spacing, spacing / 4) or peak(pk - 2 * spacing, spacing / 4)):
            spacing *= 2
        else:
            break
        offset = pk
        ped_index = h.first_peak(spacing, offset)
    if spacing < 2.5 * bw:
        raise ModelError("spectrum: no peak structure found (peak spacing below 2.5 bins)")
    n_last = int(np.ceil((x[-1] - offset) / spacing))
    # refine the positions with centroids of the resolved peaks
    ns, pos, var, cont = [], [], [], []
    for n in range(ped_index, n_last + 1):
        centre = offset + n * spacing
        if centre > x[-1]:
            break
        mean, v, tot = h.moments(centre, 0.5 * spacing)
        if tot < 10.0:
            continue
        mean2, v2, tot2 = h.moments(mean, 0.5 * spacing)
        if tot2 >= 10.0:
            mean, v, tot = mean2, v2, tot2
        ns.append(n - ped_index)
        pos.append(mean)
        var.append(max(v - bw * bw / 12.0, (0.05 * spacing) ** 2))
        cont.append(tot)
    ns, pos, var, cont = map(np.asarray, (ns, pos, var, cont))
    if ns.size >= 2 and ns.max() > 0:
        wts = np.sqrt(cont)
        coef = np.polyfit(ns, pos, 1, w=wts)
        gain, pedestal = float(coef[0]), float(coef[1])
        if not (0.7 * spacing < gain < 1.3 * spacing):
            gain, pedestal = spacing, float(pos[0])
    else:
        gain, pedestal = spacing, offset + ped_index * spacing
    if ns.size and ns[0] == 0:
        pedestal_content = cont[0]
    else:
        pedestal_content = 0.0
    # widths: sigma_n^2 = sigma0^2 + n sigma1^2 from the windowed moments
    use = ns <= max(4, ns.min() + 4) if ns.size else ns
    if ns.size >= 2 and np.unique(ns[use]).size >= 2:
        coef = np.polyfit(ns[use], var[use], 1, w=np.sqrt(cont[use]))
        s1sq, s0sq = float(coef[0]), float(coef[1])
    elif ns.size:
        s0sq, s1sq = float(var[0]), 0.25 * float(var[0])
    else:
        s0sq, s1sq = (0.1 * gain) ** 2, (0.05 * gain) ** 2
    sigma0 = float(np.sqrt(max(s0sq, (0.03 * gain) ** 2, (0.3 * bw) ** 2)))
    sigma1 = float(np.sqrt(max(s1sq, (0.02 * gain) ** 2)))
    # amplitudes
    p0 = pedestal_content / total
    if p0 <= 0:
        p0 = 0.5 / total
    mean_pe = float(-np.log(min(max(p0, 1e-12), 1.0 - 1e-3)))
    mean_charge = float(np.sum(c * x) / total)
    mean_n = (mean_charge - pedestal) / gain
    crosstalk = 1.0 - mean_pe / mean_n if mean_n > 0 else 0.0
    crosstalk = float(np.clip(crosstalk, 0.02, 0.6))
    n_peaks = _peaks_needed(edges, pedestal, gain)
    return {
        "gain": gain,
        "pedestal": pedestal,
        "sigma0": sigma0,
        "sigma1": sigma1,
        "mean_pe": mean_pe,
        "crosstalk": crosstalk,
        "n_peaks": n_peaks,
        "fourier_spacing": float(spacing),
        "comb_significance": float(significance),
        "n_resolved_peaks": int(ns.size),
    }


def spectrum_start_values(charge, counts) -> dict:
    """Robust start values for the multi-peak fit.

    Parameters
    ----------
    charge : array_like
        Bin centres (any charge unit), strictly increasing.
    counts : array_like
        Events per bin, >= 0.

    Returns
    -------
    dict
        ``gain``, ``pedestal``, ``sigma0``, ``sigma1`` (charge unit),
        ``mean_pe``, ``crosstalk``, ``n_peaks`` (peaks a generalised-Poisson
        model will carry), ``fourier_spacing`` (spacing of the Fourier comb
        line after the octave check),
        ``comb_significance`` (Fourier comb line over the noise, in noise
        standard deviations) and
        ``n_resolved_peaks`` (peaks used for the position fit).

    Raises
    ------
    InputError
        Malformed arrays.
    ModelError
        No peak structure.
    """
    x, c = _fill_gaps(*_check_histogram(charge, counts))
    origin, unit = float(x[0]), float(np.median(np.diff(x)))
    xs = (x - origin) / unit
    sv = _start_values(xs, c, _edges_from_centres(xs))
    for k in ("gain", "sigma0", "sigma1", "fourier_spacing"):
        sv[k] *= unit
    sv["pedestal"] = origin + unit * sv["pedestal"]
    return sv


# ---------------------------------------------------------------------------
# the binned model


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
    """Expected counts per bin and their Jacobian for one amplitude model."""

    def __init__(self, edges, n_peaks, method):
        self.edges = edges
        self.n_bins = edges.size - 1
        first = 1 if method == "borel" else 0  # no pedestal peak in a dark-count spectrum
        self.n = np.arange(first, first + n_peaks, dtype=float)
        self.method = method

    def amplitudes(self, p):
        if self.method == "gpoisson":
            logp, dmu, dlam = _gp_log_terms(self.n, p[5], p[6])
            prob = np.exp(logp)
            return p[4] * prob, prob, dmu, dlam
        if self.method == "borel":
            logp, dlam = _borel_log_terms(self.n, p[5])
            prob = np.exp(logp)
            return p[4] * prob, prob, None, dlam
        return p[4:], None, None, None

    def __call__(self, p, jac=True):
        q0, g, s0, s1 = p[:4]
        sig = np.sqrt(s0 * s0 + self.n * s1 * s1)
        k, i, shape, d_mean, d_sigma = _banded_shapes(self.edges, q0 + self.n * g, sig)
        amp, prob, dmu, dlam = self.amplitudes(p)
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
        if self.method == "gpoisson":
            cols += [column(prob, shape), column(amp * dmu, shape), column(amp * dlam, shape)]
            return m, np.column_stack(cols)
        if self.method == "borel":
            cols += [column(prob, shape), column(amp * dlam, shape)]
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
    if method == "gpoisson":
        mu0 = start["mean_pe"]
        lam0 = start["crosstalk"]
        # the fraction of the model inside the histogram sets the start normalisation
        frac = model([*p0, 1.0, mu0, lam0], jac=False)[0].sum()
        p0 += [total / max(frac, 1e-3), mu0, lam0]
        lo += [0.0, 1e-4, 0.0]
        hi += [np.inf, 200.0, _LAMBDA_MAX]
    elif method == "borel":
        lam0 = start["crosstalk"]
        frac = model([*p0, 1.0, lam0], jac=False)[0].sum()
        p0 += [total / max(frac, 1e-3), lam0]
        lo += [0.0, 1e-6]
        hi += [np.inf, _LAMBDA_MAX]
    else:
        prob = generalized_poisson_pmf(np.arange(K), start["mean_pe"], start["crosstalk"])
        amp = np.maximum(prob * start.get("n_total", total), 0.5)
        p0 += list(amp)
        lo += [0.0] * K
        hi += [np.inf] * K
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

    if method == "free":
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
    if method == "free":
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
    if amplitudes == "gpoisson" and below >= 2.0 and below > expected + 3.0 * np.sqrt(expected):
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
        if amplitudes == "gpoisson":
            sv.update(mean_pe=float(p[5]), crosstalk=float(min(max(p[6], 0.01), 0.9)))
        elif amplitudes == "borel":
            sv.update(crosstalk=float(min(max(p[5], 0.01), 0.9)))
        dev, out = run(sv)
        if dev < best_dev:
            best_dev, best = dev, out
    return best


def fit_spectrum(charge, counts=None, *, amplitudes="gpoisson", fit_range=None) -> SpectrumFit:
    """Fit a SiPM charge spectrum: gain, pedestal, widths, mean photoelectrons, crosstalk.

    Parameters
    ----------
    charge : array_like
        Bin centres of a histogram (strictly increasing; bins may be
        non-uniform, edges are taken half-way between centres; when all
        steps are whole multiples of the smallest one, the missing bins are
        taken as empty bins left out of the export), or, when
        ``counts`` is None, one charge per event. Any charge unit; results come
        back in the same unit.
    counts : array_like, optional
        Events per bin (>= 0). None means ``charge`` is an event list, binned
        by :func:`bin_events` (documented data-driven bin width).
    amplitudes : {"gpoisson", "free", "borel"}
        ``"gpoisson"``: peak amplitudes from the generalised Poisson
        distribution with prompt crosstalk (parameters ``mu``, ``lambda``).
        ``"free"``: one free amplitude per peak; ``mean_pe`` is then
        ``-ln(A_0 / sum A)`` and ``crosstalk`` is ``1 - mean_pe / <n>`` from
        the peak areas, with uncertainties propagated from the covariance.
        The areas cover the peaks inside the histogram only, so a spectrum
        cut off while its peaks are still large biases these two numbers
        (the gain and widths are unaffected).
        ``"borel"``: a self-triggered dark-count spectrum without a pedestal:
        the first peak is one fired cell and the amplitudes follow the Borel
        distribution (:func:`borel_pmf`) with branching ratio ``crosstalk``;
        ``pedestal`` is then the extrapolated zero-cell charge and
        ``mean_pe`` is not defined (nan).
    fit_range : (float, float), optional
        Lowest and highest charge to fit (bins whose centres, or events whose
        charges, lie outside are left out), e.g. to drop an overflow bin or
        a region below a trigger threshold. Default: everything.

    Returns
    -------
    SpectrumFit
        Fitted parameters with one-sigma uncertainties, fit quality and the
        fitted model on the bin centres.

    Raises
    ------
    InputError
        Empty or malformed arrays, mismatched lengths, negative counts,
        non-increasing charges, unknown ``amplitudes``.
    ModelError
        No peak structure, too few events, or no photoelectron peak beyond
        the pedestal.

    Notes
    -----
    The peak at the lowest charge that carries a real local maximum is taken
    as the pedestal (zero fired cells): the spectrum must include it, and
    charge must grow with the number of fired cells (negate the axis for
    negative-going pulses). Counts must be raw numbers of events, not
    normalised or weighted, or the uncertainties are wrong. ``chi2`` is the
    likelihood-ratio chi-square: for bins with few counts its expectation
    per bin is below 1, so ``chi2 / ndf`` well below 1 is normal for sparse
    spectra; well above 1 means the model misses something (for example
    delayed crosstalk or afterpulses between the peaks).
    """
    if amplitudes not in AMPLITUDE_MODELS:
        raise InputError(f"amplitudes: unknown model {amplitudes!r} (choose from {', '.join(AMPLITUDE_MODELS)})")
    lo, hi = _check_range(fit_range)
    if counts is None:
        q = _check_events(charge)
        x, c = bin_events(q[(q >= lo) & (q <= hi)])
    else:
        x, c = _check_histogram(charge, counts)
        if fit_range is not None:
            keep = (x >= lo) & (x <= hi)
            x, c = _check_histogram(x[keep], c[keep], "inside fit_range")
        x, c = _fill_gaps(x, c)
    # work on a rescaled axis: origin at the first bin, unit = median bin width
    origin, unit = float(x[0]), float(np.median(np.diff(x)))
    xs = (x - origin) / unit
    edges = _edges_from_centres(xs)
    start = _start_values(xs, c, edges)
    if amplitudes == "borel":
        # the first peak is one fired cell; the zero-cell position lies one
        # spacing below it; P(1) = exp(-lambda)
        g0, s0, s1 = start["gain"], start["sigma0"], start["sigma1"]
        start = dict(start, pedestal=start["pedestal"] - g0, sigma0=float(np.sqrt(max(s0**2 - s1**2, (0.03 * g0) ** 2))),
                     crosstalk=float(np.clip(start["mean_pe"], 0.01, 0.9)))
        p, cov, m, nfev, model = _best_fit(xs, edges, c, start, "borel")
    else:
        p, cov, m, nfev, model = _best_fit(xs, edges, c, start, "gpoisson")
    if amplitudes == "free":
        # Free amplitudes cannot tell the spacing from half of it (the odd
        # peaks may simply be empty), so the peak labelling and the start come
        # from the generalised-Poisson fit.
        start = dict(start, pedestal=float(p[0]), gain=float(p[1]), sigma0=float(abs(p[2])),
                     sigma1=float(abs(p[3])), n_total=float(p[4]), mean_pe=float(p[5]), crosstalk=float(p[6]))
        p, cov, m, nfev_free, model = _fit(edges, c, start, "free")
        nfev += nfev_free
    err = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    q0, g, s0, s1 = p[:4]
    amp = model.amplitudes(p)[0]
    total = float(c.sum())
    if amplitudes == "gpoisson":
        mu, lam = float(p[5]), float(p[6])
        mu_err, lam_err = float(err[5]), float(err[6])
        names = ("pedestal", "gain", "sigma0", "sigma1", "n_total", "mean_pe", "crosstalk")
    elif amplitudes == "borel":
        mu, mu_err = float("nan"), float("nan")
        lam, lam_err = float(p[5]), float(err[5])
        names = ("pedestal", "gain", "sigma0", "sigma1", "n_total", "crosstalk")
    else:
        mu, lam, mu_err, lam_err = _free_amplitude_moments(amp, cov[4:, 4:])
        names = ("pedestal", "gain", "sigma0", "sigma1") + tuple(f"amplitude_{k}" for k in range(amp.size))
    if not np.sum(amp[1:]) >= 5.0:
        if amplitudes == "borel":
            raise ModelError("spectrum: only one peak (no crosstalk peak beyond it); the gain cannot be measured")
        raise ModelError("spectrum: no photoelectron peak beyond the pedestal; the gain cannot be measured")
    width_1 = np.hypot(s0, s1)
    if g < 2.0 * width_1:
        raise ModelError(
            f"spectrum: no peak structure found (fitted spacing {g / width_1:.2f} times the "
            "one-photoelectron peak width; need at least 2)")
    if not err[1] < 0.25 * g:
        raise ModelError(f"spectrum: the gain is not determined (relative uncertainty {err[1] / g:.0%})")
    ndf = int(c.size - p.size)
    chi2 = float(np.sum(_deviance_terms(m, c)))
    # back to the caller's unit (the covariance too)
    scale = np.ones(p.size)
    scale[:4] = unit
    cov_out = cov * np.outer(scale, scale)
    ro = lambda a: np.array(a, dtype=float).copy()  # noqa: E731
    fit = SpectrumFit(
        gain=float(g * unit), gain_err=float(err[1] * unit),
        pedestal=float(origin + q0 * unit), pedestal_err=float(err[0] * unit),
        sigma0=float(abs(s0) * unit), sigma0_err=float(err[2] * unit),
        sigma1=float(abs(s1) * unit), sigma1_err=float(err[3] * unit),
        mean_pe=mu, mean_pe_err=mu_err, crosstalk=lam, crosstalk_err=lam_err,
        chi2=chi2, ndf=ndf, n_peaks=int(model.n.size), method=amplitudes,
        charge=ro(x), counts=ro(c), model_counts=ro(m),
        n_events=total, bin_width=float(unit), peak_amplitudes=ro(amp),
        covariance=ro(cov_out), parameter_names=names, n_iterations=int(nfev),
    )
    for arr in (fit.charge, fit.counts, fit.model_counts, fit.peak_amplitudes, fit.covariance):
        arr.setflags(write=False)
    return fit


def _free_amplitude_moments(amp, cov):
    """mu = -ln(A0/sum A), lambda = 1 - mu/<n>, with propagated errors."""
    total = float(amp.sum())
    n = np.arange(amp.size, dtype=float)
    if amp[0] <= 0 or total <= 0:
        raise ModelError("spectrum: the fitted pedestal peak is empty; mean_pe cannot be measured")
    mu = -np.log(amp[0] / total)
    mean_n = float(np.sum(n * amp) / total)
    # gradients with respect to the amplitudes
    d_mu = np.full(amp.size, 1.0 / total)
    d_mu[0] -= 1.0 / amp[0]
    d_mean = (n - mean_n) / total
    if mean_n > 0:
        lam = 1.0 - mu / mean_n
        d_lam = -d_mu / mean_n + mu * d_mean / mean_n**2
    else:
        lam, d_lam = 0.0, np.zeros(amp.size)
    mu_err = float(np.sqrt(max(d_mu @ cov @ d_mu, 0.0)))
    lam_err = float(np.sqrt(max(d_lam @ cov @ d_lam, 0.0)))
    return float(mu), float(lam), mu_err, lam_err


# ---------------------------------------------------------------------------
# baseline


def naive_gain(charge, counts) -> float:
    """Baseline gain: spacing of the two largest peaks.

    The counts are smoothed with a 3-bin moving average; local maxima with a
    prominence of at least 5 % of the highest count are peaks; the distance
    between the two highest is returned. This is the naive method the
    benchmark compares :func:`fit_spectrum` against: it is wrong whenever the
    two largest peaks are not neighbours.

    Parameters
    ----------
    charge : array_like
        Bin centres (any charge unit).
    counts : array_like
        Events per bin.

    Returns
    -------
    float
        Peak spacing in the unit of ``charge``.

    Raises
    ------
    ModelError
        Fewer than two peaks.
    """
    from scipy.signal import find_peaks

    x, c = _check_histogram(charge, counts)
    sm = np.convolve(c, np.ones(3) / 3.0, mode="same")
    idx, _ = find_peaks(sm, prominence=0.05 * sm.max())
    if idx.size < 2:
        raise ModelError("spectrum: fewer than two peaks; the naive gain is undefined")
    top = idx[np.argsort(sm[idx])[-2:]]
    return float(abs(x[top[1]] - x[top[0]]))
