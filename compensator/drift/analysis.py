"""Drift of a logged run: gain drift per day, residual temperature coefficient, Allan deviation, gaps, faults.

Pure: a :class:`~compensator.logbook.records.RunSeries` (numpy arrays) in,
a frozen :class:`DriftReport` out.

The gain quantity
    The gain from the dark-count single-photon peak when the run logged one;
    otherwise the overvoltage as its proxy (gain is proportional to the
    overvoltage, common practice): bias minus the profile's breakdown voltage
    when the caller supplies it, else the law's target plus the bias
    read-back error. The report says which (``gain_source``).

The fit
    Samples under a fault (other than an informational refused request) are
    left out; the rest are averaged in time bins (default: one hour, or 1/48
    of the run when shorter) and fitted jointly,
    ``gain_pct = a + b (T - mean T) + c (t - mean t)``, with Newey-West
    standard errors (see :mod:`compensator.drift.regression`), so the
    confidence intervals allow for correlated residuals. Under daily cycles
    time and temperature can be collinear; the correlation of the binned
    temperature with time and the variance inflation factor 1/(1 - r^2) are
    reported, and a factor of 5 or more (common practice) is flagged.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from compensator.drift.allan import AllanCurve, allan_curve, grid_positions
from compensator.drift.regression import fit_hac
from compensator.errors import ModelError
from compensator.findings import Finding, Severity
from compensator.firmware.faults import FaultFlag, fault_names
from compensator.logbook.records import EventKind, RunSeries

__all__ = ["GainSource", "Gap", "FaultInterval", "FaultSummary", "DriftReport", "BinnedSeries", "analyse_run",
           "bin_series", "gain_series",
           "COLLINEAR_VARIANCE_INFLATION", "MIN_BINS"]

SECONDS_PER_DAY = 86400.0
#: Variance inflation factor from which time and temperature count as collinear (common practice: 5 to 10).
COLLINEAR_VARIANCE_INFLATION = 5.0
#: Fewest time bins a drift fit is made from.
MIN_BINS = 8
#: Temperature spread (1 sigma of the bins) below which no temperature coefficient is fitted, kelvin.
MIN_TEMP_SPREAD_K = 0.05
#: Faults that do not spoil a sample (informational).
_HARMLESS_FAULTS = int(FaultFlag.REQUEST_REFUSED)


class GainSource:
    """Names of the quantity the gain figures come from."""

    DARK_PEAK = "dark_peak_gain"
    OVERVOLTAGE_PROFILE = "overvoltage_from_profile_breakdown"
    OVERVOLTAGE_READBACK = "overvoltage_target_plus_bias_readback_error"
    OVERVOLTAGE_TARGET = "overvoltage_target_only"


@dataclass(frozen=True, kw_only=True)
class Gap:
    """A stretch of time without telemetry.

    Attributes
    ----------
    start_unix_s, end_unix_s : float
        Last sample before and first sample after, seconds since 1970 (UTC).
    duration_s : float
    cause : str
        ``link_lost`` (the logger saw the board go), ``logger_stopped`` (a new
        session began after it) or ``samples_missed``.
    """

    start_unix_s: float
    end_unix_s: float
    duration_s: float
    cause: str


@dataclass(frozen=True, kw_only=True)
class FaultInterval:
    """One stretch of samples with a live fault bit set.

    Attributes
    ----------
    fault : str
        The fault's name (lower case, see :func:`compensator.firmware.faults.fault_names`).
    start_unix_s : float
        First sample with the bit set.
    end_unix_s : float
        First sample with it clear again (the last sample when still active).
    duration_s : float
    still_active : bool
        The bit was set in the last sample of the run.
    """

    fault: str
    start_unix_s: float
    end_unix_s: float
    duration_s: float
    still_active: bool


@dataclass(frozen=True, kw_only=True)
class FaultSummary:
    """Per-fault totals over the run.

    Attributes
    ----------
    fault : str
    intervals : int
        Times the bit went up.
    total_s : float
        Time with the bit set, seconds.
    samples : int
        Samples with the bit set.
    """

    fault: str
    intervals: int
    total_s: float
    samples: int


@dataclass(frozen=True, kw_only=True)
class DriftReport:
    """Everything the drift analysis of one run found.

    Attributes
    ----------
    unit_id : str
    logbook : str
        Where the run came from.
    samples : int
        Telemetry rows in the run.
    samples_used : int
        Rows with a gain value and no spoiling fault (the fit's input).
    sessions : int
    start_unix_s, end_unix_s : float
    duration_s : float
        Last minus first sample time, seconds.
    sample_interval_s : float
        Median interval between rows, seconds.
    gain_source : str
        One of :class:`GainSource`.
    gain_reference : float
        Median dark-peak gain, electrons per photoelectron, that the gain
        percentages are relative to (nan when the overvoltage stands in).
    overvoltage_reference_v : float
        Median overvoltage the percentages are relative to when it stands in
        for the gain (nan with a dark-peak gain).
    confidence_fraction : float
        Level of every interval (two-sided), e.g. 0.95.
    drift_pct_per_day, drift_err_pct_per_day : float
        Gain drift from the joint fit, and its standard error (1 sigma).
    drift_ci_pct_per_day : tuple of float
        Its confidence interval (low, high).
    drift_time_only_pct_per_day : float
        Slope of a fit on time alone (for comparison).
    drift_time_only_ci_pct_per_day : tuple of float
    residual_tempco_pct_per_k, residual_tempco_err_pct_per_k : float
        Temperature coefficient of the gain left after compensation, and its
        standard error (nan when the temperature hardly varied).
    residual_tempco_ci_pct_per_k : tuple of float
    time_temp_correlation : float
        Correlation of the binned temperature with time.
    variance_inflation : float
        1 / (1 - r^2): how much the collinearity widens the intervals' variance.
    collinear : bool
        ``variance_inflation >= COLLINEAR_VARIANCE_INFLATION``.
    bin_s : float
        Width of the time bins, seconds.
    bins : int
        Bins in the fit.
    hac_lag_bins : int
        Newey-West truncation lag, bins.
    residual_rms_pct : float
        RMS of the fit's residuals (bin means), percent.
    temp_min_c, temp_max_c : float
        Temperature range of the used samples.
    gain_peak_to_peak_pct : float
        Peak-to-peak of the binned gain, percent.
    allan : tuple of AllanCurve
        Gain (``gain_pct``), bias (``bias_v``) and temperature (``temp_k``).
    gaps : tuple of Gap
    gap_total_s : float
    fault_intervals : tuple of FaultInterval
    fault_summary : tuple of FaultSummary
    findings : tuple of Finding
    """

    unit_id: str
    logbook: str
    samples: int
    samples_used: int
    sessions: int
    start_unix_s: float
    end_unix_s: float
    duration_s: float
    sample_interval_s: float
    gain_source: str
    gain_reference: float
    overvoltage_reference_v: float
    confidence_fraction: float
    drift_pct_per_day: float
    drift_err_pct_per_day: float
    drift_ci_pct_per_day: tuple
    drift_time_only_pct_per_day: float
    drift_time_only_ci_pct_per_day: tuple
    residual_tempco_pct_per_k: float
    residual_tempco_err_pct_per_k: float
    residual_tempco_ci_pct_per_k: tuple
    time_temp_correlation: float
    variance_inflation: float
    collinear: bool
    bin_s: float
    bins: int
    hac_lag_bins: int
    residual_rms_pct: float
    temp_min_c: float
    temp_max_c: float
    gain_peak_to_peak_pct: float
    allan: tuple
    gaps: tuple
    gap_total_s: float
    fault_intervals: tuple
    fault_summary: tuple
    findings: tuple


def gain_series(run: RunSeries, *, breakdown_v=None) -> tuple[np.ndarray, str, str]:
    """The gain quantity of a run: values, their source, and their unit.

    Parameters
    ----------
    run : RunSeries
    breakdown_v : array_like, optional
        Breakdown voltage at each sample's temperature, volt (from the SiPM
        profile); makes the overvoltage proxy bias minus breakdown.

    Returns
    -------
    values : ndarray
        ``nan`` where the sample has none.
    source : str
        One of :class:`GainSource`.
    unit : str
        ``"electrons per photoelectron"`` or ``"V"``.
    """
    if np.isfinite(run.dark_peak_gain).any():
        return run.dark_peak_gain, GainSource.DARK_PEAK, "electrons per photoelectron"
    measured = np.isfinite(run.bias_measured_v)
    bias_v = np.where(measured, run.bias_measured_v, run.bias_set_v)
    if breakdown_v is not None:
        return bias_v - np.broadcast_to(np.asarray(breakdown_v, dtype=float), bias_v.shape), \
            GainSource.OVERVOLTAGE_PROFILE, "V"
    if measured.any():
        return run.overvoltage_target_v + (bias_v - run.bias_set_v), GainSource.OVERVOLTAGE_READBACK, "V"
    return run.overvoltage_target_v.astype(float), GainSource.OVERVOLTAGE_TARGET, "V"


def _gaps(run: RunSeries, interval_s: float) -> list[Gap]:
    t = run.time_unix_s
    if t.size < 2:
        return []
    threshold = max(3.0 * interval_s, interval_s + 1.0)
    steps = np.diff(t)
    at = np.flatnonzero(steps > threshold)
    lost = np.asarray([e.time_unix_s for e in run.events if e.kind is EventKind.LINK_LOST])
    starts = np.asarray([s.started_unix_s for s in run.sessions])
    new_session = np.flatnonzero(np.diff(run.session_index) != 0) if run.session_index.size == t.size else []
    new_session = set(int(i) for i in new_session)
    gaps = []
    for i in at:
        a, b = float(t[i]), float(t[i + 1])
        if i in new_session or np.any((starts > a) & (starts <= b)):
            cause = "logger_stopped"
        elif np.any((lost >= a) & (lost <= b)):
            cause = "link_lost"
        else:
            cause = "samples_missed"
        gaps.append(Gap(start_unix_s=a, end_unix_s=b, duration_s=b - a, cause=cause))
    return gaps


def _fault_timeline(run: RunSeries) -> tuple[list[FaultInterval], list[FaultSummary]]:
    faults = run.faults_live
    t = run.time_unix_s
    seen = int(np.bitwise_or.reduce(faults)) if faults.size else 0
    intervals, summary = [], []
    for bit in range(63):
        if not seen >> bit & 1:
            continue
        name = fault_names(1 << bit)[0]
        on = (faults >> bit & 1).astype(np.int8)
        edges = np.diff(np.concatenate(([0], on, [0])))
        rises, falls = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
        total = 0.0
        for r, f in zip(rises, falls):
            active = f >= t.size
            end = float(t[-1] if active else t[f])
            intervals.append(FaultInterval(fault=name, start_unix_s=float(t[r]), end_unix_s=end,
                                           duration_s=end - float(t[r]), still_active=bool(active)))
            total += end - float(t[r])
        summary.append(FaultSummary(fault=name, intervals=int(rises.size), total_s=total,
                                    samples=int(on.sum())))
    intervals.sort(key=lambda i: (i.start_unix_s, i.fault))
    return intervals, summary


class BinnedSeries(NamedTuple):
    """Bin means of the samples a drift fit uses.

    Attributes
    ----------
    time_unix_s : ndarray
        Mean time of the samples in each bin, seconds since 1970 (UTC).
    gain_pct : ndarray
        Mean gain relative to the run's median, percent.
    temp_c : ndarray
        Mean temperature, degree C.
    samples : ndarray of int
        Samples per bin.
    """

    time_unix_s: np.ndarray
    gain_pct: np.ndarray
    temp_c: np.ndarray
    samples: np.ndarray


def _used_samples(run: RunSeries, breakdown_v=None):
    gain, source, unit = gain_series(run, breakdown_v=breakdown_v)
    spoiled = (run.faults_live & ~_HARMLESS_FAULTS) != 0
    with np.errstate(invalid="ignore"):
        used = np.isfinite(gain) & np.isfinite(run.temp_c) & ~spoiled & (gain > 0)
    reference = float(np.median(gain[used])) if used.any() else float("nan")
    return 100.0 * (gain / reference - 1.0), used, spoiled, source, reference


def _default_bin_s(duration_s: float, interval_s: float) -> float:
    return min(3600.0, max(duration_s / 48.0, 10.0 * (interval_s if np.isfinite(interval_s) else 1.0)))


def bin_series(run: RunSeries, *, bin_s: float, breakdown_v=None) -> BinnedSeries:
    """Bin means of gain and temperature over the samples a drift fit uses.

    Bins holding fewer than a tenth of the median bin's samples are dropped
    (their means are too noisy to weigh equally).

    Parameters
    ----------
    run : RunSeries
    bin_s : float
        Bin width, seconds, counted from the run's first sample.
    breakdown_v : array_like, optional
        As for :func:`analyse_run`.

    Returns
    -------
    BinnedSeries
    """
    return _bin_series(run, bin_s, _used_samples(run, breakdown_v))


def _bin_series(run: RunSeries, bin_s: float, samples) -> BinnedSeries:
    gain_pct, used, _spoiled, _source, _reference = samples
    t = run.time_unix_s[used]
    if t.size == 0:
        empty = np.zeros(0)
        return BinnedSeries(empty, empty, empty, np.zeros(0, dtype=np.int64))
    index = np.floor((t - run.time_unix_s[0]) / bin_s).astype(np.int64)
    counts = np.bincount(index)
    full = counts > 0
    full &= counts >= 0.1 * np.median(counts[full])
    means = [np.bincount(index, weights=c)[full] / counts[full] for c in (t, gain_pct[used], run.temp_c[used])]
    return BinnedSeries(means[0], means[1], means[2], counts[full])


def _nan_fit():
    return float("nan"), float("nan"), (float("nan"), float("nan"))


def analyse_run(run: RunSeries, *, bin_s: float | None = None, confidence: float = 0.95,
                breakdown_v=None) -> DriftReport:
    """Drift, residual temperature coefficient, Allan deviation, gaps and faults of one run.

    Parameters
    ----------
    run : RunSeries
        The logged columns (see :func:`compensator.logbook.read_run`).
    bin_s : float, optional
        Width of the time bins of the fit, seconds. Default: 3600, or 1/48
        of the run when that is shorter (at least ten sample intervals).
    confidence : float
        Two-sided level of the intervals, between 0.5 and 0.999.
    breakdown_v : array_like, optional
        Breakdown voltage at each sample (volt), for the overvoltage proxy.

    Returns
    -------
    DriftReport

    Raises
    ------
    ModelError
        An empty run, or options out of range.
    """
    if run.samples == 0:
        raise ModelError("the run holds no telemetry rows", key="telemetry")
    if not 0.5 <= confidence <= 0.999:
        raise ModelError(f"confidence must be between 0.5 and 0.999, got {confidence}", key="confidence")
    if bin_s is not None and not bin_s > 0:
        raise ModelError(f"bin width must be positive, got {bin_s}", key="bin_s")
    findings: list[Finding] = []
    t = run.time_unix_s
    steps = np.diff(t)
    interval_s = float(np.median(steps[steps > 0])) if np.any(steps > 0) else float("nan")
    duration_s = float(t[-1] - t[0])
    samples = _used_samples(run, breakdown_v)
    gain_pct, used, spoiled, source, reference = samples
    if source == GainSource.OVERVOLTAGE_TARGET:
        findings.append(Finding(code="gain_proxy_blind", severity=Severity.WARNING, message=(
            "no dark-peak gain and no bias read-back logged: the overvoltage target alone cannot show drift; "
            "give the SiPM profile (--sipm) to use bias minus breakdown")))
    elif source != GainSource.DARK_PEAK:
        findings.append(Finding(code="gain_proxy", severity=Severity.INFO, message=(
            f"no dark-peak gain logged: the gain figures use the overvoltage as its proxy ({source})")))
    if spoiled.any():
        findings.append(Finding(code="fault_samples_excluded", severity=Severity.INFO, message=(
            f"{int(spoiled.sum())} samples under a fault left out of the fits")))

    drift = tempco = time_only = _nan_fit()
    correlation = inflation = float("nan")
    bins = lag = 0
    rms = p2p = float("nan")
    width = _default_bin_s(duration_s, interval_s) if bin_s is None else float(bin_s)
    most_bins = max(2 * run.samples, 100_000)  # beyond it the bins are mostly empty, and memory is unbounded
    if duration_s / width > most_bins:
        raise ModelError(f"a bin width of {width:g} s makes {duration_s / width:.3g} bins, more than {most_bins} "
                         f"(twice the {run.samples} samples, at least 100000); use at least the sample interval "
                         f"({interval_s:g} s)", key="bin_s")
    temp_min = float(np.min(run.temp_c[used])) if used.any() else float("nan")
    temp_max = float(np.max(run.temp_c[used])) if used.any() else float("nan")
    binned = _bin_series(run, width, samples)
    bins = int(binned.samples.size)
    if bins >= MIN_BINS:
        g_bin, temp_bin = binned.gain_pct, binned.temp_c
        day_bin = (binned.time_unix_s - t[0]) / SECONDS_PER_DAY
        day_c = day_bin - day_bin.mean()
        temp_k = temp_bin - temp_bin.mean()
        p2p = float(np.ptp(g_bin))
        ones = np.ones_like(day_c)
        fit_t = fit_hac(np.column_stack([ones, day_c]), g_bin, confidence=confidence)
        time_only = (float(fit_t.coef[1]), float(fit_t.se[1]),
                     (float(fit_t.coef[1] - fit_t.half_width[1]), float(fit_t.coef[1] + fit_t.half_width[1])))
        if np.std(temp_k) >= MIN_TEMP_SPREAD_K:
            correlation = float(np.corrcoef(day_c, temp_k)[0, 1])
            inflation = float(1.0 / max(1.0 - correlation ** 2, 1e-12))
            fit = fit_hac(np.column_stack([ones, temp_k, day_c]), g_bin, confidence=confidence)
            c, b = 2, 1
            tempco = (float(fit.coef[b]), float(fit.se[b]),
                      (float(fit.coef[b] - fit.half_width[b]), float(fit.coef[b] + fit.half_width[b])))
        else:
            findings.append(Finding(code="temperature_constant", severity=Severity.INFO, message=(
                f"the temperature varied by only {np.std(temp_k):.3f} K (1 sigma of the bins): "
                "no residual temperature coefficient fitted")))
            fit, c = fit_t, 1
        drift = (float(fit.coef[c]), float(fit.se[c]),
                 (float(fit.coef[c] - fit.half_width[c]), float(fit.coef[c] + fit.half_width[c])))
        lag, rms = fit.lag, fit.residual_rms
        if np.isfinite(inflation) and inflation >= COLLINEAR_VARIANCE_INFLATION:
            findings.append(Finding(code="time_temperature_collinear", severity=Severity.WARNING, message=(
                f"time and temperature are collinear (r = {correlation:.2f}, variance inflation "
                f"{inflation:.1f}): drift and residual temperature coefficient trade off, and their "
                "intervals are wide accordingly; a run with more temperature cycles separates them")))
    else:
        findings.append(Finding(code="run_too_short", severity=Severity.WARNING, message=(
            f"only {bins} time bins of {width:g} s with usable samples: at least {MIN_BINS} are needed for a "
            "drift fit")))

    allan = []
    measured = np.isfinite(run.bias_measured_v)
    bias_v = np.where(measured, run.bias_measured_v, run.bias_set_v)
    try:
        shared = grid_positions(t)       # bias and temperature come with every row: one grid for both
    except ModelError:
        shared = None
    for quantity, values in (("gain_pct", np.where(used, gain_pct, np.nan)),
                             ("bias_v", np.where(~spoiled, bias_v, np.nan)),
                             ("temp_k", np.where(~spoiled, run.temp_c, np.nan))):
        dense = np.count_nonzero(np.isfinite(values)) >= 0.5 * values.size
        try:
            allan.append(allan_curve(quantity, t, values, positions=shared if dense else None))
        except ModelError:
            continue
    gaps = _gaps(run, interval_s if np.isfinite(interval_s) else 1.0)
    if gaps:
        findings.append(Finding(code="gaps", severity=Severity.INFO, message=(
            f"{len(gaps)} gaps without telemetry, {sum(g.duration_s for g in gaps):.0f} s in total "
            "(left out of the Allan sums)")))
    intervals, summary = _fault_timeline(run)
    return DriftReport(
        unit_id=run.unit_id, logbook=run.source, samples=run.samples, samples_used=int(np.count_nonzero(used)),
        sessions=len(run.sessions), start_unix_s=float(t[0]), end_unix_s=float(t[-1]), duration_s=duration_s,
        sample_interval_s=interval_s, gain_source=source,
        gain_reference=reference if source == GainSource.DARK_PEAK else float("nan"),
        overvoltage_reference_v=float("nan") if source == GainSource.DARK_PEAK else reference,
        confidence_fraction=confidence, drift_pct_per_day=drift[0], drift_err_pct_per_day=drift[1], drift_ci_pct_per_day=drift[2],
        drift_time_only_pct_per_day=time_only[0], drift_time_only_ci_pct_per_day=time_only[2],
        residual_tempco_pct_per_k=tempco[0], residual_tempco_err_pct_per_k=tempco[1],
        residual_tempco_ci_pct_per_k=tempco[2], time_temp_correlation=correlation,
        variance_inflation=inflation,
        collinear=bool(np.isfinite(inflation) and inflation >= COLLINEAR_VARIANCE_INFLATION),
        bin_s=float(width), bins=bins, hac_lag_bins=lag, residual_rms_pct=rms, temp_min_c=temp_min,
        temp_max_c=temp_max, gain_peak_to_peak_pct=p2p, allan=tuple(allan), gaps=tuple(gaps),
        gap_total_s=float(sum(g.duration_s for g in gaps)), fault_intervals=tuple(intervals),
        fault_summary=tuple(summary), findings=tuple(findings))
