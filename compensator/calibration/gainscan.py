"""Gain scans: breakdown voltage and cell capacitance from gain against bias.

Above breakdown the gain is linear in bias, G = C_cell (V - Vbd) / q (common
practice), so a weighted line fit of G against V gives the breakdown voltage as
the zero crossing and the cell capacitance as slope * q. The gains may come
from a table (electrons per avalanche) or from charge spectra taken at several
biases (fitted with :func:`compensator.calibration.spectrum.fit_spectrum`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.errors import CompensatorError, ModelError

__all__ = ["MAX_ERROR_RATIO", "GainScanFit", "PolyFit", "SpectraScan", "fit_gain_scan", "fit_polynomial",
    "gain_scan_from_fits", "gain_scan_from_spectra"]

#: Largest ratio between the biggest and the smallest error of one weighted fit.
MAX_ERROR_RATIO = 1e6


@dataclass(frozen=True)
class PolyFit:
    """A (weighted) polynomial least-squares fit y = sum_i coef[i] (x - x0)^i.

    Attributes
    ----------
    coef : ndarray
        Coefficients, lowest power first.
    cov : ndarray
        Covariance of ``coef``.
    chi2 : float
        Weighted sum of squared residuals (plain sum of squares when unweighted).
    ndf : int
        Degrees of freedom (points minus coefficients).
    x0 : float
        Centre the powers are taken about.
    weighted : bool
        Whether ``y_err`` was given (covariance from the errors) or not (from the scatter).
    scale : float
        Factor applied to the errors (sqrt(chi2/ndf) when inflated, else 1).
    """

    coef: np.ndarray
    cov: np.ndarray
    chi2: float
    ndf: int
    x0: float
    weighted: bool
    scale: float

    @property
    def err(self) -> np.ndarray:
        """One-sigma errors of ``coef``."""
        return np.sqrt(np.diag(self.cov))

    def __call__(self, x):
        """Evaluate the polynomial at ``x``."""
        dx = np.asarray(x, dtype=float) - self.x0
        return sum(c * dx ** i for i, c in enumerate(self.coef))

    def band(self, x):
        """One-sigma error band of the fitted curve at ``x`` (from the covariance)."""
        dx = np.asarray(x, dtype=float) - self.x0
        basis = np.stack([dx ** i for i in range(len(self.coef))], axis=-1)
        return np.sqrt(np.einsum("...i,ij,...j->...", basis, self.cov, basis))


def fit_polynomial(x, y, degree, y_err=None, *, x0=0.0, inflate=True) -> PolyFit:
    """Least-squares polynomial fit, weighted by 1/y_err^2 when errors are given.

    Parameters
    ----------
    x, y : array_like
        Data (any units).
    degree : int
        Polynomial degree.
    y_err : array_like, optional
        One-sigma errors of ``y``. Without them all points weigh the same and
        the covariance is scaled by chi2/ndf (as ``numpy.polyfit(cov=True)``).
    x0 : float
        Centre of the powers (e.g. a reference temperature).
    inflate : bool
        With ``y_err``: scale the covariance by chi2/ndf when that exceeds 1
        (the scatter is larger than the errors claim; common practice).

    Returns
    -------
    PolyFit

    Raises
    ------
    ModelError
        Fewer points than coefficients, or non-finite/non-positive errors.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n = x.size
    if n < degree + 1:
        raise ModelError(f"a degree-{degree} fit needs at least {degree + 1} points, got {n}")
    if np.unique(x).size < degree + 1:
        raise ModelError(f"a degree-{degree} fit needs at least {degree + 1} distinct x values")
    if y_err is not None:
        y_err = np.asarray(y_err, dtype=float)
        if not np.all(np.isfinite(y_err)) or np.any(y_err <= 0):
            raise ModelError("y_err must be finite and positive", key="y_err")
        if y_err.max() > MAX_ERROR_RATIO * y_err.min():
            raise ModelError(f"the errors span from {y_err.min():.3g} to {y_err.max():.3g} (more than a factor "
                             f"{MAX_ERROR_RATIO:.0e}): one point would outweigh all others; check the error column",
                             key="y_err")
        w = 1.0 / y_err ** 2
    else:
        w = np.ones(n)
    basis = np.stack([(x - x0) ** i for i in range(degree + 1)], axis=1)
    a = basis.T @ (w[:, None] * basis)
    if not np.all(np.isfinite(a)) or np.linalg.cond(a) > 1e14:
        raise ModelError("the fit is singular (the x values or weights do not determine the coefficients)")
    cov = np.linalg.inv(a)
    coef = cov @ (basis.T @ (w * y))
    chi2 = float(np.sum(w * (y - basis @ coef) ** 2))
    ndf = n - degree - 1
    scale = 1.0
    if ndf > 0 and (y_err is None or (inflate and chi2 / ndf > 1.0)):
        scale = float(np.sqrt(chi2 / ndf))
    elif y_err is None:
        scale = float("nan")  # no degrees of freedom left to estimate the scatter
    return PolyFit(coef, cov * scale ** 2, chi2, ndf, float(x0), y_err is not None, scale)


@dataclass(frozen=True)
class GainScanFit:
    """Result of a gain scan.

    Attributes
    ----------
    breakdown_v, breakdown_err_v : float
        Breakdown voltage (zero-gain crossing) and its one-sigma error, volt.
    slope_per_v, slope_err_per_v : float
        Gain per volt of overvoltage (in ``gain_unit`` per volt).
    capacitance_f, capacitance_err_f : float
        Cell capacitance slope * q (farad); NaN when the gain is in an unknown charge unit.
    gain_unit : str
        ``"electrons"`` or the charge unit of the spectra.
    temp_c : float or None
        Temperature of the scan, degree Celsius.
    chi2 : float
    ndf : int
    n_points : int
    line : PolyFit
        The underlying line fit (gain = coef[0] + coef[1] (V - x0)).
    """

    breakdown_v: float
    breakdown_err_v: float
    slope_per_v: float
    slope_err_per_v: float
    capacitance_f: float
    capacitance_err_f: float
    gain_unit: str
    temp_c: float | None
    chi2: float
    ndf: int
    n_points: int
    line: PolyFit = field(repr=False)


def fit_gain_scan(bias_v, gain, gain_err=None, *, temp_c=None, charge_per_unit_c=None,
                  gain_unit="electrons") -> GainScanFit:
    """Breakdown voltage and cell capacitance from a weighted line fit of gain against bias.

    Parameters
    ----------
    bias_v : array_like
        Bias, volt (at least 3 distinct values, all above breakdown).
    gain : array_like
        Gain at each bias, in electrons per avalanche (``gain_unit="electrons"``)
        or in a charge unit (then give ``charge_per_unit_c`` for the capacitance).
    gain_err : array_like, optional
        One-sigma errors of the gains (same unit); without them the scatter sets the errors.
    temp_c : float, optional
        Temperature of the scan, degree Celsius (carried into the result).
    charge_per_unit_c : float, optional
        Coulomb per unit of ``gain`` when it is a charge (e.g. 1e-12 for pC).
    gain_unit : str
        Name of the gain unit, for the report.

    Returns
    -------
    GainScanFit

    Raises
    ------
    ModelError
        Too few points, or a gain that does not rise with bias.
    """
    bias_v = np.asarray(bias_v, dtype=float)
    gain = np.asarray(gain, dtype=float)
    if bias_v.shape != gain.shape or bias_v.ndim != 1:
        raise ModelError("bias_v and gain must be 1-D arrays of the same length")
    if bias_v.size < 3:
        raise ModelError(f"a gain scan needs at least 3 bias points, got {bias_v.size}")
    centre = float(np.mean(bias_v))
    try:
        line = fit_polynomial(bias_v, gain, 1, gain_err, x0=centre)
    except ModelError as exc:
        raise ModelError(exc.reason, key="gain_err" if exc.key == "y_err" else exc.key) from None
    a0, a1 = line.coef
    if not a1 > 0:
        slope_err = float(np.sqrt(line.cov[1, 1]))
        raise ModelError(f"gain does not rise with bias (fitted slope {a1:.4g} +- {slope_err:.2g} per volt); not a "
                         "gain scan above breakdown, or a gain error so small that one point sets the line")
    breakdown = centre - a0 / a1
    grad = np.array([-1.0 / a1, a0 / a1 ** 2])
    breakdown_err = float(np.sqrt(grad @ line.cov @ grad))
    slope_err = float(np.sqrt(line.cov[1, 1]))
    if gain_unit == "electrons":
        per_unit = ELEMENTARY_CHARGE_C
    else:
        per_unit = charge_per_unit_c
    cap = a1 * per_unit if per_unit else float("nan")
    cap_err = slope_err * per_unit if per_unit else float("nan")
    return GainScanFit(float(breakdown), breakdown_err, float(a1), slope_err, float(cap), float(cap_err), gain_unit,
                       temp_c, line.chi2, line.ndf, int(bias_v.size), line)


@dataclass(frozen=True)
class SpectraScan:
    """A gain scan from spectra: the line fit plus each spectrum's fit or failure.

    Attributes
    ----------
    scan : GainScanFit
    spectra : tuple
        Per spectrum, the ``SpectrumFit`` or None where the fit failed.
    failures : tuple of str
        Per spectrum, ``""`` or why its fit failed.
    """

    scan: GainScanFit
    spectra: tuple
    failures: tuple


def gain_scan_from_spectra(bias_v, spectra, *, temp_c=None, charge_per_unit_c=None, charge_unit="") -> SpectraScan:
    """Fit each spectrum's gain, then the gain scan.

    Parameters
    ----------
    bias_v : array_like
        Bias of each spectrum, volt.
    spectra : sequence of (charge, counts)
        Histogram bin centres and counts, or an event list with ``counts=None``.
    temp_c : float, optional
        Temperature of the scan, degree Celsius.
    charge_per_unit_c : float, optional
        Coulomb per charge unit; without it the capacitance is NaN.
    charge_unit : str
        Name of the charge unit (for the report).

    Returns
    -------
    SpectraScan

    Raises
    ------
    ModelError
        Fewer than 3 spectra could be fitted.
    """
    from compensator.calibration.spectrum import fit_spectrum

    fits, failures = [], []
    for charge, counts in spectra:
        try:
            fits.append(fit_spectrum(charge, counts))
            failures.append("")
        except CompensatorError as exc:
            fits.append(None)
            failures.append(str(exc).splitlines()[0] if str(exc) else type(exc).__name__)
    return gain_scan_from_fits(bias_v, fits, failures, temp_c=temp_c, charge_per_unit_c=charge_per_unit_c,
                               charge_unit=charge_unit)


def gain_scan_from_fits(bias_v, fits, failures=None, *, temp_c=None, charge_per_unit_c=None,
                        charge_unit="") -> SpectraScan:
    """The gain scan from spectra already fitted (e.g. on a process pool).

    Parameters
    ----------
    bias_v : array_like
        Bias of each spectrum, volt.
    fits : sequence of SpectrumFit or None
        Each spectrum's fit, None where it failed.
    failures : sequence of str, optional
        Why each failed fit failed (``""`` for the good ones).
    temp_c, charge_per_unit_c, charge_unit
        As for :func:`gain_scan_from_spectra`.

    Returns
    -------
    SpectraScan

    Raises
    ------
    ModelError
        Fewer than 3 spectra were fitted, or ``bias_v`` and ``fits`` differ in length.
    """
    bias_v = np.asarray(bias_v, dtype=float)
    fits = list(fits)
    if bias_v.shape != (len(fits),):
        raise ModelError(f"one bias per spectrum: {bias_v.size} biases for {len(fits)} spectra")
    failures = tuple(failures) if failures is not None else tuple("" if f is not None else "fit failed" for f in fits)
    ok = [i for i, f in enumerate(fits) if f is not None]
    if len(ok) < 3:
        raise ModelError(f"only {len(ok)} of {len(fits)} spectra could be fitted; a gain scan needs 3")
    gains = np.array([fits[i].gain for i in ok])
    errs = np.array([fits[i].gain_err for i in ok])
    use_err = errs if np.all(np.isfinite(errs)) and np.all(errs > 0) else None
    unit = charge_unit or "charge unit"
    scan = fit_gain_scan(bias_v[ok], gains, use_err, temp_c=temp_c, charge_per_unit_c=charge_per_unit_c, gain_unit=unit)
    return SpectraScan(scan, tuple(fits), failures)
