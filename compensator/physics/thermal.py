"""The cooled sensor plate: cooler parameters, heat balance, steady states and the dew point.

The heat balance of a lumped thermoelectric module (common practice)::

    Qc = S I Tc - I^2 R / 2 - K (Th - Tc)       heat pumped off the cold plate
    Qh = S I Th + I^2 R / 2 - K (Th - Tc)       heat released on the hot side
    Cc dTc/dt = Qload + Gleak (Ta - Tc) - Qc
    Ch dTh/dt = Qh - (Th - Ta) / Rsink
    tau_s dTs/dt = Tc - Ts                       sensor lag, then a dead time

with absolute temperatures (kelvin) in the Seebeck terms. A positive current
cools the plate; a negative one heats it. Beyond the *current of maximum
cooling* the Joule heat wins and a larger current warms the plate: the loop
gain reverses sign there.

The small-signal model for loop design is in :mod:`compensator.loops.plants`
(:func:`~compensator.loops.plants.linearise_cooler`); this module is the
physics only (no loop analysis, no I/O).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.constants import ZERO_C_IN_K
from compensator.errors import ModelError

__all__ = [
    "MAGNUS_A", "MAGNUS_B_C", "CoolerParams", "CoolerOperatingPoint", "dew_point_c", "heat_pumped_w",
    "heat_released_w", "stable_current_range_a", "cooler_steady_state", "cooler_optimum_current_a",
    "cooler_operating_point", "cooler_current_limits_a", "cooler_derivatives", "heat_balance_matrix_w_per_k",
]

# Magnus coefficients over water (Alduchov and Eskridge, J. Appl. Meteor. 35, 601, 1996).
MAGNUS_A = 17.625
MAGNUS_B_C = 243.04


@dataclass(frozen=True)
class CoolerParams:
    """Lumped thermoelectric cooler, cold plate and hot side.

    Attributes
    ----------
    seebeck_v_per_k, resistance_ohm, conductance_w_per_k, max_current_a : float
        Module Seebeck coefficient S, resistance R, thermal conductance K, current limit.
    cold_heat_capacity_j_per_k, cold_heat_load_w, cold_leak_conductance_w_per_k : float
        Cold plate heat capacity, dissipated load, leak to ambient.
    hot_heat_capacity_j_per_k, sink_resistance_k_per_w : float
        Hot side heat capacity and heat-sink resistance to ambient.
    sensor_time_constant_s, sensor_dead_time_s : float
        Measurement lag and delay.
    ambient_temp_c, ambient_relative_humidity_pct : float
    control_rate_hz, setpoint_temp_c : float
    max_hot_temp_c, dew_margin_k : float
    """

    seebeck_v_per_k: float
    resistance_ohm: float
    conductance_w_per_k: float
    max_current_a: float
    cold_heat_capacity_j_per_k: float
    cold_heat_load_w: float
    cold_leak_conductance_w_per_k: float
    hot_heat_capacity_j_per_k: float
    sink_resistance_k_per_w: float
    sensor_time_constant_s: float
    sensor_dead_time_s: float
    ambient_temp_c: float
    ambient_relative_humidity_pct: float
    control_rate_hz: float
    setpoint_temp_c: float
    max_hot_temp_c: float
    dew_margin_k: float = 3.0


def dew_point_c(temp_c, relative_humidity_pct):
    """Dew point by the Magnus formula (Alduchov and Eskridge 1996: a = 17.625, b = 243.04 C).

    Parameters
    ----------
    temp_c : array_like
        Air temperature, degree Celsius.
    relative_humidity_pct : array_like
        Relative humidity, percent (0 < RH <= 100).

    Returns
    -------
    ndarray
        Dew point, degree Celsius.
    """
    rh = np.asarray(relative_humidity_pct, dtype=float)
    if np.any(~((rh > 0) & (rh <= 100))):
        raise ModelError("must be in (0, 100] percent", key="relative_humidity_pct")
    t = np.asarray(temp_c, dtype=float)
    g = np.log(rh / 100.0) + MAGNUS_A * t / (MAGNUS_B_C + t)
    return MAGNUS_B_C * g / (MAGNUS_A - g)


def heat_pumped_w(params, current_a, cold_temp_c, hot_temp_c):
    """Heat pumped off the cold plate, ``Qc = S I Tc - I^2 R / 2 - K (Th - Tc)``, watt.

    Parameters
    ----------
    params : CoolerParams
    current_a : array_like
        Drive current, ampere.
    cold_temp_c, hot_temp_c : array_like
        Cold-plate and hot-side temperatures, degree Celsius.

    Returns
    -------
    ndarray
        Watt (negative when the module heats the plate).
    """
    i, tc, th = (np.asarray(v, dtype=float) for v in (current_a, cold_temp_c, hot_temp_c))
    s, r, k = params.seebeck_v_per_k, params.resistance_ohm, params.conductance_w_per_k
    return s * i * (tc + ZERO_C_IN_K) - i ** 2 * r / 2.0 - k * (th - tc)


def heat_released_w(params, current_a, cold_temp_c, hot_temp_c):
    """Heat released on the hot side, ``Qh = Qc + I (S (Th - Tc) + I R)``, watt.

    Parameters
    ----------
    params : CoolerParams
    current_a : array_like
        Drive current, ampere.
    cold_temp_c, hot_temp_c : array_like
        Cold-plate and hot-side temperatures, degree Celsius.

    Returns
    -------
    ndarray
        Watt: the pumped heat plus the electrical power (first law).
    """
    i, tc, th = (np.asarray(v, dtype=float) for v in (current_a, cold_temp_c, hot_temp_c))
    return heat_pumped_w(params, i, tc, th) + _electrical_power_w(params, i, tc, th)


def _electrical_power_w(params, current_a, cold_temp_c, hot_temp_c):
    return current_a * (params.seebeck_v_per_k * (hot_temp_c - cold_temp_c) + current_a * params.resistance_ohm)


@dataclass(frozen=True)
class CoolerOperatingPoint:
    """A steady operating point of the cooler.

    Attributes
    ----------
    current_a : float
        Drive current (positive cools the plate), ampere.
    cold_temp_c, hot_temp_c, ambient_temp_c : float
        Steady cold-plate, hot-side and ambient temperatures, degree Celsius.
    optimum_current_a : float
        Current of maximum cooling at this ambient, ampere.
    coldest_temp_c : float
        Cold-plate temperature at that current, degree Celsius.
    heat_pumped_w : float
        Qc, watt.
    electrical_power_w : float
        I (S dT + I R), watt.
    gain_k_per_a : float
        Steady-state slope dTc/dI at this point, kelvin per ampere (negative on
        the normal branch; positive beyond the optimum).
    """

    current_a: float
    cold_temp_c: float
    hot_temp_c: float
    ambient_temp_c: float
    optimum_current_a: float
    coldest_temp_c: float
    heat_pumped_w: float
    electrical_power_w: float
    gain_k_per_a: float

    @property
    def beyond_optimum(self) -> bool:
        """True when the current exceeds the current of maximum cooling (loop gain reversed)."""
        return self.current_a > self.optimum_current_a


def _ambient(params, ambient_temp_c):
    ta = params.ambient_temp_c if ambient_temp_c is None else float(ambient_temp_c)
    if not np.isfinite(ta):
        raise ModelError(f"must be finite, got {ta!r}", key="ambient_temp_c")
    return ta


def heat_balance_matrix_w_per_k(params, current_a):
    """Entries of the fixed-current heat-balance matrix: d(heat flow into node)/d(temperature), watt per kelvin.

    Rows and columns are (cold plate, hot side); the same matrix gives the
    steady state, its stability, and (divided by the heat capacities) the
    linearised dynamics.

    Parameters
    ----------
    params : CoolerParams
    current_a : array_like
        Drive current, ampere.

    Returns
    -------
    m11, m12, m21, m22 : ndarray
        Watt per kelvin.
    """
    p = params
    i = np.asarray(current_a, dtype=float)
    s, k, g, rs = p.seebeck_v_per_k, p.conductance_w_per_k, p.cold_leak_conductance_w_per_k, p.sink_resistance_k_per_w
    return -(g + s * i + k), np.full_like(i, k), np.full_like(i, k), s * i - k - 1.0 / rs


def _thermally_stable(p, current_a):
    """Whether the two-node thermal system at a fixed current has both eigenvalues in the left half plane."""
    m11, m12, m21, m22 = heat_balance_matrix_w_per_k(p, current_a)
    cc, ch = p.cold_heat_capacity_j_per_k, p.hot_heat_capacity_j_per_k
    return (m11 / cc + m22 / ch < 0) & (m11 * m22 - m12 * m21 > 0)


def stable_current_range_a(params) -> tuple[float, float]:
    """Currents within ``[-max_current_a, max_current_a]`` where the module has a stable steady state, ampere.

    Strong heating (negative) currents can run away: the Peltier heat ``S |I| Tc``
    grows with the plate temperature faster than the leak removes it.

    Parameters
    ----------
    params : CoolerParams

    Returns
    -------
    lowest_a, highest_a : float
    """
    lo, hi = -params.max_current_a, params.max_current_a
    ends = []
    for edge in (lo, hi):
        if _thermally_stable(params, edge):
            ends.append(edge)
            continue
        if not _thermally_stable(params, 0.0):
            raise ModelError("the module has no stable steady state even at zero current")
        a, b = 0.0, edge  # a stable, b unstable
        for _ in range(80):
            m = 0.5 * (a + b)
            a, b = (m, b) if _thermally_stable(params, m) else (a, m)
        ends.append(a * (1 - 1e-9))
    return ends[0], ends[1]


def cooler_steady_state(params, current_a, ambient_temp_c=None):
    """Steady cold-plate and hot-side temperatures at a constant current.

    For a fixed current the two heat balances are linear in ``Tc`` and ``Th``,
    so they are solved exactly (vectorised over ``current_a``).

    Parameters
    ----------
    params : CoolerParams
    current_a : array_like
        Drive current, ampere (negative heats the plate).
    ambient_temp_c : float, optional
        Ambient, degree Celsius (default: the profile's).

    Returns
    -------
    cold_temp_c, hot_temp_c : ndarray
        Degree Celsius.

    Raises
    ------
    ModelError
        The current is not finite, or the hot side has no stable steady
        state (the heat sink cannot carry the heat: thermal runaway).
    """
    p = params
    ta = _ambient(p, ambient_temp_c)
    i = np.asarray(current_a, dtype=float)
    if not np.all(np.isfinite(i)):
        raise ModelError(f"must be finite, got {float(np.atleast_1d(i)[~np.isfinite(np.atleast_1d(i))][0])!r}",
                         key="current_a")
    r, g, rs = p.resistance_ohm, p.cold_leak_conductance_w_per_k, p.sink_resistance_k_per_w
    # Unknowns in kelvin.  Row 1: cold balance, row 2: hot balance.
    a11, a12, a21, a22 = heat_balance_matrix_w_per_k(p, i)
    ta_k = ta + ZERO_C_IN_K
    b1 = -(p.cold_heat_load_w + g * ta_k + i ** 2 * r / 2.0)
    b2 = -(i ** 2 * r / 2.0 + ta_k / rs)
    det = a11 * a22 - a12 * a21
    stable = np.atleast_1d(_thermally_stable(p, i))
    if not np.all(stable):
        bad = float(np.atleast_1d(i)[~stable][0])
        raise ModelError(f"the module has no stable steady state at {bad:g} A: the Peltier and Joule heat outgrow "
                         "what the heat sink and leaks carry away (thermal runaway); lower the current or improve "
                         "the heat sink")
    tc = (b1 * a22 - a12 * b2) / det
    th = (a11 * b2 - a21 * b1) / det
    return tc - ZERO_C_IN_K, th - ZERO_C_IN_K


def cooler_optimum_current_a(params, ambient_temp_c=None) -> float:
    """Current of maximum cooling: the current that makes the steady cold plate coldest.

    Searched over ``[0, max_current_a]`` (the result is ``max_current_a`` when
    the module is limited before its optimum).

    Parameters
    ----------
    params : CoolerParams
    ambient_temp_c : float, optional

    Returns
    -------
    float
        Ampere.
    """
    hi = stable_current_range_a(params)[1]
    # The slope dTc/dI is the quantity that changes sign; a bounded scalar search on Tc is robust.
    grid = np.linspace(0.0, hi, 257)
    tc, _ = cooler_steady_state(params, grid, ambient_temp_c)
    j = int(np.argmin(tc))
    lo_b, hi_b = grid[max(j - 1, 0)], grid[min(j + 1, grid.size - 1)]
    if j == grid.size - 1:
        return float(hi)
    from scipy.optimize import minimize_scalar  # here, not at the top: every command loads this module

    res = minimize_scalar(lambda x: float(cooler_steady_state(params, x, ambient_temp_c)[0]),
                          bounds=(lo_b, hi_b), method="bounded", options={"xatol": 1e-9})
    return float(res.x)


def cooler_operating_point(params, setpoint_temp_c=None, current_a=None, ambient_temp_c=None) -> CoolerOperatingPoint:
    """Operating point at a setpoint (on the normal branch) or at a given current.

    Parameters
    ----------
    params : CoolerParams
    setpoint_temp_c : float, optional
        Cold-plate temperature to hold, degree Celsius (default: the profile's
        setpoint). Ignored when ``current_a`` is given.
    current_a : float, optional
        Operate at this current instead, ampere.
    ambient_temp_c : float, optional
        Ambient, degree Celsius (default: the profile's).

    Returns
    -------
    CoolerOperatingPoint

    Raises
    ------
    ModelError
        A value is not finite, or the setpoint cannot be reached within
        ``[-max_current_a, optimum]``, or the current exceeds the module's limit.
    """
    p = params
    ta = _ambient(p, ambient_temp_c)
    if current_a is not None and not np.isfinite(current_a):
        raise ModelError(f"must be finite, got {current_a!r}", key="current_a")
    i_opt = cooler_optimum_current_a(p, ta)
    t_cold = float(cooler_steady_state(p, i_opt, ta)[0])
    if current_a is None:
        sp = p.setpoint_temp_c if setpoint_temp_c is None else float(setpoint_temp_c)
        if not np.isfinite(sp):
            raise ModelError(f"must be finite, got {sp!r}", key="setpoint_temp_c")
        i_warm = stable_current_range_a(p)[0]
        t_warm = float(cooler_steady_state(p, i_warm, ta)[0])
        if sp < t_cold:
            raise ModelError(f"setpoint {sp:g} C is below the coldest reachable {t_cold:.2f} C at ambient {ta:g} C "
                             f"(current of maximum cooling {i_opt:.3f} A)", key="setpoint_temp_c")
        if sp > t_warm:
            raise ModelError(f"setpoint {sp:g} C is above the warmest reachable {t_warm:.2f} C at ambient {ta:g} C "
                             f"(heating at {i_warm:.3g} A)", key="setpoint_temp_c")
        if sp == t_cold:
            current = i_opt
        else:
            from scipy.optimize import brentq

            current = brentq(lambda x: float(cooler_steady_state(p, x, ta)[0]) - sp, i_warm, i_opt, xtol=1e-12)
    else:
        current = float(current_a)
        if abs(current) > p.max_current_a:
            raise ModelError(f"current {current:g} A exceeds the module's max_current_a {p.max_current_a:g} A",
                             key="current_a")
    tc, th = (float(v) for v in cooler_steady_state(p, current, ta))
    qc = float(heat_pumped_w(p, current, tc, th))
    power = float(_electrical_power_w(p, current, tc, th))
    h = 1e-6 * max(1.0, p.max_current_a)
    lo, hi = (float(cooler_steady_state(p, current + sgn * h, ta)[0]) for sgn in (-1, 1))
    return CoolerOperatingPoint(current, tc, th, ta, i_opt, t_cold, qc, power, (hi - lo) / (2 * h))


def cooler_current_limits_a(params, ambient_temp_c=None) -> tuple[float, float]:
    """Safe actuator limits for a cooler loop, ampere.

    The upper limit is the current of maximum cooling (beyond it the loop
    gain reverses and a controller would run away), the lower limit the
    strongest heating current that still has a stable steady state, both
    within ``+-max_current_a``.

    Parameters
    ----------
    params : CoolerParams
    ambient_temp_c : float, optional
        Ambient, degree Celsius (default: the profile's).

    Returns
    -------
    out_min_a, out_max_a : float
    """
    lo, _ = stable_current_range_a(params)
    return float(lo), float(min(params.max_current_a, cooler_optimum_current_a(params, ambient_temp_c)))


def cooler_derivatives(params, cold_temp_c, hot_temp_c, sensor_temp_c, current_a, ambient_temp_c=None):
    """Time derivatives of the nonlinear cooler model (for simulation).

    Parameters
    ----------
    params : CoolerParams
    cold_temp_c, hot_temp_c, sensor_temp_c : array_like
        States, degree Celsius.
    current_a : array_like
        Drive current, ampere.
    ambient_temp_c : array_like, optional

    Returns
    -------
    tuple of ndarray
        ``dTc/dt, dTh/dt, dTs/dt`` in kelvin per second.
    """
    p = params
    ta = p.ambient_temp_c if ambient_temp_c is None else np.asarray(ambient_temp_c, dtype=float)
    tc, th, ts, i = (np.asarray(v, dtype=float) for v in (cold_temp_c, hot_temp_c, sensor_temp_c, current_a))
    qc = heat_pumped_w(p, i, tc, th)
    qh = heat_released_w(p, i, tc, th)
    dtc = (p.cold_heat_load_w + p.cold_leak_conductance_w_per_k * (ta - tc) - qc) / p.cold_heat_capacity_j_per_k
    dth = (qh - (th - ta) / p.sink_resistance_k_per_w) / p.hot_heat_capacity_j_per_k
    if p.sensor_time_constant_s > 0:
        dts = (tc - ts) / p.sensor_time_constant_s
    else:
        dts = np.zeros_like(tc)
    return dtc, dth, dts
