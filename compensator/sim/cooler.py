"""The thermoelectric cooler on its nonlinear heat balance, one control tick at a time, for many units.

The heat balance (lumped module, common practice; the same equations as
:func:`compensator.loops.plants.cooler_derivatives`)::

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


def _fluxes(p, tc, th, i, ta):
    s, r, k = p.seebeck_v_per_k, p.resistance_ohm, p.conductance_w_per_k
    joule = 0.5 * r * i * i
    cond = k * (th - tc)
    qc = s * i * (tc + ZERO_C_IN_K) - joule - cond
    qh = s * i * (th + ZERO_C_IN_K) + joule - cond
    leak = p.cold_leak_conductance_w_per_k * (ta - tc)
    sink = (th - ta) / p.sink_resistance_k_per_w
    power = i * (s * (th - tc) + i * r)  # terminal voltage times current, computed on its own
    return qc, qh, leak, sink, power


def cooler_tick(params, cold_temp_c, hot_temp_c, current_a, ambient_temp_c, tick_s: float,
                substeps: int | None = None) -> CoolerTick:
    """Advance the cooler one tick at a held current.

    Parameters
    ----------
    params : CoolerParams
    cold_temp_c, hot_temp_c : array_like
        States at the start of the tick, degree Celsius.
    current_a : array_like
        Drive current over the tick, ampere (positive cools the plate).
    ambient_temp_c : array_like
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
    # Plain arithmetic only: Python floats stay floats (fast for one unit), arrays stay arrays.
    tc, th, i, ta = cold_temp_c, hot_temp_c, current_a, ambient_temp_c
    cc, ch, load = p.cold_heat_capacity_j_per_k, p.hot_heat_capacity_j_per_k, p.cold_heat_load_w
    sums = [0.0] * 5
    for _ in range(n):
        f1 = _fluxes(p, tc, th, i, ta)
        tc1 = tc + h * (load + f1[2] - f1[0]) / cc
        th1 = th + h * (f1[1] - f1[3]) / ch
        f2 = _fluxes(p, tc1, th1, i, ta)
        qc, qh, leak, sink, power = (0.5 * (a + b) for a, b in zip(f1, f2))
        tc = tc + h * (load + leak - qc) / cc
        th = th + h * (qh - sink) / ch
        sums = [acc + v for acc, v in zip(sums, (qc, qh, leak, sink, power))]
    qc, qh, leak, sink, power = (v / n for v in sums)
    return CoolerTick(tc, th, qc, qh, power, leak, sink, float(load))
