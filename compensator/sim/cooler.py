"""The thermoelectric cooler on its nonlinear heat balance, one control tick at a time, for many units.

The heat balance (lumped module, common practice; the same equations as
:func:`compensator.physics.thermal.cooler_derivatives`)::

    Qc = S I Tc - I^2 R / 2 - K (Th - Tc)       heat pumped off the cold plate
    Qh = S I Th + I^2 R / 2 - K (Th - Tc)       heat rejected on the hot side
    P  = Qh - Qc = I (S (Th - Tc) + I R)         electrical power
    Cc dTc/dt = Qload + G (Ta - Tc) - Qc
    Ch dTh/dt = Qh - (Th - Ta) / Rsink

with absolute temperatures in the Seebeck terms. The current is held over a
tick; the tick is cut into sub-steps of Heun's method (explicit trapezoid)
short against the fastest thermal time constant. Because every flux
evaluation satisfies ``Qh = Qc + P`` exactly, the stored heat changes by
exactly the tick's mean net input (load + leak - sink + electrical power)
times the tick, which :class:`CoolerTick` reports for checking.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compensator.constants import ZERO_C_IN_K

__all__ = ["CoolerTick", "cooler_substeps", "cooler_tick"]

#: Sub-steps are at most this fraction of the fastest thermal time constant.
SUBSTEP_FRACTION = 0.05


@dataclass(frozen=True)
class CoolerTick:
    """The cooler over one tick (arrays over units).

    Attributes
    ----------
    cold_temp_c, hot_temp_c : ndarray
        At the end of the tick, degree Celsius.
    heat_pumped_w, heat_rejected_w, electrical_power_w : ndarray
        Mean ``Qc``, ``Qh`` and ``P`` over the tick, watt.
    leak_in_w, sink_out_w : ndarray
        Mean heat from the ambient into the plate and from the hot side to the ambient, watt.
    load_w : float
        Heat dissipated on the plate, watt.
    """

    cold_temp_c: np.ndarray
    hot_temp_c: np.ndarray
    heat_pumped_w: np.ndarray = field(repr=False)
    heat_rejected_w: np.ndarray = field(repr=False)
    electrical_power_w: np.ndarray = field(repr=False)
    leak_in_w: np.ndarray = field(repr=False)
    sink_out_w: np.ndarray = field(repr=False)
    load_w: float = 0.0


def cooler_substeps(params, tick_s: float) -> int:
    """Heun sub-steps per tick so that each is short against the fastest time constant.

    Parameters
    ----------
    params : CoolerParams
    tick_s : float
        Second.
    """
    p = params
    cold = p.cold_heat_capacity_j_per_k / (p.cold_leak_conductance_w_per_k + p.conductance_w_per_k
                                           + p.seebeck_v_per_k * p.max_current_a)
    hot = p.hot_heat_capacity_j_per_k / (p.conductance_w_per_k + 1.0 / p.sink_resistance_k_per_w)
    return max(1, int(np.ceil(tick_s / (SUBSTEP_FRACTION * min(cold, hot)))))


def cooler_tick(params, cold_temp_c, hot_temp_c, current_a, ambient_temp_c, tick_s: float,
                substeps: int | None = None) -> CoolerTick:
    """Advance the cooler one tick at a held current.

    Plain arithmetic only, so Python floats stay floats (fast for one unit)
    and numpy arrays stay arrays (many units at once).

    Parameters
    ----------
    params : CoolerParams
    cold_temp_c, hot_temp_c : float or ndarray
        States at the start of the tick, degree Celsius.
    current_a : float or ndarray
        Drive current over the tick, ampere (positive cools the plate).
    ambient_temp_c : float or ndarray
        Air around the module (the enclosure), degree Celsius, held over the tick.
    tick_s : float
        Second.
    substeps : int, optional
        Heun sub-steps (default :func:`cooler_substeps`).

    Returns
    -------
    CoolerTick
    """
    p = params
    n = substeps or cooler_substeps(p, tick_s)
    h = tick_s / n
    s, r, k = p.seebeck_v_per_k, p.resistance_ohm, p.conductance_w_per_k
    g, per_rs = p.cold_leak_conductance_w_per_k, 1.0 / p.sink_resistance_k_per_w
    hc, hh, load = h / p.cold_heat_capacity_j_per_k, h / p.hot_heat_capacity_j_per_k, p.cold_heat_load_w
    tc, th, i, ta = cold_temp_c, hot_temp_c, current_a, ambient_temp_c
    si = s * i
    joule = 0.5 * r * i * i
    ri = r * i
    sum_qc = sum_qh = sum_leak = sum_sink = sum_power = 0.0
    for _ in range(n):
        # fluxes at the start of the sub-step ...
        cond = k * (th - tc)
        qc1 = si * (tc + ZERO_C_IN_K) - joule - cond
        qh1 = si * (th + ZERO_C_IN_K) + joule - cond
        leak1 = g * (ta - tc)
        sink1 = (th - ta) * per_rs
        p1 = i * (s * (th - tc) + ri)  # terminal voltage times current, computed on its own
        tc1 = tc + hc * (load + leak1 - qc1)
        th1 = th + hh * (qh1 - sink1)
        # ... and at the predicted end (Heun)
        cond = k * (th1 - tc1)
        qc = 0.5 * (qc1 + si * (tc1 + ZERO_C_IN_K) - joule - cond)
        qh = 0.5 * (qh1 + si * (th1 + ZERO_C_IN_K) + joule - cond)
        leak = 0.5 * (leak1 + g * (ta - tc1))
        sink = 0.5 * (sink1 + (th1 - ta) * per_rs)
        power = 0.5 * (p1 + i * (s * (th1 - tc1) + ri))
        tc = tc + hc * (load + leak - qc)
        th = th + hh * (qh - sink)
        sum_qc, sum_qh, sum_leak, sum_sink, sum_power = (sum_qc + qc, sum_qh + qh, sum_leak + leak,
                                                         sum_sink + sink, sum_power + power)
    return CoolerTick(tc, th, sum_qc / n, sum_qh / n, sum_power / n, sum_leak / n, sum_sink / n, float(load))
