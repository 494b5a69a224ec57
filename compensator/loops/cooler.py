"""Checks specific to the cooler loop: gain reversal, condensation, hot side, and the field's ambient range.

The plant gain and time constants of a thermoelectric cooler move with the
operating current, and the loop changes from cooling to heating as the
ambient falls below the setpoint, so gains tuned at one ambient are checked
at every ambient of the range (:func:`check_cooler_ambient_range`). At each
ambient the report gives the dew point (Magnus formula, Alduchov and
Eskridge 1996) and the hot-side temperature beside the loop's robustness.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.findings import Finding, Severity
from compensator.physics.thermal import (
    CoolerOperatingPoint,
    cooler_current_limits_a,
    cooler_operating_point,
    cooler_steady_state,
    dew_point_c,
)

__all__ = [
    "AMBIENT_GRID_POINTS", "AmbientCheck", "AmbientRangeReport", "ambient_grid_c", "cooler_gain_findings",
    "cooler_safety_findings", "check_cooler_ambient_range",
]

#: The range is checked at this many evenly spaced ambients (plus the nominal one).
AMBIENT_GRID_POINTS = 5


def cooler_gain_findings(point) -> list[Finding]:
    """Findings about the loop gain at a cooler operating point: reversal beyond the optimum, little headroom.

    Parameters
    ----------
    point : CoolerOperatingPoint or None
        Anything else (a bias-supply point, None) gives no findings.

    Returns
    -------
    list of Finding
    """
    op = point
    if not isinstance(op, CoolerOperatingPoint):
        return []
    if op.beyond_optimum or op.gain_k_per_a > 0:
        return [Finding(code="cooler_gain_reversed", severity=Severity.DANGER, message=(
            f"the cooler loop gain REVERSES SIGN: {op.current_a:.3f} A is above the current of maximum cooling "
            f"{op.optimum_current_a:.3f} A, where more current warms the plate; a loop tuned here runs away once it "
            "crosses the optimum; clamp the current below the optimum"))]
    if op.current_a > 0.85 * op.optimum_current_a and op.current_a > 0:
        return [Finding(code="cooler_little_headroom", severity=Severity.WARNING, message=(
            f"the operating current {op.current_a:.3f} A is within 15 % of the current of maximum cooling "
            f"{op.optimum_current_a:.3f} A: little headroom and a loop gain that collapses near the optimum"))]
    return []


def cooler_safety_findings(params, point: CoolerOperatingPoint, *,
                           relative_humidity_pct: float | None = None) -> list[Finding]:
    """Safety findings at a cooler operating point: condensation and hot-side temperature.

    Parameters
    ----------
    params : CoolerParams
    point : CoolerOperatingPoint
    relative_humidity_pct : float, optional
        Relative humidity of the ambient air, percent (default: the profile's).

    Returns
    -------
    list of Finding
        Condensation risk (cold plate below the dew point plus the margin;
        Magnus formula, Alduchov and Eskridge 1996), hot side above its limit
        at the operating point or at the upper current limit.
    """
    rh = params.ambient_relative_humidity_pct if relative_humidity_pct is None else relative_humidity_pct
    out = []
    dew = float(dew_point_c(point.ambient_temp_c, rh))
    if point.cold_temp_c < dew + params.dew_margin_k:
        out.append(Finding(code="condensation_risk", severity=Severity.DANGER, message=(
            f"CONDENSATION RISK: at ambient {point.ambient_temp_c:g} C and {rh:g} % RH the cold plate at "
            f"{point.cold_temp_c:.1f} C is below the dew point {dew:.1f} C plus the {params.dew_margin_k:g} K margin")))
    if point.hot_temp_c > params.max_hot_temp_c:
        out.append(Finding(code="hot_side_over_limit", severity=Severity.DANGER, message=(
            f"the hot side at the operating point ({point.hot_temp_c:.1f} C) exceeds limits.max_hot_temp_c "
            f"{params.max_hot_temp_c:g} C")))
    out_max = cooler_current_limits_a(params, point.ambient_temp_c)[1]
    hot_at_max = float(cooler_steady_state(params, out_max, point.ambient_temp_c)[1])
    if hot_at_max > params.max_hot_temp_c:
        out.append(Finding(code="hot_side_over_limit_at_max_current", severity=Severity.WARNING, message=(
            f"at the output limit {out_max:.3g} A the hot side settles at {hot_at_max:.1f} C, above "
            f"limits.max_hot_temp_c {params.max_hot_temp_c:g} C: lower the limit or improve the heat sink")))
    return out


def ambient_grid_c(low_c: float, high_c: float, nominal_c: float) -> list[float]:
    """Ambients at which a range is checked: :data:`AMBIENT_GRID_POINTS` evenly spaced, plus the nominal one.

    Parameters
    ----------
    low_c, high_c : float
        The range, degree Celsius (either order).
    nominal_c : float
        The ambient the loop was linearised at, degree Celsius.

    Returns
    -------
    list of float
        Sorted, without repeats.
    """
    lo, hi = sorted((float(low_c), float(high_c)))
    return sorted({*(float(v) for v in np.linspace(lo, hi, AMBIENT_GRID_POINTS)), float(nominal_c)})


@dataclass(frozen=True, kw_only=True)
class AmbientCheck:
    """The loop with the cooler linearised at one ambient temperature.

    Attributes
    ----------
    ambient_temp_c : float
        Degree Celsius.
    reachable : bool
        Whether the setpoint can be held at this ambient (else the loop fields are nan).
    current_a : float
        Operating current (negative: heating), ampere.
    gain_k_per_a : float
        Steady-state plant gain there, kelvin per ampere.
    hot_temp_c : float
        Steady hot-side temperature, degree Celsius.
    dew_point_c : float
        Dew point of the ambient air, degree Celsius.
    condensation : bool
        The cold plate sits below the dew point plus the margin.
    stable : bool
    ms, gain_margin, phase_margin_deg : float
        Maximum sensitivity, gain margin (factor), phase margin (degree).
    """

    ambient_temp_c: float
    reachable: bool
    current_a: float
    gain_k_per_a: float
    hot_temp_c: float
    dew_point_c: float
    condensation: bool
    stable: bool
    ms: float
    gain_margin: float
    phase_margin_deg: float


@dataclass(frozen=True, kw_only=True)
class AmbientRangeReport:
    """Fixed gains checked over a range of ambients; iterates over its checks like a tuple.

    Attributes
    ----------
    checks : tuple of AmbientCheck
        One per ambient, in increasing temperature.
    relative_humidity_pct : float
        Relative humidity used for the dew points, percent.
    ms_limit : float or None
        The Ms bound the gains were tuned for, if any.
    worst_ms : float
        Largest Ms over the reachable ambients (nan when none).
    findings : tuple of Finding
        Unreachable setpoints, instability, Ms above the bound or above 2,
        condensation and hot side per ambient.
    ok : bool
        The setpoint is held and the loop stable at every ambient, within
        the Ms bound when one was given.
    """

    checks: tuple
    relative_humidity_pct: float
    ms_limit: float | None
    worst_ms: float
    findings: tuple
    ok: bool

    def __iter__(self):
        return iter(self.checks)

    def __len__(self):
        return len(self.checks)

    def __getitem__(self, index):
        return self.checks[index]


#: Ms above this is fragile whatever was asked (common practice: 2.0 is aggressive).
_FRAGILE_MS = 2.0


def check_cooler_ambient_range(params, gains, sample_time_s: float, ambient_temps_c, *,
                               setpoint_temp_c: float | None = None, relative_humidity_pct: float | None = None,
                               ms_limit: float | None = None,
                               computation_delay_samples: int = 1) -> AmbientRangeReport:
    """Check fixed gains with the cooler linearised at each ambient temperature.

    Parameters
    ----------
    params : CoolerParams
    gains : PidGains
    sample_time_s : float
        Firmware period, second.
    ambient_temps_c : array_like
        Ambient temperatures to check, degree Celsius.
    setpoint_temp_c : float, optional
        Cold-plate setpoint (default: the profile's).
    relative_humidity_pct : float, optional
        Relative humidity of the ambient air, percent (default: the profile's).
    ms_limit : float, optional
        Ms bound to hold at every ambient.
    computation_delay_samples : int

    Returns
    -------
    AmbientRangeReport
    """
    from compensator.loops.plants import linearise_cooler
    from compensator.loops.verify import loop_figures

    rh = params.ambient_relative_humidity_pct if relative_humidity_pct is None else float(relative_humidity_pct)
    sp = params.setpoint_temp_c if setpoint_temp_c is None else float(setpoint_temp_c)
    checks, findings = [], []
    nan = float("nan")
    for ta in sorted(float(v) for v in np.atleast_1d(np.asarray(ambient_temps_c, dtype=float))):
        if not np.isfinite(ta):
            raise ModelError(f"must be finite, got {ta!r}", key="ambient_temps_c")
        dew = float(dew_point_c(ta, rh))
        try:
            op = cooler_operating_point(params, sp, None, ta)
        except ModelError as exc:
            checks.append(AmbientCheck(ambient_temp_c=ta, reachable=False, current_a=nan, gain_k_per_a=nan,
                                       hot_temp_c=nan, dew_point_c=dew, condensation=sp < dew + params.dew_margin_k,
                                       stable=False, ms=nan, gain_margin=nan, phase_margin_deg=nan))
            findings.append(Finding(code="setpoint_unreachable", severity=Severity.WARNING,
                                    message=f"at ambient {ta:g} C the setpoint cannot be held: {exc.reason}"))
            continue
        fig = loop_figures(linearise_cooler(params, op), gains, sample_time_s,
                           computation_delay_samples=computation_delay_samples)
        condensation = op.cold_temp_c < dew + params.dew_margin_k
        checks.append(AmbientCheck(ambient_temp_c=ta, reachable=True, current_a=op.current_a,
                                   gain_k_per_a=op.gain_k_per_a, hot_temp_c=op.hot_temp_c, dew_point_c=dew,
                                   condensation=bool(condensation), stable=fig.stable, ms=fig.ms,
                                   gain_margin=fig.gain_margin, phase_margin_deg=fig.phase_margin_deg))
        if not fig.stable:
            findings.append(Finding(code="unstable_at_ambient", severity=Severity.DANGER,
                                    message=f"at ambient {ta:g} C the loop is UNSTABLE with these gains"))
        elif ms_limit is not None and fig.ms > ms_limit * 1.005:
            findings.append(Finding(code="ms_above_bound_at_ambient", severity=Severity.WARNING,
                                    message=f"at ambient {ta:g} C Ms is {fig.ms:.3f}, above the bound {ms_limit:g}"))
        elif fig.ms > _FRAGILE_MS:
            findings.append(Finding(code="fragile_at_ambient", severity=Severity.WARNING,
                                    message=f"at ambient {ta:g} C Ms is {fig.ms:.2f}: fragile"))
        findings.extend(cooler_safety_findings(params, op, relative_humidity_pct=rh))
        findings.extend(cooler_gain_findings(op))
    reach = [c for c in checks if c.reachable]
    worst = max((c.ms for c in reach), default=nan)
    ok = bool(reach) and len(reach) == len(checks) and all(c.stable for c in reach) and (
        ms_limit is None or worst <= ms_limit * 1.005)
    return AmbientRangeReport(checks=tuple(checks), relative_humidity_pct=rh, ms_limit=ms_limit, worst_ms=worst,
                              findings=tuple(_unique(findings)), ok=ok)


def _unique(findings):
    """Drop repeated findings (the same hot-side limit at several ambients), keeping the first."""
    seen, out = set(), []
    for f in findings:
        if f.message not in seen:
            seen.add(f.message)
            out.append(f)
    return out
