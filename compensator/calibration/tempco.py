"""Temperature coefficient of the breakdown voltage, and calibrated ``sipm`` profiles.

Breakdown voltage against temperature is fitted with a line and a parabola
about a reference temperature, Vbd(T) = Vbd0 + a (T - Tref) + b (T - Tref)^2
(close to linear from -40 to +50 C; common practice). The quadratic term is
kept only when it is significant:

* with per-point errors, by the likelihood-ratio test: the drop in chi-square
  from the line to the parabola follows a chi-square distribution with one
  degree of freedom (Wilks' theorem; p from ``scipy.stats.chi2``);
* without errors, by the F-test for nested least-squares models,
  F = (RSS_line - RSS_parabola) / (RSS_parabola / (n - 3)), with (1, n - 3)
  degrees of freedom (p from ``scipy.stats.f``).

When gain scans at several temperatures are given, the bias that holds a
chosen gain G0 is V(T) = Vbd(T) + G0 / s(T), with s the gain per volt; its
slope against temperature is the constant-gain bias slope, which differs from
the breakdown tempco when the cell capacitance drifts with temperature.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from pathlib import PurePath

import numpy as np
from scipy import stats

from compensator.calibration.gainscan import PolyFit, fit_polynomial
from compensator.errors import ModelError

__all__ = ["ALPHA", "IMPROBABLE_P", "ChannelTempco", "ConstantGainSlope", "TempcoCalibration", "TempcoFit",
           "calibrate_tempco", "calibrated_values", "chi2_p_value", "constant_gain_slope", "fit_tempco",
           "write_calibrated_profile"]

#: Significance level of the test of the quadratic term.
ALPHA = 0.05


@dataclass(frozen=True)
class TempcoFit:
    """Temperature dependence of the breakdown voltage.

    Attributes
    ----------
    ref_temp_c : float
        Reference temperature, degree Celsius.
    breakdown_v_at_ref, breakdown_err_v : float
        Breakdown at the reference temperature and its one-sigma error, volt (chosen
        model): the fit's statistical error and ``breakdown_sys_err_v`` in quadrature.
    tempco_mv_per_k, tempco_err_mv_per_k : float
        Slope at the reference temperature, millivolt per kelvin (chosen model).
    curvature_mv_per_k2, curvature_err_mv_per_k2 : float
        Quadratic term of the chosen model (0 for the line), millivolt per kelvin squared.
    model : {"linear", "quadratic"}
        Chosen model: quadratic only when its extra term is significant.
    quadratic_curvature_mv_per_k2, quadratic_curvature_err_mv_per_k2 : float
        The quadratic term as fitted (NaN with fewer than 4 points).
    quadratic_p_value : float
        p-value of the test of the quadratic term (NaN with fewer than 4 points).
    quadratic_significant : bool
    test : str
        Name of the test used.
    n_points : int
    chi2 : float
        Chi-square (or residual sum of squares in volt^2 when unweighted) of the chosen model.
    ndf : int
    linear, quadratic : PolyFit
        The underlying fits in volt against kelvin from the reference (``quadratic`` may be None).
    breakdown_sys_err_v : float
        The systematic error common to every point (the breakdown method's own,
        fully correlated between the points), volt; it moves the breakdown at the
        reference but not the temperature coefficient.
    """

    ref_temp_c: float
    breakdown_v_at_ref: float
    breakdown_err_v: float
    tempco_mv_per_k: float
    tempco_err_mv_per_k: float
    curvature_mv_per_k2: float
    curvature_err_mv_per_k2: float
    model: str
    quadratic_curvature_mv_per_k2: float
    quadratic_curvature_err_mv_per_k2: float
    quadratic_p_value: float
    quadratic_significant: bool
    test: str
    n_points: int
    chi2: float
    ndf: int
    linear: PolyFit = field(repr=False)
    quadratic: PolyFit | None = field(repr=False, default=None)
    breakdown_sys_err_v: float = 0.0

    @property
    def chosen(self) -> PolyFit:
        """The fit of the chosen model."""
        return self.quadratic if self.model == "quadratic" else self.linear


def fit_tempco(temp_c, breakdown_v, breakdown_err_v=None, *, ref_temp_c=25.0, alpha=ALPHA,
               common_err_v=None, offset_v=0.0, offset_err_v=0.0) -> TempcoFit:
    """Weighted linear and quadratic fits of breakdown voltage against temperature.

    Parameters
    ----------
    temp_c : array_like
        Temperatures, degree Celsius (at least 2 distinct values; 4 for the quadratic test).
    breakdown_v : array_like
        Breakdown voltages, volt.
    breakdown_err_v : array_like, optional
        One-sigma errors, volt; without them the scatter sets the errors.
    ref_temp_c : float
        Reference temperature, degree Celsius.
    alpha : float
        Significance level for keeping the quadratic term.
    common_err_v : float or array_like, optional
        One-sigma systematic error common to every point, volt (e.g. the
        ``breakdown_sys_err_v`` of :func:`~compensator.calibration.iv.find_breakdown`,
        whose model-form bias has the same sign on every curve); an array is
        averaged. Give ``breakdown_err_v`` without it then: a common error
        does not average down over the points as independent errors do, so it
        is added in quadrature to the error at the reference temperature
        (it leaves the temperature coefficient unchanged).
    offset_v, offset_err_v : float
        A known offset to another breakdown definition and its one-sigma
        error, volt (:func:`~compensator.calibration.definitions.definition_offset`):
        the breakdown at the reference is reported on that definition
        (``offset_v`` added) and the offset's error joins the common error.

    Returns
    -------
    TempcoFit

    Raises
    ------
    ModelError
        Too few points or temperatures.
    """
    temp_c = np.asarray(temp_c, dtype=float)
    breakdown_v = np.asarray(breakdown_v, dtype=float)
    if temp_c.shape != breakdown_v.shape or temp_c.ndim != 1:
        raise ModelError("temp_c and breakdown_v must be 1-D arrays of the same length")
    if np.unique(temp_c).size < 2:
        raise ModelError(f"a temperature coefficient needs at least 2 distinct temperatures, got {np.unique(temp_c).size}")
    lin = fit_polynomial(temp_c, breakdown_v, 1, breakdown_err_v, x0=ref_temp_c)
    quad = None
    p_value = float("nan")
    test = "none (fewer than 4 temperatures)"
    if np.unique(temp_c).size >= 4:
        quad = fit_polynomial(temp_c, breakdown_v, 2, breakdown_err_v, x0=ref_temp_c)
        if breakdown_err_v is not None:
            test = "likelihood-ratio (delta chi-square, 1 dof)"
            p_value = float(stats.chi2.sf(max(lin.chi2 - quad.chi2, 0.0), 1))
        else:
            test = f"F-test of nested models (1, {quad.ndf} dof)"
            rss1, rss2 = lin.chi2, quad.chi2
            if rss2 <= 0:
                p_value = 0.0 if rss1 > 0 else 1.0
            else:
                p_value = float(stats.f.sf((rss1 - rss2) / (rss2 / quad.ndf), 1, quad.ndf))
    significant = bool(quad is not None and p_value < alpha)
    chosen = quad if significant else lin
    err = chosen.err
    curv = 1e3 * quad.coef[2] if quad is not None else float("nan")
    curv_err = 1e3 * quad.err[2] if quad is not None else float("nan")
    common = 0.0 if common_err_v is None else float(np.mean(np.asarray(common_err_v, dtype=float)))
    if not (np.isfinite(common) and common >= 0):
        raise ModelError(f"common_err_v must be finite and non-negative, got {common!r}", key="common_err_v")
    if not (np.isfinite(offset_v) and np.isfinite(offset_err_v) and offset_err_v >= 0):
        raise ModelError(f"offset_v and offset_err_v must be finite (the error non-negative), got {offset_v!r}, "
                         f"{offset_err_v!r}", key="offset_v")
    common = float(np.hypot(common, offset_err_v))
    return TempcoFit(
        ref_temp_c=float(ref_temp_c), breakdown_v_at_ref=float(chosen.coef[0] + offset_v),
        breakdown_err_v=float(np.hypot(err[0], common)), breakdown_sys_err_v=common,
        tempco_mv_per_k=float(1e3 * chosen.coef[1]), tempco_err_mv_per_k=float(1e3 * err[1]),
        curvature_mv_per_k2=float(1e3 * chosen.coef[2]) if significant else 0.0,
        curvature_err_mv_per_k2=float(1e3 * err[2]) if significant else 0.0,
        model="quadratic" if significant else "linear",
        quadratic_curvature_mv_per_k2=float(curv), quadratic_curvature_err_mv_per_k2=float(curv_err),
        quadratic_p_value=p_value, quadratic_significant=significant, test=test, n_points=int(temp_c.size),
        chi2=float(chosen.chi2), ndf=int(chosen.ndf), linear=lin, quadratic=quad)


@dataclass(frozen=True)
class ConstantGainSlope:
    """Bias slope that holds a fixed gain over temperature.

    Attributes
    ----------
    slope_mv_per_k, slope_err_mv_per_k : float
        dV/dT at constant gain, millivolt per kelvin.
    target_gain : float
        The gain held (unit of the scans' slope times volt).
    bias_v : ndarray
        Bias that gives ``target_gain`` at each temperature, volt.
    capacitance_tempco_ppm_per_k, capacitance_tempco_err_ppm_per_k : float
        Relative slope of the gain per volt against temperature, ppm per kelvin.
    """

    slope_mv_per_k: float
    slope_err_mv_per_k: float
    target_gain: float
    bias_v: np.ndarray
    capacitance_tempco_ppm_per_k: float
    capacitance_tempco_err_ppm_per_k: float


def constant_gain_slope(temp_c, breakdown_v, slope_per_v, *, overvoltage_v=3.0, ref_temp_c=25.0,
                        breakdown_err_v=None) -> ConstantGainSlope:
    """Constant-gain bias slope from gain scans at several temperatures.

    Parameters
    ----------
    temp_c : array_like
        Temperature of each scan, degree Celsius (at least 2 distinct).
    breakdown_v : array_like
        Breakdown voltage of each scan, volt.
    slope_per_v : array_like
        Gain per volt of overvoltage of each scan (positive).
    overvoltage_v : float
        The held gain is the mean gain per volt times this overvoltage (volt).
    ref_temp_c : float
        Reference temperature for the capacitance coefficient, degree Celsius.
    breakdown_err_v : array_like, optional
        One-sigma errors of the breakdown voltages, volt (weights).

    Returns
    -------
    ConstantGainSlope
    """
    temp_c = np.asarray(temp_c, dtype=float)
    breakdown_v = np.asarray(breakdown_v, dtype=float)
    slope_per_v = np.asarray(slope_per_v, dtype=float)
    if np.any(slope_per_v <= 0):
        raise ModelError("every gain scan must have a positive gain per volt")
    if overvoltage_v <= 0:
        raise ModelError(f"overvoltage_v must be positive, got {overvoltage_v!r}")
    target = float(np.mean(slope_per_v) * overvoltage_v)
    bias = breakdown_v + target / slope_per_v
    fit = fit_polynomial(temp_c, bias, 1, breakdown_err_v, x0=ref_temp_c)
    cfit = fit_polynomial(temp_c, slope_per_v, 1, x0=ref_temp_c)
    rel = 1e6 * cfit.coef[1] / cfit.coef[0]
    rel_err = 1e6 * cfit.err[1] / cfit.coef[0] if np.isfinite(cfit.scale) else float("nan")
    return ConstantGainSlope(float(1e3 * fit.coef[1]), float(1e3 * fit.err[1]) if np.isfinite(fit.scale) else float("nan"),
                             target, bias, float(rel), float(rel_err))


def calibrated_values(base_values: dict, fit: TempcoFit, *, name=None, capacitance_f=None,
                      capacitance_tempco_ppm_per_k=None, definition=None) -> dict:
    """Profile values of a calibrated ``sipm`` profile: the base profile with the fitted breakdown.

    Parameters
    ----------
    base_values : dict
        ``profile.values`` of the base ``sipm`` profile (left untouched).
    fit : TempcoFit
    name : str, optional
        Name of the new profile (default: the base name with ``-calibrated``).
    capacitance_f : float, optional
        Fitted cell capacitance, farad (from gain scans).
    capacitance_tempco_ppm_per_k : float, optional
        Fitted capacitance temperature coefficient, ppm per kelvin.
    definition : str, optional
        Breakdown definition of the fitted values (``breakdown.definition``; kept from the base when None).

    Returns
    -------
    dict
    """
    values = copy.deepcopy(base_values)
    values["name"] = name or f"{base_values['name']}-calibrated"
    values["description"] = f"{base_values['name']} with breakdown calibrated from measurements"
    bd = values["breakdown"]
    bd.update(
        breakdown_v_at_ref=round(fit.breakdown_v_at_ref, 6), ref_temp_c=float(fit.ref_temp_c),
        tempco_mv_per_k=round(fit.tempco_mv_per_k, 4), curvature_mv_per_k2=round(fit.curvature_mv_per_k2, 6),
        breakdown_err_v=round(fit.breakdown_err_v, 6), tempco_err_mv_per_k=round(fit.tempco_err_mv_per_k, 4),
    )
    if definition is not None:
        bd["definition"] = definition
    if capacitance_f is not None and np.isfinite(capacitance_f):
        values["cell"]["capacitance_f"] = float(f"{capacitance_f:.6g}")
    if capacitance_tempco_ppm_per_k is not None and np.isfinite(capacitance_tempco_ppm_per_k):
        values["cell"]["capacitance_tempco_ppm_per_k"] = round(float(capacitance_tempco_ppm_per_k), 2)
    return values


def write_calibrated_profile(path, base_profile, fit: TempcoFit, *, data_file="", force=False, name=None,
                             capacitance_f=None, capacitance_tempco_ppm_per_k=None, definition=None):
    """Write a calibrated ``sipm`` profile, checked by loading it back, atomically.

    Parameters
    ----------
    path : str or path-like
        Destination YAML file; an existing file is an error unless ``force``.
    base_profile : SipmProfile
        The profile whose other sections are kept.
    fit : TempcoFit
    data_file : str
        The breakdown data the fit came from (named in the header).
    force : bool
        Replace an existing file.
    name, capacitance_f, capacitance_tempco_ppm_per_k, definition
        See :func:`calibrated_values`.

    Returns
    -------
    SipmProfile
        The written profile as loaded back.

    Raises
    ------
    InputError
        The destination exists (without ``force``) or the fitted values fall
        outside the profile schema (e.g. a negative tempco); nothing is written.
    """
    from compensator.calibration.profilefile import write_sipm_profile

    values = calibrated_values(base_profile.values, fit, name=name, capacitance_f=capacitance_f,
                               capacitance_tempco_ppm_per_k=capacitance_tempco_ppm_per_k, definition=definition)
    settings = {"breakdown data": PurePath(data_file).name if data_file else "(arrays)",
                "model": fit.model, "points": fit.n_points, "test": fit.test}
    return write_sipm_profile(path, base_profile, values, title="calibrated sipm profile", settings=settings,
                              force=force)


#: chi2/ndf is improbable (a warning) below this p-value.
IMPROBABLE_P = 0.001


@dataclass(frozen=True, kw_only=True)
class ChannelTempco:
    """The temperature coefficient of one device (channel).

    Attributes
    ----------
    channel : str
    tempco_mv_per_k, tempco_err_mv_per_k : float
        Millivolt per kelvin.
    breakdown_v_at_ref, breakdown_err_v : float
        Volt, at the reference temperature.
    chi2_ndf : float
        chi2 / ndf of the chosen model (NaN without degrees of freedom).
    chi2_p_value : float
        Probability of a chi2 at least as large (``scipy.stats.chi2.sf``; NaN when unweighted).
    points : int
    fit : TempcoFit
    """

    channel: str
    tempco_mv_per_k: float
    tempco_err_mv_per_k: float
    breakdown_v_at_ref: float
    breakdown_err_v: float
    chi2_ndf: float
    chi2_p_value: float
    points: int
    fit: TempcoFit = field(repr=False)


@dataclass(frozen=True, kw_only=True)
class TempcoCalibration:
    """Everything ``calibrate tempco`` reports: the fit, per-channel fits, the constant-gain slope, warnings.

    Attributes
    ----------
    fit : TempcoFit
        All points as one device (the pooled fit).
    chi2_p_value : float
        Probability of the pooled chi2 (``scipy.stats.chi2.sf(chi2, ndf)``; NaN when unweighted).
    channels : tuple of ChannelTempco
        One per channel when the data name channels (empty otherwise).
    tempco_spread_mv_per_k : float
        Sample standard deviation of the channel tempcos (NaN with fewer than 2 channels).
    constant_gain : ConstantGainSlope or None
    capacitance_f_at_ref : float or None
    definition : str or None
        The breakdown definition of the data.
    residuals_v : ndarray
        Breakdown minus the chosen model of the pooled fit, volt.
    findings : tuple of Finding
        Improbable chi2, mixed channels.
    """

    fit: TempcoFit
    chi2_p_value: float
    channels: tuple
    tempco_spread_mv_per_k: float
    constant_gain: ConstantGainSlope | None
    capacitance_f_at_ref: float | None
    definition: str | None
    residuals_v: np.ndarray = field(repr=False)
    findings: tuple = ()


def chi2_p_value(fit: TempcoFit) -> float:
    """Probability of a chi2 at least as large as the fit's (``scipy.stats.chi2.sf``), NaN when unweighted.

    Parameters
    ----------
    fit : TempcoFit

    Returns
    -------
    float
    """
    if not fit.chosen.weighted or fit.ndf <= 0:
        return float("nan")
    return float(stats.chi2.sf(fit.chi2, fit.ndf))


def calibrate_tempco(temp_c, breakdown_v, breakdown_err_v=None, *, channels=None, ref_temp_c=25.0, alpha=ALPHA,
                     slope_per_v=None, capacitance_f=None, overvoltage_v=3.0, definition=None,
                     common_err_v=None, definition_offset=None) -> TempcoCalibration:
    """Temperature coefficient of a breakdown scan, per channel where the data name channels.

    Parameters
    ----------
    temp_c, breakdown_v : array_like
        Degree Celsius, volt.
    breakdown_err_v : array_like, optional
        One-sigma errors, volt.
    channels : sequence of str, optional
        The channel (device) of each point.
    ref_temp_c : float
        Reference temperature, degree Celsius.
    alpha : float
        Significance level of the quadratic term.
    slope_per_v : array_like, optional
        Gain per volt at each point (gain scans), for the constant-gain slope.
    capacitance_f : array_like, optional
        Cell capacitance at each point, farad.
    overvoltage_v : float
        Overvoltage of the held gain, volt.
    definition : str, optional
        Breakdown definition of the data (carried into the result).
    common_err_v : array_like, optional
        Systematic error of each point common to all points (see :func:`fit_tempco`), volt.
    definition_offset : DefinitionOffset, optional
        Offset to another breakdown definition measured on the same device
        (:func:`~compensator.calibration.definitions.definition_offset`): the
        breakdowns at the reference are reported on its ``to_definition``, which
        becomes the result's definition, and its finding is passed on.

    Returns
    -------
    TempcoCalibration

    Raises
    ------
    ModelError
        Too few points or temperatures.
    """
    from compensator.findings import Finding, Severity

    temp_c = np.asarray(temp_c, dtype=float)
    breakdown_v = np.asarray(breakdown_v, dtype=float)
    common = None if common_err_v is None else np.broadcast_to(np.asarray(common_err_v, dtype=float), temp_c.shape)
    shift = {} if definition_offset is None else {"offset_v": definition_offset.offset_v,
                                                  "offset_err_v": definition_offset.offset_err_v}
    if definition_offset is not None:
        definition = definition_offset.to_definition
    fit = fit_tempco(temp_c, breakdown_v, breakdown_err_v, ref_temp_c=ref_temp_c, alpha=alpha, common_err_v=common,
                     **shift)
    findings = [] if definition_offset is None else list(definition_offset.findings)
    p_pool = chi2_p_value(fit)

    def improbable(label, f, p):
        if p < IMPROBABLE_P:
            findings.append(Finding(code="chi2_improbable", severity=Severity.WARNING, message=(
                f"{label}chi2/ndf = {f.chi2:.1f}/{f.ndf} is improbable (p = {p:.2g}): the points scatter more "
                "than their errors; the reported errors are scaled by sqrt(chi2/ndf)")))

    improbable("", fit, p_pool)
    per = []
    if channels is not None:
        channels = np.asarray([str(c) for c in channels])
        for name in sorted(set(channels.tolist())):
            sel = channels == name
            if np.unique(temp_c[sel]).size < 2:
                findings.append(Finding(code="channel_one_temperature", severity=Severity.WARNING,
                                        message=f"channel {name}: fewer than 2 temperatures; no tempco"))
                continue
            err = None if breakdown_err_v is None else np.asarray(breakdown_err_v, dtype=float)[sel]
            cf = fit_tempco(temp_c[sel], breakdown_v[sel], err, ref_temp_c=ref_temp_c, alpha=alpha,
                            common_err_v=None if common is None else common[sel], **shift)
            p = chi2_p_value(cf)
            improbable(f"channel {name}: ", cf, p)
            per.append(ChannelTempco(channel=name, tempco_mv_per_k=cf.tempco_mv_per_k,
                                     tempco_err_mv_per_k=cf.tempco_err_mv_per_k,
                                     breakdown_v_at_ref=cf.breakdown_v_at_ref, breakdown_err_v=cf.breakdown_err_v,
                                     chi2_ndf=cf.chi2 / cf.ndf if cf.ndf > 0 else float("nan"), chi2_p_value=p,
                                     points=cf.n_points, fit=cf))
    spread = float(np.std([c.tempco_mv_per_k for c in per], ddof=1)) if len(per) >= 2 else float("nan")
    cg = None
    if slope_per_v is not None and np.unique(temp_c).size >= 2:
        cg = constant_gain_slope(temp_c, breakdown_v, slope_per_v, overvoltage_v=overvoltage_v,
                                 ref_temp_c=ref_temp_c, breakdown_err_v=breakdown_err_v)
    cap = None
    if capacitance_f is not None:
        cap = float(fit_polynomial(temp_c, capacitance_f, 1 if np.unique(temp_c).size > 1 else 0, x0=ref_temp_c).coef[0])
    return TempcoCalibration(fit=fit, chi2_p_value=p_pool, channels=tuple(per), tempco_spread_mv_per_k=spread,
                             constant_gain=cg, capacitance_f_at_ref=cap, definition=definition,
                             residuals_v=breakdown_v - fit.chosen(temp_c), findings=tuple(findings))
