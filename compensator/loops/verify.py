"""Loop verification with python-control, on the loop as the firmware runs it.

The plant is discretised at the firmware rate with a zero-order hold, its dead
time exact, plus one sample of computation delay
(:func:`compensator.loops.plants.discretise`). The controller is the discrete
PID of the firmware reference, ``u = Cr r - C y``
(:mod:`compensator.loops.controller`, which gives ``C`` and ``Cr``).

Margins come from python-control ``stability_margins`` on ``L = C P``; Ms
is ``1 / min |1 + L|`` on a dense frequency grid up to the Nyquist
frequency (:mod:`compensator.loops.frequency`); the closed-loop step
(setpoint to output, and to the actuator) from ``forced_response`` and
``step_info``.

The controller, the frequency grids, Ms and the ultimate point are
re-exported here under their old import paths.
"""

from __future__ import annotations

import math
import warnings as warnings_module
from dataclasses import dataclass, field

import control
import numpy as np

from compensator._lazy import lazy_exports
from compensator.errors import ModelError
from compensator.findings import Finding, Severity
from compensator.loops._blas import one_blas_thread
from compensator.loops.controller import (
    PidGains,
    _controller_realisation,
    controller_frequency_response,
    controller_tf,
)
from compensator.loops.frequency import frequency_grid, loop_frequency_grid, max_sensitivity, ultimate_point
from compensator.loops.plants import Plant
from compensator.loops.sampled import analysis_plant, discrete_frequency_response, discretise, state_space_arrays

__all__ = [
    "POOR_GAIN_MARGIN", "POOR_PHASE_MARGIN_DEG", "POOR_MS", "PidGains", "Margins", "StepData", "LoopReport",
    "LoopFigures", "controller_tf", "controller_frequency_response", "frequency_grid", "loop_frequency_grid",
    "max_sensitivity", "ultimate_point", "loop_figures", "verify_loop", "closed_loop_stable",
    # older names, kept for their import paths (now in compensator.loops.cooler)
    "AmbientCheck", "check_cooler_ambient_range", "cooler_operating_warnings", "cooler_warnings",
]

# Common practice: Ms 1.4 is robust, 2.0 aggressive; GM >= 2 and PM >= 30 degrees are the usual minimums.
POOR_GAIN_MARGIN = 2.0
POOR_PHASE_MARGIN_DEG = 30.0
POOR_MS = 2.0


@dataclass(frozen=True)
class Margins:
    """Robustness of the discretised loop.

    Attributes
    ----------
    gain_margin : float
        Factor by which the loop gain may grow (inf when unlimited).
    phase_margin_deg : float
        Degree.
    ms : float
        Maximum sensitivity ``1 / min |1 + L|``.
    crossover_rad_s : float
        Gain crossover, rad/s.
    phase_crossover_rad_s : float
        Frequency of the gain margin, rad/s (nan when none).
    ms_frequency_rad_s : float
        Where ``|S|`` peaks, rad/s.
    delay_margin_s : float
        Extra dead time the loop tolerates, second (phase margin / crossover).
    """

    gain_margin: float
    phase_margin_deg: float
    ms: float
    crossover_rad_s: float
    phase_crossover_rad_s: float
    ms_frequency_rad_s: float
    delay_margin_s: float


@dataclass(frozen=True)
class StepData:
    """Closed-loop response to a unit setpoint step.

    Attributes
    ----------
    rise_time_s, settling_time_s, peak_time_s : float
        10-90 % rise, 2 % settling, time of the peak, second.
    overshoot_pct : float
        Percent of the final value.
    peak_actuator_per_setpoint_unit : float
        Largest actuator excursion per unit setpoint step: actuator units
        (ampere, DAC code ...) per output unit (kelvin, volt ...).
    load_iae : float
        Integrated absolute error after a unit step load at the plant input
        (output units times second).
    """

    rise_time_s: float
    settling_time_s: float
    overshoot_pct: float
    peak_time_s: float
    peak_actuator_per_setpoint_unit: float
    load_iae: float

    @property
    def peak_actuator(self) -> float:
        """Older name of :attr:`peak_actuator_per_setpoint_unit`."""
        return self.peak_actuator_per_setpoint_unit


@dataclass(frozen=True)
class LoopReport:
    """Everything :func:`verify_loop` found.

    Attributes
    ----------
    margins : Margins
    step : StepData
    stable : bool
        All closed-loop poles inside the unit circle.
    spectral_radius : float
        Largest closed-loop pole magnitude.
    sample_time_s : float
        Firmware period, second.
    findings : tuple of Finding
        Instability, poor margins, Ms above the bound, unsettled step,
        cooler gain reversal, an approximated delay.
    analysis_period_s : float
        Period of the time-domain analysis (poles, step): the firmware
        period, or a multiple of it when the dead time is long (see
        :func:`compensator.loops.sampled.analysis_plant`).
    time_s, output, actuator : ndarray
        The setpoint step response (for plots).
    """

    margins: Margins
    step: StepData
    stable: bool
    spectral_radius: float
    sample_time_s: float
    findings: tuple = field(default_factory=tuple)
    analysis_period_s: float = float("nan")
    time_s: np.ndarray = field(default=None, repr=False, compare=False)
    output: np.ndarray = field(default=None, repr=False, compare=False)
    actuator: np.ndarray = field(default=None, repr=False, compare=False)

    @property
    def warnings(self) -> tuple:
        """The findings' messages (older interface), in order."""
        return tuple(f.message for f in self.findings)


# ---------------------------------------------------------------- verification
def _settle_horizon(poles, T):
    mags = np.abs(poles)
    mags = mags[(mags > 1e-12) & (mags < 1.0)]
    if mags.size == 0:
        return 200
    slow = -T / math.log(float(np.max(mags)))
    return int(np.clip(10.0 * slow / T, 200, 30000))


def _closed_loop(plant: Plant, gains: PidGains, T: float, delay: int):
    """State space of the sampled loop: inputs (setpoint, load at the plant input), outputs (output, actuator).

    ``u = Cr r - C y``, ``y = P (u + load)``; the plant part must be strictly
    proper (it is with one sample of computation delay). The delay line is
    as long as the dead time asks: use :func:`_bounded_closed_loop` for analysis.
    """
    P = discretise(plant, T, delay)
    ap, bp, cp, dp = state_space_arrays(P)
    if np.any(dp != 0):
        raise ModelError("the sampled plant has direct feedthrough: use at least one sample of computation delay")
    ak, bkr, bky, ck, dkr, dky = _controller_realisation(gains, T)
    n_p, n_k = ap.shape[0], ak.shape[0]
    a = np.zeros((n_p + n_k, n_p + n_k))
    a[:n_p, :n_p] = ap + bp @ (dky * cp)
    a[:n_p, n_p:] = bp @ ck
    a[n_p:, :n_p] = bky @ cp
    a[n_p:, n_p:] = ak
    b = np.zeros((n_p + n_k, 2))
    b[:n_p, 0:1] = bp * dkr
    b[:n_p, 1:2] = bp
    b[n_p:, 0:1] = bkr
    c = np.zeros((2, n_p + n_k))
    c[0, :n_p] = cp[0]
    c[1, :n_p] = dky * cp[0]
    c[1, n_p:] = ck[0]
    d = np.array([[0.0, 0.0], [dkr, 0.0]])
    return a, b, c, d


def _bounded_closed_loop(plant: Plant, gains: PidGains, T: float, delay: int):
    """:func:`_closed_loop` with the delay line bounded (see :func:`compensator.loops.sampled.analysis_plant`).

    Returns the four matrices and the analysis period, second.
    """
    p, ta = analysis_plant(plant, T, delay)
    return (*_closed_loop(p, gains, ta, delay), ta)


def closed_loop_stable(plant: Plant, gains: PidGains, sample_time_s: float, *,
                       computation_delay_samples: int = 1) -> bool:
    """Whether every closed-loop pole of the sampled loop lies inside the unit circle.

    Parameters
    ----------
    plant : Plant
    gains : PidGains
    sample_time_s : float
        Firmware period, second.
    computation_delay_samples : int

    Returns
    -------
    bool
    """
    a_cl = _bounded_closed_loop(plant, gains, sample_time_s, computation_delay_samples)[0]
    return bool(np.max(np.abs(np.linalg.eigvals(a_cl))) < 1.0)


@dataclass(frozen=True, kw_only=True)
class LoopFigures:
    """The robustness figures of one loop, without the time response.

    Attributes
    ----------
    stable : bool
        All closed-loop poles inside the unit circle.
    spectral_radius : float
        Largest closed-loop pole magnitude.
    margins : Margins
    analysis_period_s : float
        Period the poles were computed at, second.
    """

    stable: bool
    spectral_radius: float
    margins: Margins
    analysis_period_s: float

    @property
    def ms(self) -> float:
        """Maximum sensitivity."""
        return self.margins.ms

    @property
    def gain_margin(self) -> float:
        """Gain margin, factor."""
        return self.margins.gain_margin

    @property
    def phase_margin_deg(self) -> float:
        """Phase margin, degree."""
        return self.margins.phase_margin_deg


def _finite_or(value, default):
    return float(value) if value is not None and np.isfinite(value) else default


#: Loop gains below this are not searched for phase crossovers (gain margins above 1/0.01 = 100 count as inf).
_GM_FLOOR = 0.01


def _margin_search_span(loop) -> slice:
    """The stretch of the grid python-control searches for the margins.

    It holds every gain crossover (``|L|`` passes through 1 between two grid
    points) and every phase crossover that could set the gain margin:
    python-control reports the one whose ``|log |L||`` is least, so crossovers
    (located on the grid: ``Im L`` changes sign with ``Re L < 0``) farther
    than a factor of 2 from that one, and those with ``|L|`` below
    :data:`_GM_FLOOR`, are left out, and so is the grid below and above them.
    A long dead time wraps the phase hundreds of times beyond the crossover;
    each wrap costs python-control a root search and a minimisation.
    """
    mag = np.abs(loop)
    above = mag >= 1.0
    ends = list(np.flatnonzero(above[:-1] != above[1:]))
    im = loop.imag
    at = np.flatnonzero((im[:-1] * im[1:] <= 0) & (loop.real[:-1] < 0))
    gain = np.maximum(mag[at], mag[at + 1])
    at, gain = at[gain >= _GM_FLOOR], gain[gain >= _GM_FLOOR]
    if at.size:
        distance = np.abs(np.log(gain))
        ends += list(at[distance <= np.min(distance) + math.log(2.0)])
    if not ends:
        return slice(0, 0)
    return slice(max(int(min(ends)) - 4, 0), min(int(max(ends)) + 5, loop.size))


def _margins(plant, gains, T, delay):
    w = loop_frequency_grid(plant, T, 6000, 7.0)
    loop = controller_frequency_response(gains, T, w) * discrete_frequency_response(plant, T, w, delay)
    dist = np.abs(1.0 + loop)
    k = int(np.argmin(dist))
    ms, w_ms = float(1.0 / dist[k]), float(w[k])
    # python-control computes the margins from our exact frequency response of the sampled loop (its
    # polynomial method loses accuracy on high-order or stiff sampled loops), over the stretch of the grid
    # that can hold them (gain margins above 100 are reported as inf).
    span = _margin_search_span(loop)
    coarse = slice(span.start, span.stop, 3)
    phase_deg = np.degrees(np.unwrap(np.angle(loop[coarse])))
    with warnings_module.catch_warnings():
        warnings_module.simplefilter("ignore")
        if span.stop - span.start > 6:
            gm, pm, _sm, wpc, wgc, _wms = control.stability_margins((np.abs(loop[coarse]), phase_deg, w[coarse]))
        else:
            gm = pm = wpc = wgc = None
    inf, nan = float("inf"), float("nan")
    gm, pm, wgc, wpc = _finite_or(gm, inf), _finite_or(pm, inf), _finite_or(wgc, nan), _finite_or(wpc, nan)
    delay_margin = math.radians(pm) / wgc if np.isfinite(pm) and np.isfinite(wgc) and wgc > 0 else inf
    return Margins(gm, pm, ms, wgc, wpc, w_ms, delay_margin)


def loop_figures(plant: Plant, gains: PidGains, sample_time_s: float, *,
                 computation_delay_samples: int = 1) -> LoopFigures:
    """Stability, margins and Ms of the sampled loop (no step response: see :func:`verify_loop`).

    Parameters
    ----------
    plant : Plant
    gains : PidGains
    sample_time_s : float
        Firmware period, second.
    computation_delay_samples : int

    Returns
    -------
    LoopFigures
    """
    T = float(sample_time_s)
    with one_blas_thread():  # small dense problems: see compensator.loops._blas
        a_cl, *_, ta = _bounded_closed_loop(plant, gains, T, computation_delay_samples)
        radius = float(np.max(np.abs(np.linalg.eigvals(a_cl))))
        margins = _margins(plant, gains, T, computation_delay_samples)
    return LoopFigures(stable=radius < 1.0, spectral_radius=radius, margins=margins, analysis_period_s=ta)


def _simulate(a, b, c, d, n):
    """Outputs of ``x+ = A x + B u``, ``y = C x + D u`` for a unit step on each input (the state count is bounded)."""
    a_op = np.ascontiguousarray(a)
    x = np.zeros((a.shape[0], b.shape[1]))
    out = np.empty((n, c.shape[0], b.shape[1]))
    for k in range(n):
        out[k] = c @ x + d
        x = a_op @ x + b
    return out


def verify_loop(plant: Plant, gains: PidGains, sample_time_s: float, *, computation_delay_samples: int = 1,
                ms_limit: float | None = None, horizon_s: float | None = None) -> LoopReport:
    """Margins, Ms and closed-loop step data of the discretised loop.

    Parameters
    ----------
    plant : Plant
    gains : PidGains
        Signed like the plant gain (a cooler's negative gain gives negative gains).
    sample_time_s : float
        Firmware period, second.
    computation_delay_samples : int
        Samples between reading the input and applying the output (1).
    ms_limit : float, optional
        Requested Ms bound: exceeding it is a finding.
    horizon_s : float, optional
        Length of the simulated step (default: 10 slowest closed-loop time constants).

    Returns
    -------
    LoopReport

    Examples
    --------
    >>> from compensator.loops.plants import fopdt_plant
    >>> report = verify_loop(fopdt_plant(2.0, 30.0, 5.0), PidGains(1.4, 0.05), 0.1)
    >>> report.stable, round(report.margins.ms, 2)
    (True, 1.57)
    """
    T = float(sample_time_s)
    if not (np.isfinite(T) and T > 0):
        raise ModelError(f"must be positive and finite, got {sample_time_s!r}", key="sample_time_s")
    for key in ("kp", "ki_per_s", "kd_s"):
        if not np.isfinite(getattr(gains, key)):
            raise ModelError(f"must be finite, got {getattr(gains, key)!r}", key=key)
    if computation_delay_samples < 1 and np.any(np.asarray(plant.system.D) != 0):
        raise ModelError("a plant with direct feedthrough needs at least one sample of computation delay")
    with one_blas_thread():  # small dense problems: see compensator.loops._blas
        a_cl, b_cl, c_cl, d_cl, ta = _bounded_closed_loop(plant, gains, T, computation_delay_samples)
        poles = np.linalg.eigvals(a_cl)
        margins = _margins(plant, gains, T, computation_delay_samples)
        radius = float(np.max(np.abs(poles)))
        stable = radius < 1.0
        n = int(round(horizon_s / ta)) + 1 if horizon_s else _settle_horizon(poles, ta)
        if not stable:
            n = min(n, 400)
        resp = _simulate(a_cl, b_cl, c_cl, d_cl, n)  # (time, [output, actuator], [setpoint, load])
    findings = []
    if ta != T:
        findings.append(Finding(code="delay_approximated", severity=Severity.INFO, message=(
            f"the dead time of {plant.dead_time_s:g} s is {plant.dead_time_s / T:.0f} samples at {1 / T:g} Hz: the "
            f"closed-loop poles and step response are computed at a {ta:g} s analysis period (dead time shortened to "
            f"keep the loop's phase; about 0.15 degree at crossover); margins and Ms are exact at the firmware rate")))
    gm, pm, ms = margins.gain_margin, margins.phase_margin_deg, margins.ms
    t = np.arange(n) * ta
    y, u, y_load = resp[:, 0, 0], resp[:, 1, 0], resp[:, 0, 1]
    nan = float("nan")
    if stable:
        dc = plant.dc_gain
        b = gains.setpoint_weight
        yfinal = 1.0 if gains.ki_per_s != 0 else dc * b * gains.kp / (1.0 + dc * gains.kp)
        try:
            info = control.step_info(y, T=t, yfinal=yfinal)
        except IndexError:  # python-control cannot find the 90 % crossing: the response never gets there
            info = {"RiseTime": nan, "SettlingTime": nan, "Overshoot": nan, "PeakTime": nan}
        settling = float(info["SettlingTime"])
        if abs(y[-1] - yfinal) > 0.02 * abs(yfinal):
            settling = nan
            findings.append(Finding(code="step_not_settled", severity=Severity.WARNING, message=(
                f"the step has not settled within the simulated {t[-1]:.4g} s; settling time unknown")))
        step = StepData(float(info["RiseTime"]), settling, float(info["Overshoot"]),
                        float(info["PeakTime"]), float(np.max(np.abs(u))), float(np.sum(np.abs(y_load)) * ta))
        if gm < POOR_GAIN_MARGIN:
            findings.append(Finding(code="poor_gain_margin", severity=Severity.WARNING, message=(
                f"poor gain margin {gm:.2f} (below {POOR_GAIN_MARGIN:g}, i.e. 6 dB)")))
        if pm < POOR_PHASE_MARGIN_DEG:
            findings.append(Finding(code="poor_phase_margin", severity=Severity.WARNING, message=(
                f"poor phase margin {pm:.1f} deg (below {POOR_PHASE_MARGIN_DEG:g} deg)")))
        if ms > POOR_MS:
            findings.append(Finding(code="fragile_ms", severity=Severity.WARNING, message=(
                f"Ms {ms:.2f} above {POOR_MS:g}: an aggressive, fragile loop")))
        if ms_limit is not None and ms > ms_limit * 1.005:
            findings.append(Finding(code="ms_above_bound", severity=Severity.WARNING, message=(
                f"Ms {ms:.3f} exceeds the requested {ms_limit:g}")))
    else:
        step = StepData(nan, nan, nan, nan, float(np.max(np.abs(u))), float("inf"))
        findings.append(Finding(code="unstable", severity=Severity.DANGER, message=(
            f"the closed loop is UNSTABLE (largest pole magnitude {radius:.4f} >= 1); do not use these gains")))
    from compensator.loops.cooler import cooler_gain_findings

    findings.extend(cooler_gain_findings(plant.operating_point))
    return LoopReport(margins, step, bool(stable), radius, T, tuple(findings), ta, t, y, u)


# ---------------------------------------------------------------- older names
def cooler_warnings(plant: Plant) -> list[str]:
    """Older interface of :func:`compensator.loops.cooler.cooler_gain_findings`: the messages only."""
    from compensator.loops.cooler import cooler_gain_findings

    return [f.message for f in cooler_gain_findings(plant.operating_point)]


def cooler_operating_warnings(params, point) -> list[str]:
    """Older interface of :func:`compensator.loops.cooler.cooler_safety_findings`: the messages only."""
    from compensator.loops.cooler import cooler_safety_findings

    return [f.message for f in cooler_safety_findings(params, point)]


# AmbientCheck and check_cooler_ambient_range moved to compensator.loops.cooler (imported lazily: cooler uses
# this module).
__getattr__ = lazy_exports(globals(), dict.fromkeys(("AmbientCheck", "check_cooler_ambient_range"),
                                                    "compensator.loops.cooler"))
