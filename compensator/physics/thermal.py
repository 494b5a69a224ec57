"""Thermal parameters of a cooled sensor plate, and the dew point.

The cooler's dynamics live in :mod:`compensator.loops`; this module holds the
parameters (loaded from a ``thermal`` profile) and condensation safety.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError

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
    if np.any((rh <= 0) | (rh > 100)):
        raise ModelError("relative_humidity_pct must be in (0, 100]")
    t = np.asarray(temp_c, dtype=float)
    g = np.log(rh / 100.0) + MAGNUS_A * t / (MAGNUS_B_C + t)
    return MAGNUS_B_C * g / (MAGNUS_A - g)
