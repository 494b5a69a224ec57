"""Prompt crosstalk of a SiPM profile from the branching ratios of fitted charge spectra.

A generalised-Poisson (or Borel) spectrum fit measures the branching ratio
``lambda``: the mean number of crosstalk avalanches one avalanche triggers
directly. A SiPM profile holds ``crosstalk.probability``, the probability of
at least one, ``p = 1 - exp(-lambda)`` for a Poisson number of them
(Vinogradov, NIM A 695, 247, 2012), at ``crosstalk.ref_overvoltage_v``, and
the model ``lambda(Vov) = lambda_ref (Vov / Vov_ref)^n`` (the profile's
``p = 1 - exp(-k Vov^n)``). Copying ``lambda`` into the profile is off by
about 14 % at ``lambda = 0.3``; :func:`calibrate_crosstalk` converts.

Spectra at one overvoltage give ``lambda_ref`` (each scaled to the reference
with the base profile's exponent, then their weighted mean); spectra at two
or more overvoltages also give the exponent, from a weighted line fit of
``ln lambda`` against ``ln(Vov / Vov_ref)``.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass

import numpy as np

from compensator.calibration.gainscan import fit_polynomial
from compensator.errors import ModelError
from compensator.physics.counting import crosstalk_probability_from_branching_ratio

__all__ = ["MEASURED_MODEL", "CrosstalkCalibration", "calibrate_crosstalk", "crosstalk_values"]

#: The profile's crosstalk model that matches a generalised-Poisson or Borel fit.
MEASURED_MODEL = "branching_poisson"


@dataclass(frozen=True, kw_only=True)
class CrosstalkCalibration:
    """Crosstalk at the reference overvoltage, from measured branching ratios.

    Attributes
    ----------
    ref_overvoltage_v : float
        Reference overvoltage, volt.
    branching_ratio_at_ref, branching_ratio_err_at_ref : float
        ``lambda`` at the reference and its one-sigma error.
    probability_at_ref, probability_err_at_ref : float
        ``1 - exp(-lambda)`` at the reference (the profile's ``crosstalk.probability``)
        and its one-sigma error (first order, ``exp(-lambda)`` times that of lambda).
    overvoltage_exponent : float
        Exponent ``n`` of ``lambda`` against overvoltage: fitted, or the given one.
    overvoltage_exponent_err : float
        One-sigma error of the fitted exponent; NaN when it was given.
    exponent_fitted : bool
        True when the spectra spanned two or more overvoltages.
    points : int
        Number of spectra.
    chi2 : float
        Weighted sum of squared residuals (NaN without degrees of freedom).
    ndf : int
        Degrees of freedom.
    model : str
        The profile crosstalk model the measurement stands for (``branching_poisson``).
    """

    ref_overvoltage_v: float
    branching_ratio_at_ref: float
    branching_ratio_err_at_ref: float
    probability_at_ref: float
    probability_err_at_ref: float
    overvoltage_exponent: float
    overvoltage_exponent_err: float
    exponent_fitted: bool
    points: int
    chi2: float
    ndf: int
    model: str = MEASURED_MODEL


def calibrate_crosstalk(branching_ratio, overvoltage_v, *, branching_ratio_err, ref_overvoltage_v,
                        overvoltage_exponent) -> CrosstalkCalibration:
    """Crosstalk probability at the reference overvoltage from measured branching ratios.

    Parameters
    ----------
    branching_ratio : array_like
        Fitted ``lambda`` of each spectrum, 0 < lambda < 1.
    overvoltage_v : array_like
        Overvoltage each spectrum was taken at, volt (positive).
    branching_ratio_err : array_like
        One-sigma errors of ``branching_ratio`` (positive).
    ref_overvoltage_v : float
        Overvoltage the profile states the crosstalk at, volt.
    overvoltage_exponent : float
        Exponent ``n`` used when the spectra do not span two overvoltages.

    Returns
    -------
    CrosstalkCalibration

    Raises
    ------
    ModelError
        Arrays of different lengths, a branching ratio outside (0, 1), a
        non-positive error or overvoltage.

    Examples
    --------
    >>> cal = calibrate_crosstalk([0.3], [3.0], branching_ratio_err=[0.01], ref_overvoltage_v=3.0,
    ...                           overvoltage_exponent=2.0)
    >>> round(cal.probability_at_ref, 4)
    0.2592
    """
    lam = np.atleast_1d(np.asarray(branching_ratio, dtype=float))
    err = np.atleast_1d(np.asarray(branching_ratio_err, dtype=float))
    ov = np.atleast_1d(np.asarray(overvoltage_v, dtype=float))
    if not lam.size or lam.shape != err.shape or lam.shape != ov.shape or lam.ndim != 1:
        raise ModelError(f"one branching ratio, error and overvoltage per spectrum (got {lam.size}, {err.size}, "
                         f"{ov.size})", key="branching_ratio")
    if not np.all((lam > 0) & (lam < 1)):
        raise ModelError(f"a branching ratio of {lam[~((lam > 0) & (lam < 1))][0]:.4g} measures no crosstalk of the "
                         "model (it must lie between 0 and 1)", key="branching_ratio")
    if not np.all(np.isfinite(err) & (err > 0)):
        raise ModelError("branching-ratio errors must be finite and positive", key="branching_ratio_err")
    if not np.all(np.isfinite(ov) & (ov > 0)):
        raise ModelError(f"overvoltages must be positive, got {ov[~(np.isfinite(ov) & (ov > 0))][0]:.4g} V",
                         key="overvoltage_v")
    if not (np.isfinite(ref_overvoltage_v) and ref_overvoltage_v > 0):
        raise ModelError(f"must be positive, got {ref_overvoltage_v!r}", key="ref_overvoltage_v")
    x = np.log(ov / ref_overvoltage_v)
    if np.unique(np.round(ov, 6)).size >= 2:
        # ln lambda = ln lambda_ref + n ln(Vov / Vref); the error of ln lambda is err / lambda.
        fit = fit_polynomial(x, np.log(lam), 1, err / lam, inflate=True)
        lam_ref = float(np.exp(fit.coef[0]))
        lam_ref_err = lam_ref * float(fit.err[0])
        exponent, exponent_err, fitted = float(fit.coef[1]), float(fit.err[1]), True
        chi2, ndf = float(fit.chi2), int(fit.ndf)
    else:
        scale = np.exp(-overvoltage_exponent * x)  # (Vref / Vov)^n
        scaled, scaled_err = lam * scale, err * scale
        w = 1.0 / scaled_err ** 2
        lam_ref = float(np.sum(w * scaled) / np.sum(w))
        lam_ref_err = float(np.sqrt(1.0 / np.sum(w)))
        ndf = lam.size - 1
        chi2 = float(np.sum(w * (scaled - lam_ref) ** 2)) if ndf else float("nan")
        exponent, exponent_err, fitted = float(overvoltage_exponent), float("nan"), False
    if not 0 < lam_ref < 1:
        raise ModelError(f"the branching ratio at the reference overvoltage {ref_overvoltage_v:g} V comes out at "
                         f"{lam_ref:.4g}, outside the model's range (0 to 1)", key="branching_ratio")
    p, p_err = crosstalk_probability_from_branching_ratio(lam_ref, lam_ref_err)
    return CrosstalkCalibration(
        ref_overvoltage_v=float(ref_overvoltage_v), branching_ratio_at_ref=lam_ref,
        branching_ratio_err_at_ref=lam_ref_err, probability_at_ref=float(p), probability_err_at_ref=float(p_err),
        overvoltage_exponent=exponent, overvoltage_exponent_err=exponent_err, exponent_fitted=fitted,
        points=int(lam.size), chi2=chi2, ndf=ndf)


def crosstalk_values(base_values: dict, cal: CrosstalkCalibration, *, name=None) -> dict:
    """Profile values of a ``sipm`` profile with the measured crosstalk (the base left untouched).

    Parameters
    ----------
    base_values : dict
        ``profile.values`` of the base ``sipm`` profile.
    cal : CrosstalkCalibration
    name : str, optional
        Name of the new profile (default: the base name with ``-calibrated``).

    Returns
    -------
    dict
        The base values with ``crosstalk.probability`` = ``1 - exp(-lambda_ref)``,
        ``crosstalk.ref_overvoltage_v``, the exponent (when fitted) and
        ``crosstalk.model: branching_poisson`` (the model the spectra were fitted with).
    """
    values = copy.deepcopy(base_values)
    values["name"] = name or f"{base_values['name']}-calibrated"
    values["description"] = f"{base_values['name']} with crosstalk calibrated from charge spectra"
    xt = values["crosstalk"]
    xt.update(probability=round(cal.probability_at_ref, 6), ref_overvoltage_v=float(cal.ref_overvoltage_v),
              model=cal.model)
    if cal.exponent_fitted:
        xt["overvoltage_exponent"] = round(cal.overvoltage_exponent, 4)
    return values
