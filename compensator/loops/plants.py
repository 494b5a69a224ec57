"""Plant models of the two loops: generic low-order models, the linearised cooler, the bias supply.

The cooler's heat balance is physics (:mod:`compensator.physics.thermal`);
here it is linearised at an operating point into a small-signal
:class:`Plant` from current (A) to the cold-plate sensor reading (K).

The bias supply: the DAC code sets the regulator's target, the regulator
follows with a first-order lag, and the series resistor and filter capacitor
form an RC low pass in front of the SiPM.

Sampling and responses (zero-order hold, exact dead time, frequency and step
responses) are in :mod:`compensator.loops.sampled`. The cooler physics and
the sampling functions are re-exported here so that older imports
(``from compensator.loops.plants import cooler_steady_state``) keep working.
"""

from __future__ import annotations

from dataclasses import dataclass

import control
import numpy as np

from compensator.constants import ZERO_C_IN_K
from compensator.errors import ModelError
from compensator.loops.sampled import (  # noqa: F401  (re-exported: older import path)
    analysis_period_s,
    analysis_plant,
    continuous_frequency_response,
    continuous_tf,
    delay_samples,
    discrete_frequency_evaluator,
    discrete_frequency_response,
    discretise,
    state_space_arrays,
    step_response,
)
from compensator.physics.thermal import (  # noqa: F401  (re-exported: older import path)
    CoolerOperatingPoint,
    CoolerParams,
    cooler_current_limits_a,
    cooler_derivatives,
    cooler_operating_point,
    cooler_optimum_current_a,
    cooler_steady_state,
    heat_balance_matrix_w_per_k,
    stable_current_range_a,
)

__all__ = [
    "Plant", "FopdtModel", "SopdtModel", "fopdt_plant", "sopdt_plant", "model_plant", "linearise_cooler",
    "linearise_cooler_over_ambient", "SupplyOperatingPoint", "bias_supply_plant",
    # re-exported from compensator.physics.thermal and compensator.loops.sampled
    "CoolerOperatingPoint", "CoolerParams", "cooler_current_limits_a", "cooler_derivatives",
    "cooler_operating_point", "cooler_optimum_current_a", "cooler_steady_state", "stable_current_range_a",
    "continuous_frequency_response", "continuous_tf", "discrete_frequency_response", "discrete_frequency_evaluator",
    "discretise", "step_response",
]

#: Older name of :func:`compensator.loops.sampled.discrete_frequency_evaluator`.
discrete_response_function = discrete_frequency_evaluator


# ---------------------------------------------------------------- generic plants
@dataclass(frozen=True)
class Plant:
    """A single-input single-output linear plant with an input dead time.

    Attributes
    ----------
    system : control.StateSpace
        Continuous-time, delay-free part (deviation variables).
    dead_time_s : float
        Pure delay in front of ``system``, second.
    name : str
        Short label, e.g. ``"cooler"``.
    input_label, output_label : str
        What the input and output are, with units (for reports and plots).
    operating_point : object or None
        The operating point the model was linearised at, if any.
    """

    system: control.StateSpace
    dead_time_s: float
    name: str = "plant"
    input_label: str = "input"
    output_label: str = "output"
    operating_point: object = None

    @property
    def dc_gain(self) -> float:
        """Steady-state gain, output units per input unit."""
        return float(np.real(control.dcgain(self.system)))


@dataclass(frozen=True)
class FopdtModel:
    """First order plus dead time: ``K exp(-theta s) / (tau s + 1)``.

    Attributes
    ----------
    gain : float
        K, output units per input unit (may be negative).
    time_constant_s : float
        tau, second.
    dead_time_s : float
        theta, second.
    """

    gain: float
    time_constant_s: float
    dead_time_s: float


@dataclass(frozen=True)
class SopdtModel:
    """Second order plus dead time: ``K exp(-theta s) / ((tau1 s + 1)(tau2 s + 1))``, ``tau1 >= tau2``.

    Attributes
    ----------
    gain : float
        K, output units per input unit.
    time_constant_s, time_constant2_s : float
        tau1 >= tau2 >= 0, second.
    dead_time_s : float
        theta, second.
    """

    gain: float
    time_constant_s: float
    time_constant2_s: float
    dead_time_s: float

    def half_rule_fopdt(self) -> FopdtModel:
        """FOPDT by Skogestad's half rule (J. Process Control 13, 291, 2003): half of tau2 goes to each."""
        return FopdtModel(self.gain, self.time_constant_s + self.time_constant2_s / 2.0,
                          self.dead_time_s + self.time_constant2_s / 2.0)


def _check_finite(**values):
    for name, value in values.items():
        if not np.isfinite(value):
            raise ModelError(f"{name} must be finite, got {value!r}")


def fopdt_plant(gain: float, time_constant_s: float, dead_time_s: float, *, name: str = "fopdt") -> Plant:
    """The FOPDT plant ``K exp(-theta s) / (tau s + 1)``.

    Parameters
    ----------
    gain : float
        K, output units per input unit, nonzero.
    time_constant_s : float
        tau > 0, second.
    dead_time_s : float
        theta >= 0, second.
    name : str, optional
        Label of the plant in reports and figures.

    Returns
    -------
    Plant
    """
    _check_finite(gain=gain, time_constant_s=time_constant_s, dead_time_s=dead_time_s)
    if gain == 0:
        raise ModelError("gain must be nonzero")
    if time_constant_s <= 0:
        raise ModelError(f"time_constant_s must be positive, got {time_constant_s}")
    if dead_time_s < 0:
        raise ModelError(f"dead_time_s must be >= 0, got {dead_time_s}")
    sys = control.ss([[-1.0 / time_constant_s]], [[gain / time_constant_s]], [[1.0]], [[0.0]])
    return Plant(sys, float(dead_time_s), name)


def sopdt_plant(gain: float, time_constant_s: float, time_constant2_s: float, dead_time_s: float,
                *, name: str = "sopdt") -> Plant:
    """The SOPDT plant ``K exp(-theta s) / ((tau1 s + 1)(tau2 s + 1))``.

    Parameters
    ----------
    gain : float
        K, nonzero.
    time_constant_s, time_constant2_s : float
        tau1 > 0 and tau2 >= 0, second (a zero tau2 gives the FOPDT).
    dead_time_s : float
        theta >= 0, second.
    name : str, optional
        Label of the plant in reports and figures.

    Returns
    -------
    Plant
    """
    _check_finite(time_constant2_s=time_constant2_s)
    if time_constant2_s < 0:
        raise ModelError(f"time_constant2_s must be >= 0, got {time_constant2_s}")
    first = fopdt_plant(gain, time_constant_s, dead_time_s, name=name)
    if time_constant2_s == 0:
        return first
    t1, t2 = time_constant_s, time_constant2_s
    a = np.array([[-1.0 / t1, 1.0 / t1], [0.0, -1.0 / t2]])
    b = np.array([[0.0], [gain / t2]])
    sys = control.ss(a, b, [[1.0, 0.0]], [[0.0]])
    return Plant(sys, float(dead_time_s), name)


def model_plant(model, *, name: str | None = None) -> Plant:
    """The :class:`Plant` of a :class:`FopdtModel` or :class:`SopdtModel`.

    Parameters
    ----------
    model : FopdtModel or SopdtModel
    name : str, optional
        Label of the plant (default ``fopdt`` or ``sopdt``).

    Returns
    -------
    Plant
    """
    if isinstance(model, SopdtModel):
        return sopdt_plant(model.gain, model.time_constant_s, model.time_constant2_s, model.dead_time_s,
                           name=name or "sopdt")
    return fopdt_plant(model.gain, model.time_constant_s, model.dead_time_s, name=name or "fopdt")


# ---------------------------------------------------------------- the cooler
def linearise_cooler_over_ambient(params, ambient_temps_c, setpoint_temp_c=None):
    """The cooler linearised at the setpoint for each ambient temperature.

    Parameters
    ----------
    params : CoolerParams
    ambient_temps_c : array_like
        Degree Celsius.
    setpoint_temp_c : float, optional
        Cold-plate setpoint (default: the profile's).

    Returns
    -------
    plants : list of Plant
        One per ambient at which the setpoint can be held.
    unreachable : list of str
        One message per ambient at which it cannot.
    """
    out, problems = [], []
    for ta in np.atleast_1d(np.asarray(ambient_temps_c, dtype=float)):
        try:
            out.append(linearise_cooler(params, cooler_operating_point(params, setpoint_temp_c, None, float(ta))))
        except ModelError as exc:
            problems.append(f"at ambient {ta:g} C the setpoint cannot be held: {exc}")
    return out, problems


def linearise_cooler(params, point: CoolerOperatingPoint) -> Plant:
    """Small-signal model from current (A) to the sensor reading (K) at ``point``.

    States ``[dTc, dTh, dTs]`` (the sensor state is dropped when the sensor
    has no lag); the sensor dead time becomes the plant's dead time.

    Parameters
    ----------
    params : CoolerParams
    point : CoolerOperatingPoint

    Returns
    -------
    Plant
    """
    p = params
    i, tc, th = point.current_a, point.cold_temp_c + ZERO_C_IN_K, point.hot_temp_c + ZERO_C_IN_K
    s, r = p.seebeck_v_per_k, p.resistance_ohm
    cc, ch = p.cold_heat_capacity_j_per_k, p.hot_heat_capacity_j_per_k
    m11, m12, m21, m22 = (float(v) for v in heat_balance_matrix_w_per_k(p, i))
    a = np.array([[m11 / cc, m12 / cc], [m21 / ch, m22 / ch]])
    b = np.array([[(-s * tc + i * r) / cc], [(s * th + i * r) / ch]])
    if p.sensor_time_constant_s > 0:
        tau = p.sensor_time_constant_s
        a = np.block([[a, np.zeros((2, 1))], [np.array([[1.0 / tau, 0.0, -1.0 / tau]])]])
        b = np.vstack([b, [[0.0]]])
        c = np.array([[0.0, 0.0, 1.0]])
    else:
        c = np.array([[1.0, 0.0]])
    sys = control.ss(a, b, c, np.zeros((1, 1)))
    return Plant(sys, float(p.sensor_dead_time_s), "cooler", "cooler current, A", "cold-plate sensor, degree C",
                 point)


# ---------------------------------------------------------------- the bias supply


@dataclass(frozen=True)
class SupplyOperatingPoint:
    """What the bias-supply model assumed.

    Attributes
    ----------
    volts_per_code : float
        Signed supply output change per DAC code, volt.
    regulator_time_constant_s : float
        First-order lag of the regulator, second.
    filter_time_constant_s : float
        Series resistor times filter capacitor (with the load), second.
    load_resistance_ohm : float
        Small-signal resistance of the SiPM load (inf when neglected), ohm.
    """

    volts_per_code: float
    regulator_time_constant_s: float
    filter_time_constant_s: float
    load_resistance_ohm: float


def bias_supply_plant(supply, regulator_time_constant_s: float | None = None, *,
                      load_resistance_ohm: float = float("inf"), measurement_time_constant_s: float = 0.0) -> Plant:
    """Small-signal model from DAC code to the bias at the SiPM, volt per code.

    ``V_sipm(s) / code(s) = k_v / ((tau_reg s + 1)(R C' s + 1)) * R_load / (R + R_load)``
    with ``k_v = supply.volts_per_code`` (negative for feedback injection),
    ``C'`` the filter capacitor and the load in parallel.

    Parameters
    ----------
    supply : compensator.physics.supply.BiasSupply
    regulator_time_constant_s : float, optional
        The regulator's closed-loop lag, second (default: the supply's
        ``regulator_time_constant_s``, from the board profile).
    load_resistance_ohm : float
        Small-signal resistance of the SiPM, ohm (``dV/dI``; inf neglects the
        load, right when the dark current is microamperes).
    measurement_time_constant_s : float
        First-order lag of the bias read-back (its filter), second; the
        plant's output is then the bias as the firmware reads it.

    Returns
    -------
    Plant
    """
    if regulator_time_constant_s is None:
        regulator_time_constant_s = supply.regulator_time_constant_s
    if regulator_time_constant_s < 0:
        raise ModelError("regulator_time_constant_s must be >= 0")
    if not load_resistance_ohm > 0:
        raise ModelError("load_resistance_ohm must be positive")
    kv = supply.volts_per_code
    r = supply.series_resistor_ohm
    div = 1.0 if np.isinf(load_resistance_ohm) else load_resistance_ohm / (r + load_resistance_ohm)
    r_par = r if np.isinf(load_resistance_ohm) else r * load_resistance_ohm / (r + load_resistance_ohm)
    tau_f = r_par * supply.filter_capacitance_f
    if not measurement_time_constant_s >= 0:
        raise ModelError("measurement_time_constant_s must be >= 0")
    taus = sorted([t for t in (regulator_time_constant_s, tau_f) if t > 0], reverse=True)
    gain = kv * div
    if not taus:
        sys = control.ss(np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), [[gain]])
    elif len(taus) == 1:
        sys = fopdt_plant(gain, taus[0], 0.0).system
    else:
        sys = sopdt_plant(gain, taus[0], taus[1], 0.0).system
    if measurement_time_constant_s > 0:
        tm = measurement_time_constant_s
        sys = control.series(sys, control.ss([[-1.0 / tm]], [[1.0 / tm]], [[1.0]], [[0.0]]))
    op = SupplyOperatingPoint(kv, regulator_time_constant_s, tau_f, load_resistance_ohm)
    return Plant(sys, 0.0, "bias supply", "DAC code", "SiPM bias, V", op)
