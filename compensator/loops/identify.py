"""Process identification: step tests and relay-feedback experiments.

* Step tests -> FOPDT or SOPDT. The two-point method of Smith (1972) gives the
  start: ``tau = 1.5 (t63.2 - t28.3)``, ``theta = t63.2 - tau``, exact for a
  true FOPDT; a bounded least-squares fit of the whole record (scipy
  ``least_squares``) finishes, with standard errors from the Jacobian.
  The model response to the recorded input is built by superposing step
  responses, so any piecewise-constant input works, not only one step.
* Relay feedback (Astrom and Hagglund, Automatica 20, 645, 1984): a relay of
  amplitude ``d`` drives the process into a limit cycle of amplitude ``a``
  and period ``Pu``; the describing function gives the ultimate gain
  ``Ku = 4 d / (pi a)`` (with hysteresis ``eps``:
  ``4 d / (pi sqrt(a^2 - eps^2))``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares
from scipy.signal import fftconvolve

from compensator.errors import ModelError
from compensator.loops.measurements import LoopRecord
from compensator.loops.plants import FopdtModel, Plant, SopdtModel, step_response

__all__ = [
    "SMITH_LOW", "SMITH_HIGH", "StepFit", "RelayResult", "smith_two_point", "lack_of_fit_factor", "fit_step",
    "model_response", "relay_experiment", "approximate_plant",
]

#: The two levels: 1 - exp(-1/3) and 1 - exp(-1) (published rounded as 28.3 % and 63.2 %); with the exact
#: levels the method is exact on a true FOPDT: t28 = theta + tau/3, t63 = theta + tau.
SMITH_LOW = float(-np.expm1(-1.0 / 3.0))
SMITH_HIGH = float(-np.expm1(-1.0))


@dataclass(frozen=True)
class StepFit:
    """A model fitted to a step test.

    Attributes
    ----------
    model : FopdtModel or SopdtModel
        The least-squares model.
    start : FopdtModel
        Smith's two-point estimate the fit started from.
    standard_errors : dict
        One standard error per model field (same units), from the Jacobian,
        scaled by :attr:`standard_error_scale`.
    baseline : float
        Fitted output before the step (output units).
    step_time_s : float
        When the input first changed, second.
    input_step : float
        Net input change (input units).
    residual_rms : float
        Root mean square of the fit residuals (output units).
    r_squared : float
        Fraction of the output variance the model explains.
    warnings : tuple of str
    standard_error_scale : float
        The lack-of-fit factor the Jacobian's errors were multiplied by
        (:func:`lack_of_fit_factor`; 1 for white residuals).
    """

    model: object
    start: FopdtModel
    standard_errors: dict
    baseline: float
    step_time_s: float
    input_step: float
    residual_rms: float
    r_squared: float
    warnings: tuple = field(default_factory=tuple)
    standard_error_scale: float = 1.0


@dataclass(frozen=True)
class RelayResult:
    """Ultimate gain and period from a relay-feedback experiment.

    Attributes
    ----------
    ultimate_gain : float
        |Ku|, input units per output unit (the controller takes the sign of
        the process gain).
    ultimate_period_s : float
        Pu, second.
    relay_amplitude : float
        d, half the relay's swing (input units).
    oscillation_amplitude : float
        a, half the output's peak-to-peak swing (output units).
    hysteresis : float
        eps used in the describing function (output units).
    cycles : int
        Whole cycles averaged.
    period_std_s, amplitude_std : float
        Cycle-to-cycle standard deviation of the period and amplitude.
    warnings : tuple of str
    process_sign : int
        +1 when more input raises the output (the relay switched up as the
        output fell), -1 when it lowers it (a cooler).
    fundamental_ultimate_gain : float
        ``4 d / (pi a1)`` with ``a1`` the amplitude of the output's
        fundamental (Fourier coefficient over the whole cycles).
    describing_function_error_pct : float
        ``100 |Ku - Ku1| / Ku1``: how far the output's harmonics move the
        describing-function estimate, which assumes a sine (a measured
        indicator of the method's own error).
    """

    ultimate_gain: float
    ultimate_period_s: float
    relay_amplitude: float
    oscillation_amplitude: float
    hysteresis: float
    cycles: int
    period_std_s: float
    amplitude_std: float
    warnings: tuple = field(default_factory=tuple)
    process_sign: int = 1
    fundamental_ultimate_gain: float = float("nan")
    describing_function_error_pct: float = float("nan")

    @property
    def signed_ultimate_gain(self) -> float:
        """Ku with the process's sign, as ``tune --ultimate`` takes it."""
        return self.process_sign * self.ultimate_gain


# ---------------------------------------------------------------- step shapes
def _unit_step_fopdt(t, tau, theta):
    s = np.clip(t - theta, 0.0, None)
    return -np.expm1(-s / tau)


def _unit_step_sopdt(t, tau1, tau2, theta):
    s = np.clip(t - theta, 0.0, None)
    if tau2 <= 1e-12 * tau1:
        return -np.expm1(-s / tau1)
    e1 = np.exp(-s / tau1)
    if abs(tau1 - tau2) < 1e-6 * tau1:
        tm = 0.5 * (tau1 + tau2)
        return 1.0 - np.exp(-s / tm) * (1.0 + s / tm)
    return 1.0 - e1 - tau2 * (e1 - np.exp(-s / tau2)) / (tau1 - tau2)


class _Superposer:
    """Response of a linear model to a piecewise-constant (sample-and-hold) input."""

    def __init__(self, time_s, inp):
        self.t = time_s
        du = np.diff(inp)
        scale = max(np.max(np.abs(inp)), 1e-300)
        idx = np.flatnonzero(np.abs(du) > 1e-12 * scale)
        self.du = du[idx]
        self.tc = time_s[idx + 1]  # the new input value holds from this sample on
        dt = np.diff(time_s)
        self.uniform = dt.size > 0 and np.ptp(dt) <= 1e-6 * np.mean(dt)
        if not self.uniform and self.du.size * self.t.size > 5e7:
            raise ModelError("too many input changes on a non-uniform time grid to fit; resample the record")

    def response(self, unit_step):
        if self.du.size == 0:
            return np.zeros_like(self.t)
        if self.uniform and self.du.size > 50:
            dt = self.t[1] - self.t[0]
            lag = np.arange(self.t.size) * dt
            impulse = np.zeros_like(self.t)
            k = np.rint((self.tc - self.t[0]) / dt).astype(int)
            np.add.at(impulse, k, self.du)
            return fftconvolve(impulse, unit_step(lag))[: self.t.size]
        return unit_step(self.t[None, :] - self.tc[:, None]).T @ self.du


# ---------------------------------------------------------------- two-point method
def _step_geometry(record: LoopRecord):
    t, u, y = record.time_s, record.input, record.output
    du = np.diff(u)
    scale = max(np.max(np.abs(u)), 1e-300)
    moves = np.flatnonzero(np.abs(du) > 1e-12 * scale)
    if moves.size == 0:
        raise ModelError("the input never changes; not a step test")
    j = moves[0] + 1
    t0 = t[j]
    n = t.size
    tail = max(3, n // 20)
    y0 = float(np.mean(y[:j]))
    y_end = float(np.mean(y[-tail:]))
    u_step = float(np.mean(u[-tail:]) - u[0])
    if u_step == 0:
        raise ModelError("the input returns to its start; no net step to identify")
    return t0, y0, y_end, u_step, j


def _crossing_time(t, yn, level):
    """First time the normalised response reaches ``level`` (linear interpolation)."""
    above = np.flatnonzero(yn >= level)
    if above.size == 0:
        raise ModelError(f"the response never reaches {level:.1%} of its final change")
    k = above[0]
    if k == 0:
        return float(t[0])
    y1, y2 = yn[k - 1], yn[k]
    return float(t[k - 1] + (level - y1) * (t[k] - t[k - 1]) / (y2 - y1))


def smith_two_point(time_s, output, step_time_s, baseline, final, input_step) -> FopdtModel:
    """FOPDT from the 28.3 % and 63.2 % crossing times (Smith 1972).

    Parameters
    ----------
    time_s, output : array_like
        The recorded response.
    step_time_s : float
        When the input stepped, second.
    baseline, final : float
        Output before the step and after it settled.
    input_step : float
        Size of the input step.

    Returns
    -------
    FopdtModel
        ``tau = 1.5 (t63.2 - t28.3)``, ``theta = t63.2 - tau`` (times after the
        step), ``K = (final - baseline) / input_step``.
    """
    t = np.asarray(time_s, dtype=float)
    y = np.asarray(output, dtype=float)
    change = final - baseline
    if change == 0:
        raise ModelError("the output does not move: no response to identify")
    after = t >= step_time_s
    yn = (y[after] - baseline) / change
    ta = t[after] - step_time_s
    t28 = _crossing_time(ta, yn, SMITH_LOW)
    t63 = _crossing_time(ta, yn, SMITH_HIGH)
    tau = 1.5 * (t63 - t28)
    if tau <= 0:
        tau = max(t63, np.min(np.diff(t)))
    theta = max(t63 - tau, 0.0)
    return FopdtModel(change / input_step, tau, theta)


# ---------------------------------------------------------------- least squares
def lack_of_fit_factor(residuals) -> float:
    """Factor by which correlated residuals inflate least-squares standard errors.

    With lag-one autocorrelation ``rho > 0`` of the residuals (a model that
    misses part of the response leaves runs of same-signed residuals), the
    effective number of independent samples is ``n (1 - rho) / (1 + rho)``
    (an AR(1) error model; common practice), so the standard errors grow by
    ``sqrt((1 + rho) / (1 - rho))``. White residuals give 1.

    Parameters
    ----------
    residuals : array_like
        Fit residuals in time order.

    Returns
    -------
    float
        At least 1.
    """
    r = np.asarray(residuals, dtype=float)
    r = r - np.mean(r)
    den = float(r @ r)
    if r.size < 3 or den == 0:
        return 1.0
    rho = min(float(r[1:] @ r[:-1]) / den, 0.999)
    return float(math.sqrt((1.0 + rho) / (1.0 - rho))) if rho > 0 else 1.0


def _fit_stats(res, names):
    n, p = res.fun.size, res.x.size
    ssr = float(res.fun @ res.fun)
    dof = max(n - p, 1)
    jac = res.jac
    factor = lack_of_fit_factor(res.fun)
    try:
        cov = np.linalg.pinv(jac.T @ jac) * ssr / dof
        se = factor * np.sqrt(np.clip(np.diag(cov), 0.0, None))
    except np.linalg.LinAlgError:
        se = np.full(p, np.nan)
    return dict(zip(names, (float(v) for v in se))), float(np.sqrt(ssr / n)), factor


def fit_step(record: LoopRecord, model: str = "fopdt", min_dead_time_s: float = 0.0) -> StepFit:
    """Fit an FOPDT or SOPDT model to a step test.

    Parameters
    ----------
    record : LoopRecord
        ``time_s``, ``input`` (piecewise constant), ``output``.
    model : {"fopdt", "sopdt"}
    min_dead_time_s : float
        Lower bound of the fitted dead time, second (a known transport delay).

    Returns
    -------
    StepFit

    Raises
    ------
    ModelError
        The input never changes, or the output never reaches the Smith levels.
    """
    if model not in ("fopdt", "sopdt"):
        raise ModelError(f"model must be 'fopdt' or 'sopdt', got {model!r}")
    t, u, y = record.time_s, record.input, record.output
    t0, y0, y_end, u_step, j = _step_geometry(record)
    # Fit in normalised units (input step 1, output change about 1) so that values of any magnitude (1e-16 or
    # 1e16) give the optimiser the same well-scaled problem; results are scaled back.
    u_scale = abs(u_step)
    y_scale = max(abs(y_end - y0), float(np.std(y)), np.finfo(float).tiny)
    if not (np.isfinite(u_scale) and np.isfinite(y_scale) and u_scale > 0):
        raise ModelError("the input or output values are too large to fit")
    un, yn = (u - u[0]) / u_scale, (y - y0) / y_scale
    start_n = smith_two_point(t, yn, t0, 0.0, (y_end - y0) / y_scale, float(np.sign(u_step)))
    start = FopdtModel(start_n.gain * y_scale / u_scale, start_n.time_constant_s, start_n.dead_time_s)
    sup = _Superposer(t, un)
    span = float(t[-1] - t[0])
    dt_min = float(np.min(np.diff(t)))
    warnings = []
    tail = max(3, t.size // 10)
    slope = np.polyfit(t[-tail:] - t[-tail], yn[-tail:], 1)[0] * (t[-1] - t[-tail])
    if abs(slope) > 0.02 * abs(y_end - y0) / y_scale:
        warnings.append("the output is still moving at the end of the record; the gain is uncertain "
                        "(record for longer)")

    def run(x0, lower, upper, shape):
        def resid(x):
            return x[-1] + x[0] * sup.response(lambda s: shape(s, *x[1:-1])) - yn
        try:
            return least_squares(resid, x0, bounds=(lower, upper), x_scale="jac", method="trf", max_nfev=400)
        except (ValueError, FloatingPointError, np.linalg.LinAlgError) as exc:
            raise ModelError(f"the least-squares fit failed ({exc})") from None

    big = 100.0 * span
    kmag = max(abs(start_n.gain) * 100.0, 1e-6)
    tau_min = dt_min * 1e-3
    if model == "fopdt":
        names = ("gain", "time_constant_s", "dead_time_s", "baseline")
        x0 = np.array([start_n.gain, max(start.time_constant_s, tau_min * 10), start.dead_time_s, 0.0])
        lower = [-kmag, tau_min, min_dead_time_s, -np.inf]
        upper = [kmag, big, span, np.inf]
        x0 = np.clip(x0, np.array(lower) + 1e-12, np.array(upper) - 1e-12)
        res = run(x0, lower, upper, _unit_step_fopdt)
        se, rms, factor = _fit_stats(res, names)
        k, tau, theta, base = res.x
        fitted = FopdtModel(float(k * y_scale / u_scale), float(tau), float(theta))
    else:
        names = ("gain", "time_constant_s", "time_constant2_s", "dead_time_s", "baseline")
        lower = [-kmag, tau_min, 0.0, min_dead_time_s, -np.inf]
        upper = [kmag, big, big, span, np.inf]
        best = None
        for frac in (0.05, 0.2, 0.4, 0.7):
            tau2 = frac * start.time_constant_s
            x0 = np.array([start_n.gain, max(start.time_constant_s - tau2 / 2, tau_min * 10), tau2,
                           max(start.dead_time_s - tau2 / 2, min_dead_time_s), 0.0])
            x0 = np.clip(x0, np.array(lower) + 1e-12, np.array(upper) - 1e-12)
            res = run(x0, lower, upper, _unit_step_sopdt)
            if best is None or res.cost < best.cost:
                best = res
        res = best
        se, rms, factor = _fit_stats(res, names)
        k, t1, t2, theta, base = res.x
        if t2 > t1:
            t1, t2 = t2, t1
            se["time_constant_s"], se["time_constant2_s"] = se["time_constant2_s"], se["time_constant_s"]
        fitted = SopdtModel(float(k * y_scale / u_scale), float(t1), float(t2), float(theta))
    se.pop("baseline", None)
    se["gain"] *= y_scale / u_scale
    rms *= y_scale
    var = float(np.var(yn)) * y_scale ** 2
    r2 = 1.0 - rms ** 2 / var if var > 0 else 1.0
    values = [*(getattr(fitted, f) for f in fitted.__dataclass_fields__), *se.values(), rms]
    if not all(np.isfinite(v) for v in values):
        raise ModelError("the fit gave non-finite values; the record cannot be fitted")
    if not res.success:
        warnings.append(f"least squares did not converge: {res.message}")
    if r2 < 0.9:
        warnings.append(f"the model explains only {r2:.0%} of the output variance; the record may not be a "
                        "clean step test")
    return StepFit(fitted, start, se, float(y0 + base * y_scale), float(t0), u_step, rms, r2, tuple(warnings),
                   factor)


def model_response(model, record: LoopRecord, baseline: float):
    """The fitted model's response to the recorded input.

    Parameters
    ----------
    model : FopdtModel or SopdtModel
    record : LoopRecord
        Supplies the time grid and the (piecewise-constant) input.
    baseline : float
        Output before the first input change (output units).

    Returns
    -------
    ndarray
        Model output at ``record.time_s`` (output units).
    """
    sup = _Superposer(record.time_s, record.input)
    if isinstance(model, SopdtModel):
        shape = lambda s: _unit_step_sopdt(s, model.time_constant_s, model.time_constant2_s,  # noqa: E731
                                           model.dead_time_s)
    else:
        shape = lambda s: _unit_step_fopdt(s, model.time_constant_s, model.dead_time_s)  # noqa: E731
    return baseline + model.gain * sup.response(shape)


# ---------------------------------------------------------------- relay
def relay_experiment(record: LoopRecord, hysteresis: float = 0.0, skip_cycles: int = 1) -> RelayResult:
    """Ultimate gain and period from a relay-feedback record.

    Parameters
    ----------
    record : LoopRecord
        ``input`` is the relay output (two levels), ``output`` the process.
    hysteresis : float
        Relay hysteresis eps in output units (0 for an ideal relay).
    skip_cycles : int
        Leading cycles discarded as start-up transient.

    Returns
    -------
    RelayResult

    Raises
    ------
    ModelError
        The input is not a two-level relay signal, or fewer than two whole
        cycles remain after the transient.
    """
    if hysteresis < 0:
        raise ModelError("hysteresis must be >= 0")
    t, u, y = record.time_s, record.input, record.output
    if not (np.all(np.isfinite(y)) and np.all(np.isfinite(u))):
        raise ModelError("the relay record gives no finite ultimate gain and period "
                         "(non-finite samples)")
    u_hi, u_lo = float(np.max(u)), float(np.min(u))
    if u_hi == u_lo:
        raise ModelError("the input never changes; not a relay experiment")
    mid = 0.5 * (u_hi + u_lo)
    tol = 1e-6 * (u_hi - u_lo)
    if np.any((np.abs(u - u_hi) > tol) & (np.abs(u - u_lo) > tol)):
        raise ModelError("a relay experiment has exactly two input levels", key="input")
    d = 0.5 * (u_hi - u_lo)
    high = u > mid
    rising = np.flatnonzero(~high[:-1] & high[1:]) + 1
    rises = t[rising]
    if rises.size - skip_cycles < 3:
        raise ModelError(f"only {max(rises.size - 1, 0)} whole relay cycles; at least "
                         f"{2 + skip_cycles} needed (the first {skip_cycles} discarded as transient)")
    rises = rises[skip_cycles:]
    idx = rising[skip_cycles:]
    periods = np.diff(rises)
    amps = np.array([0.5 * np.ptp(y[a:b]) for a, b in zip(idx[:-1], idx[1:])])
    a = float(np.mean(amps))
    warnings = []
    if a <= hysteresis:
        raise ModelError(f"oscillation amplitude {a:g} does not exceed the hysteresis {hysteresis:g}")
    ku = 4.0 * d / (np.pi * np.sqrt(a * a - hysteresis * hysteresis))
    pu = float(np.mean(periods))
    p_std = float(np.std(periods, ddof=1)) if periods.size > 1 else 0.0
    a_std = float(np.std(amps, ddof=1)) if amps.size > 1 else 0.0
    if p_std > 0.05 * pu or a_std > 0.05 * a:
        warnings.append("the limit cycle is not steady (period or amplitude varies by more than 5 %); "
                        "record more cycles")
    dt = float(np.median(np.diff(t)))
    if dt > pu / 20:
        warnings.append(f"only {pu / dt:.0f} samples per cycle; the period and amplitude are coarse")
    # The fundamental of the output over the whole cycles used (one Fourier coefficient).
    a0, b0 = idx[0], idx[-1]
    seg_t, seg_y = t[a0:b0], y[a0:b0]
    w = np.gradient(seg_t)
    a1 = float(np.abs(2.0 * np.sum(w * (seg_y - np.average(seg_y, weights=w)) *
                                   np.exp(-2j * np.pi * seg_t / pu)) / np.sum(w)))
    ku1 = 4.0 * d / (np.pi * np.sqrt(max(a1 * a1 - hysteresis * hysteresis, 0.0))) if a1 > hysteresis else np.nan
    # Sign: a direct-acting process makes the relay switch up while the output falls (u = d sign(r - y)).
    slope = float(np.mean(y[np.minimum(rising, y.size - 1)] - y[rising - 1]))
    sign = -1 if slope > 0 else 1
    df_err = float(100.0 * abs(ku - ku1) / ku1) if np.isfinite(ku1) and ku1 > 0 else float("nan")
    values = (ku, pu, a, p_std, a_std)
    if not all(np.isfinite(v) for v in values) or ku <= 0 or pu <= 0:
        raise ModelError("the relay record gives no finite ultimate gain and period "
                         f"(Ku {ku!r}, Pu {pu!r})")
    return RelayResult(float(ku), pu, d, a, float(hysteresis), int(periods.size), p_std, a_std, tuple(warnings),
                       sign, float(ku1), df_err)


# ---------------------------------------------------------------- model reduction
def approximate_plant(plant: Plant, model: str = "fopdt", points: int = 3000):
    """FOPDT or SOPDT with the same step response as ``plant`` (least squares).

    The tuning rules need a low-order model; this fits one to the exact
    (noise-free) step response of the full linear plant, starting from
    Smith's two points.

    Parameters
    ----------
    plant : Plant
    model : {"fopdt", "sopdt"}
    points : int
        Samples of the step response used.

    Returns
    -------
    FopdtModel or SopdtModel
    """
    poles = np.linalg.eigvals(np.atleast_2d(np.asarray(plant.system.A, dtype=float))) \
        if np.asarray(plant.system.A).size else np.array([])
    if poles.size == 0:
        raise ModelError("the plant is a static gain (no time constant) and the tuning rules need one; use the "
                         "robust or zn-cycle method")
    if np.any(np.real(poles) >= 0):
        raise ModelError("the plant is not open-loop stable; a step test model does not apply")
    slow = float(np.max(-1.0 / np.real(poles)))
    horizon = plant.dead_time_s + 10.0 * slow
    grid = np.linspace(0.0, horizon, points)
    t = np.concatenate([[-grid[1]], grid])
    y = step_response(plant, t)
    record = LoopRecord(t, (t >= 0).astype(float), y, plant.name)
    return fit_step(record, model, min_dead_time_s=plant.dead_time_s).model
