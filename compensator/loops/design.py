"""One call from a loop's description to verified gains: what ``compensator tune`` prints.

:func:`design_cooler_loop`, :func:`design_bias_loop`, :func:`design_model_loop`
and :func:`design_ultimate_loop` build the plant, tune it (or take the
builder's gains to verify), verify the sampled loop, check the cooler over the
field's ambient range, and return a :class:`LoopDesign` with every finding and
an ``ok`` flag. Commands render it; they decide nothing.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.findings import Finding, Severity
from compensator.loops import cooler as cooler_checks
from compensator.loops import plants, tuning, verify
from compensator.loops.choices import DEFAULT_MS
from compensator.physics.thermal import dew_point_c

__all__ = ["LoopUnits", "CoolerConditions", "LoopDesign", "design_cooler_loop", "design_bias_loop",
           "design_model_loop", "design_ultimate_loop", "NO_READBACK"]

#: Code of the finding (and reason of the refusal) for a board without a bias read-back channel.
NO_READBACK = ("the board has no bias read-back channel (bias_readback): its bias is set open-loop, so there is no "
               "bias loop to tune; add a bias_readback section to the profile to close one")


@dataclass(frozen=True, kw_only=True)
class LoopUnits:
    """Units of the actuator and the measurement, hence of the gains.

    Attributes
    ----------
    actuator : str
        E.g. ``"A"`` or ``"DAC code"``.
    measurement : str
        E.g. ``"K"`` or ``"V"``.
    """

    actuator: str
    measurement: str

    @property
    def kp_unit(self) -> str:
        """Unit of kp."""
        return f"{self.actuator}/{self.measurement}"

    @property
    def ki_unit(self) -> str:
        """Unit of ki_per_s."""
        return f"{self.actuator}/({self.measurement} s)"

    @property
    def kd_unit(self) -> str:
        """Unit of kd_s."""
        return f"{self.actuator} s/{self.measurement}"


COOLER_UNITS = LoopUnits(actuator="A", measurement="K")
BIAS_UNITS = LoopUnits(actuator="DAC code", measurement="V")
MODEL_UNITS = LoopUnits(actuator="input unit", measurement="output unit")


@dataclass(frozen=True, kw_only=True)
class CoolerConditions:
    """The cooler's operating conditions at the nominal ambient.

    Attributes
    ----------
    point : CoolerOperatingPoint
    relative_humidity_pct : float
        Percent.
    dew_point_c : float
        Dew point of the ambient air, degree Celsius (Magnus formula, Alduchov and Eskridge 1996).
    dew_margin_k : float
        Margin kept above the dew point, kelvin.
    max_hot_temp_c : float
        Hot-side limit, degree Celsius.
    out_min_a, out_max_a : float
        Safe actuator limits, ampere.
    """

    point: object
    relative_humidity_pct: float
    dew_point_c: float
    dew_margin_k: float
    max_hot_temp_c: float
    out_min_a: float
    out_max_a: float


@dataclass(frozen=True, kw_only=True)
class LoopDesign:
    """Gains and everything known about the loop they make.

    Attributes
    ----------
    kind : str
        ``thermal``, ``board``, ``fopdt``, ``sopdt`` or ``ultimate``.
    plant : Plant or None
        The (nominal) plant; None for Ku and Pu without a model.
    units : LoopUnits
    sample_time_s : float
        Firmware period, second.
    gains : PidGains
    tuning : TuningResult or None
        How the gains were obtained (None: the builder's gains, verified).
    report : LoopReport or None
        Verification on the nominal plant (None without a model).
    ambient : AmbientRangeReport or None
        The cooler over the ambient range, when asked.
    conditions : CoolerConditions or None
        The cooler's nominal conditions.
    findings : tuple of Finding
        Everything found, each once: operating point, verification, range.
    ok : bool
        The verified loop is stable (at every ambient of the range), within
        the Ms bound there when one was asked; False without a model.
    """

    kind: str
    plant: object
    units: LoopUnits
    sample_time_s: float
    gains: verify.PidGains
    tuning: object
    report: object
    ambient: object
    conditions: object
    findings: tuple
    ok: bool


def _tune_or_take(plant, *, method, sample_time_s, gains, pid, ms_max, tau_c_s, model, include_sampling_delay,
                  also_plants=()):
    if gains is not None:
        return None, gains
    result = tuning.tune(plant, method, sample_time_s, pid=pid, ms_max=ms_max, tau_c_s=tau_c_s, model=model,
                         include_sampling_delay=include_sampling_delay, also_plants=also_plants)
    return result, result.gains


def _finish(*, kind, plant, units, sample_time_s, gains, result, ms_limit, findings=(), ambient=None,
            conditions=None):
    report = verify.verify_loop(plant, gains, sample_time_s, ms_limit=ms_limit)
    every = list(findings) + list(report.findings)
    if ambient is not None:
        every += list(ambient.findings)
    seen, unique = set(), []
    for f in every:
        if f.message not in seen:
            seen.add(f.message)
            unique.append(f)
    ok = report.stable and (ms_limit is None or report.margins.ms <= ms_limit * 1.005)
    if ambient is not None:
        ok = ok and ambient.ok
    return LoopDesign(kind=kind, plant=plant, units=units, sample_time_s=sample_time_s, gains=gains, tuning=result,
                      report=report, ambient=ambient, conditions=conditions, findings=tuple(unique), ok=bool(ok))


def _sample_time(rate_hz):
    if not (rate_hz is not None and np.isfinite(rate_hz) and rate_hz > 0):
        raise ModelError(f"must be positive and finite, got {rate_hz!r}", key="rate_hz")
    return 1.0 / float(rate_hz)


def design_cooler_loop(params, *, method: str | None = "robust", gains=None, rate_hz: float | None = None,
                       pid: bool = False, ms_max: float = DEFAULT_MS, tau_c_s: float | None = None,
                       include_sampling_delay: bool = True, setpoint_temp_c: float | None = None,
                       ambient_temp_c: float | None = None, current_a: float | None = None,
                       ambient_range_c=None, relative_humidity_pct: float | None = None) -> LoopDesign:
    """Tune (or verify) the cooler loop, optionally for the worst case over an ambient range.

    With ``ambient_range_c`` the cooler is linearised at every ambient of
    :func:`compensator.loops.cooler.ambient_grid_c`; the robust method holds
    its Ms bound on every one of them, and every method's gains are checked
    there, with the dew point and hot-side temperature per ambient.

    Parameters
    ----------
    params : CoolerParams
    method : str or None
        A :data:`compensator.loops.choices.METHODS` name (ignored with ``gains``).
    gains : PidGains, optional
        The builder's gains to verify instead of tuning.
    rate_hz : float, optional
        Firmware rate, hertz (default: the profile's).
    pid : bool
    ms_max : float
        Ms bound of the robust method.
    tau_c_s : float, optional
        tau_c (SIMC) or lambda (IMC), second.
    include_sampling_delay : bool
    setpoint_temp_c, ambient_temp_c : float, optional
        Degree Celsius (default: the profile's).
    current_a : float, optional
        Linearise at this current instead of the setpoint's, ampere.
    ambient_range_c : pair of float, optional
        Lowest and highest ambient, degree Celsius.
    relative_humidity_pct : float, optional
        Percent (default: the profile's ``ambient.relative_humidity_pct``).

    Returns
    -------
    LoopDesign
    """
    T = _sample_time(params.control_rate_hz if rate_hz is None else rate_hz)
    rh = params.ambient_relative_humidity_pct if relative_humidity_pct is None else float(relative_humidity_pct)
    dew_point_c(20.0, rh)  # validates the humidity
    point = plants.cooler_operating_point(params, setpoint_temp_c, current_a, ambient_temp_c)
    plant = plants.linearise_cooler(params, point)
    out_min, out_max = plants.cooler_current_limits_a(params, point.ambient_temp_c)
    conditions = CoolerConditions(point=point, relative_humidity_pct=rh,
                                  dew_point_c=float(dew_point_c(point.ambient_temp_c, rh)),
                                  dew_margin_k=params.dew_margin_k, max_hot_temp_c=params.max_hot_temp_c,
                                  out_min_a=out_min, out_max_a=out_max)
    findings = cooler_checks.cooler_safety_findings(params, point, relative_humidity_pct=rh)
    others, ambients = [], None
    if ambient_range_c is not None:
        lo, hi = (float(v) for v in ambient_range_c)
        if not (np.isfinite(lo) and np.isfinite(hi)):
            raise ModelError(f"must be finite, got {lo!r} {hi!r}", key="ambient_range_c")
        ambients = cooler_checks.ambient_grid_c(lo, hi, point.ambient_temp_c)
        for ta in ambients:
            if ta == point.ambient_temp_c:
                continue
            try:
                others.append(plants.linearise_cooler(params, plants.cooler_operating_point(
                    params, setpoint_temp_c, None, ta)))
            except ModelError:
                pass  # reported by the range check
    robust = gains is None and method == "robust"
    result, gains = _tune_or_take(plant, method=method, sample_time_s=T, gains=gains, pid=pid, ms_max=ms_max,
                                  tau_c_s=tau_c_s, model=None, include_sampling_delay=include_sampling_delay,
                                  also_plants=others if robust else ())
    ambient = None
    if ambients is not None:
        ambient = cooler_checks.check_cooler_ambient_range(
            params, gains, T, ambients, setpoint_temp_c=setpoint_temp_c, relative_humidity_pct=rh,
            ms_limit=ms_max if robust else None)
    return _finish(kind="thermal", plant=plant, units=COOLER_UNITS, sample_time_s=T, gains=gains, result=result,
                   ms_limit=ms_max if robust else None, findings=findings, ambient=ambient, conditions=conditions)


def design_bias_loop(board, *, method: str | None = "robust", gains=None, rate_hz: float | None = None,
                     pid: bool = False, ms_max: float = DEFAULT_MS, tau_c_s: float | None = None,
                     include_sampling_delay: bool = True, regulator_time_constant_s: float | None = None) -> LoopDesign:
    """Tune (or verify) the bias loop of a board that reads its bias back.

    Parameters
    ----------
    board : BoardProfile
        Needs a ``bias_readback`` channel; its filter lag is part of the plant.
    method : str or None
    gains : PidGains, optional
    rate_hz : float, optional
        Default: the board's control rate.
    pid : bool
    ms_max : float
    tau_c_s : float, optional
    include_sampling_delay : bool
    regulator_time_constant_s : float, optional
        Default: the profile's.

    Returns
    -------
    LoopDesign

    Raises
    ------
    ModelError
        The board has no read-back channel (key ``bias_readback``): its bias is set open-loop.
    """
    readback = getattr(board, "bias_readback", None)
    if readback is None:
        raise ModelError(NO_READBACK, key="bias_readback")
    T = _sample_time(board.control_rate_hz if rate_hz is None else rate_hz)
    plant = plants.bias_supply_plant(board.supply, regulator_time_constant_s,
                                     measurement_time_constant_s=readback.filter_time_constant_s)
    robust = gains is None and method == "robust"
    result, gains = _tune_or_take(plant, method=method, sample_time_s=T, gains=gains, pid=pid, ms_max=ms_max,
                                  tau_c_s=tau_c_s, model=None, include_sampling_delay=include_sampling_delay)
    return _finish(kind="board", plant=plant, units=BIAS_UNITS, sample_time_s=T, gains=gains, result=result,
                   ms_limit=ms_max if robust else None)


def design_model_loop(model, *, rate_hz: float, method: str | None = "robust", gains=None, pid: bool = False,
                      ms_max: float = DEFAULT_MS, tau_c_s: float | None = None,
                      include_sampling_delay: bool = True, kind: str | None = None) -> LoopDesign:
    """Tune (or verify) the loop of an FOPDT or SOPDT model.

    Parameters
    ----------
    model : FopdtModel or SopdtModel
    rate_hz : float
        Firmware rate, hertz.
    method : str or None
    gains : PidGains, optional
    pid : bool
    ms_max : float
    tau_c_s : float, optional
    include_sampling_delay : bool
    kind : str, optional
        Label (default ``fopdt`` or ``sopdt``).

    Returns
    -------
    LoopDesign
    """
    T = _sample_time(rate_hz)
    plant = plants.model_plant(model)
    robust = gains is None and method == "robust"
    result, gains = _tune_or_take(plant, method=method, sample_time_s=T, gains=gains, pid=pid, ms_max=ms_max,
                                  tau_c_s=tau_c_s, model=model, include_sampling_delay=include_sampling_delay)
    kind = kind or ("sopdt" if isinstance(model, plants.SopdtModel) else "fopdt")
    return _finish(kind=kind, plant=plant, units=MODEL_UNITS, sample_time_s=T, gains=gains, result=result,
                   ms_limit=ms_max if robust else None)


def design_ultimate_loop(ultimate_gain: float, ultimate_period_s: float, *, rate_hz: float, method: str = "zn-cycle",
                         static_gain: float | None = None, pid: bool = False, ms_max: float = DEFAULT_MS,
                         tau_c_s: float | None = None, include_sampling_delay: bool = True) -> LoopDesign:
    """Gains from a relay experiment's Ku and Pu.

    With the process's static gain an FOPDT with the same ultimate point is
    built (:func:`compensator.loops.tuning.fopdt_from_ultimate`) and every
    method tunes and verifies on it. Without it only ``zn-cycle``
    (Ziegler-Nichols 1942) and ``robust`` (the ultimate point moved onto the
    Ms circle, :func:`compensator.loops.tuning.ms_point_ultimate`; PI only)
    apply, and nothing can be verified.

    Parameters
    ----------
    ultimate_gain : float
        Ku, signed like the process gain, input units per output unit.
    ultimate_period_s : float
        Pu, second.
    rate_hz : float
        Firmware rate, hertz.
    method : str
    static_gain : float, optional
        K, output units per input unit.
    pid : bool
    ms_max : float
    tau_c_s : float, optional
    include_sampling_delay : bool

    Returns
    -------
    LoopDesign
    """
    T = _sample_time(rate_hz)
    if static_gain is not None:
        model = tuning.fopdt_from_ultimate(static_gain, ultimate_gain, ultimate_period_s)
        design = design_model_loop(model, rate_hz=rate_hz, method=method, pid=pid, ms_max=ms_max,
                                   tau_c_s=tau_c_s, include_sampling_delay=include_sampling_delay, kind="ultimate")
        return design
    if method == "zn-cycle":
        gains = tuning.ziegler_nichols_ultimate(ultimate_gain, ultimate_period_s, pid=pid)
        result = tuning.TuningResult(gains, method, pid, None, 0.0, ultimate_gain=ultimate_gain,
                                     ultimate_period_s=ultimate_period_s)
    elif method == "robust":
        if pid:
            raise ModelError("a PID from Ku and Pu alone needs a model: give the static gain as well", key="pid")
        gains = tuning.ms_point_ultimate(ultimate_gain, ultimate_period_s, ms_max)
        result = tuning.TuningResult(gains, method, False, None, 0.0, ultimate_gain=ultimate_gain,
                                     ultimate_period_s=ultimate_period_s, ms_target=ms_max)
    else:
        raise ModelError(f"from Ku and Pu alone only zn-cycle and robust apply, got {method!r}; give the static "
                         "gain to use a model-based rule", key="method")
    note = Finding(code="not_verified", severity=Severity.WARNING, message=(
        "Ku and Pu alone give no model: these gains are NOT verified (give the static gain to build an FOPDT and "
        "verify, or verify on a model with --verify)"))
    return LoopDesign(kind="ultimate", plant=None, units=MODEL_UNITS, sample_time_s=T, gains=gains, tuning=result,
                      report=None, ambient=None, conditions=None, findings=(note,), ok=False)
