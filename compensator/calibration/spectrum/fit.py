"""The public spectrum fit and its result record."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compensator.calibration.spectrum.histogram import (
    _check_events,
    _check_histogram,
    _check_range,
    _edges_from_centres,
    _fill_gaps,
    bin_events,
)
from compensator.calibration.spectrum.amplitudes import AMPLITUDE_MODEL_TABLE, AMPLITUDE_MODELS
from compensator.calibration.spectrum.model import _best_fit, _deviance_terms, _fit
from compensator.calibration.spectrum.start import _start_values
from compensator.errors import InputError, ModelError
from compensator.physics.counting import crosstalk_probability_from_branching_ratio

__all__ = ["SpectrumFit", "fit_spectrum"]

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
    crosstalk_branching_ratio, crosstalk_branching_ratio_err : float
        Prompt-crosstalk branching ratio ``lambda`` (mean secondaries per
        avalanche; the generalised Poisson and Borel parameter). The
        probability that an avalanche triggers at least one neighbour, the
        ``crosstalk.probability`` of a SiPM profile, is
        :attr:`crosstalk_probability` ``= 1 - exp(-lambda)``: about 14 % less
        than ``lambda`` at ``lambda = 0.3``. (``crosstalk`` and
        ``crosstalk_err`` are older names of the branching ratio and its error.)
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
    crosstalk_branching_ratio: float
    crosstalk_branching_ratio_err: float
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
        return primaries / (1.0 - self.crosstalk_branching_ratio)

    @property
    def crosstalk(self) -> float:
        """Older name of :attr:`crosstalk_branching_ratio`."""
        return self.crosstalk_branching_ratio

    @property
    def crosstalk_err(self) -> float:
        """Older name of :attr:`crosstalk_branching_ratio_err`."""
        return self.crosstalk_branching_ratio_err

    @property
    def crosstalk_probability(self) -> float:
        """Probability that an avalanche triggers at least one crosstalk avalanche, ``1 - exp(-lambda)``."""
        return float(crosstalk_probability_from_branching_ratio(self.crosstalk_branching_ratio)[0])

    @property
    def crosstalk_probability_err(self) -> float:
        """One-sigma error of :attr:`crosstalk_probability` (first order: ``exp(-lambda)`` times that of lambda)."""
        return float(crosstalk_probability_from_branching_ratio(self.crosstalk_branching_ratio,
                                                                self.crosstalk_branching_ratio_err)[1])

    def summary(self) -> dict:
        """The scalar results as a plain dict (for JSON and tables)."""
        keys = (
            "gain", "gain_err", "pedestal", "pedestal_err", "sigma0", "sigma0_err",
            "sigma1", "sigma1_err", "mean_pe", "mean_pe_err", "crosstalk_branching_ratio",
            "crosstalk_branching_ratio_err", "crosstalk_probability", "crosstalk_probability_err", "chi2", "ndf", "n_peaks", "method", "n_events", "bin_width",
        )
        return {k: getattr(self, k) for k in keys}


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

    Examples
    --------
    A seeded synthetic spectrum: gain 1 (charge units), 1.5 photoelectrons,
    branching ratio 0.1:

    >>> import numpy as np
    >>> from compensator.calibration.synthetic import simulate_spectrum
    >>> charge, counts = simulate_spectrum(np.random.default_rng(1), gain=1.0, pedestal=0.0, sigma0=0.1,
    ...                                    sigma1=0.05, mean_pe=1.5, crosstalk=0.1, n_events=20000, bin_width=0.02)
    >>> fit = fit_spectrum(charge, counts)
    >>> round(fit.gain, 2), round(fit.crosstalk_branching_ratio, 2)
    (1.0, 0.11)
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
    kind = AMPLITUDE_MODEL_TABLE[amplitudes]
    first = AMPLITUDE_MODEL_TABLE[kind.seeded_by] if kind.seeded_by else kind
    p, cov, m, nfev, model = _best_fit(xs, edges, c, first.prepare_start(start), first.name)
    if kind.seeded_by:
        # Free amplitudes cannot tell the spacing from half of it (the odd
        # peaks may simply be empty), so the peak labelling and the start come
        # from the seeding model's fit.
        start = dict(start, pedestal=float(p[0]), gain=float(p[1]), sigma0=float(abs(p[2])),
                     sigma1=float(abs(p[3])), n_total=float(p[4]), **first.restart(p[4:]))
        p, cov, m, nfev_seeded, model = _fit(edges, c, start, kind.name)
        nfev += nfev_seeded
    err = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    q0, g, s0, s1 = p[:4]
    amp = model.amplitudes(p)[0]
    total = float(c.sum())
    moments = kind.moments(p[4:], err[4:], amp, cov[4:, 4:])
    mu, mu_err, lam, lam_err = moments
    names = ("pedestal", "gain", "sigma0", "sigma1") + kind.parameter_names(amp.size)
    if not np.sum(amp[1:]) >= 5.0:
        raise ModelError(f"spectrum: {kind.no_peak_reason}; the gain cannot be measured")
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
        mean_pe=mu, mean_pe_err=mu_err, crosstalk_branching_ratio=lam, crosstalk_branching_ratio_err=lam_err,
        chi2=chi2, ndf=ndf, n_peaks=int(model.n.size), method=amplitudes,
        charge=ro(x), counts=ro(c), model_counts=ro(m),
        n_events=total, bin_width=float(unit), peak_amplitudes=ro(amp),
        covariance=ro(cov_out), parameter_names=names, n_iterations=int(nfev),
    )
    for arr in (fit.charge, fit.counts, fit.model_counts, fit.peak_amplitudes, fit.covariance):
        arr.setflags(write=False)
    return fit
