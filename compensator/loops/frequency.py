"""Frequency-domain figures of the sampled loop: frequency grids, the maximum sensitivity Ms, the ultimate point.

Ms is ``1 / min |1 + L|`` on a dense frequency grid up to the Nyquist
frequency; the ultimate gain and period are where the plant's phase
(continuous, or sampled with a zero-order hold, its exact dead time and the
computation delay) reaches -180 degrees, bisected between grid points.
"""

from __future__ import annotations

import math

import numpy as np

from compensator.errors import ModelError
from compensator.loops.controller import PidGains, controller_frequency_response
from compensator.loops.plants import Plant
from compensator.loops.sampled import (
    continuous_frequency_response,
    discrete_frequency_evaluator,
    discrete_frequency_response,
    state_space_arrays,
)

__all__ = ["frequency_grid", "loop_frequency_grid", "max_sensitivity", "ultimate_point"]


def frequency_grid(sample_time_s: float, points: int = 4000, decades: float = 6.0):
    """Log-spaced angular frequencies up to just below the Nyquist frequency.

    Parameters
    ----------
    sample_time_s : float
        Period T, second (Nyquist frequency pi/T).
    points : int
    decades : float
        Span below the Nyquist frequency.

    Returns
    -------
    ndarray
        Angular frequencies, rad/s.
    """
    nyq = math.pi / sample_time_s
    return np.logspace(math.log10(nyq) - decades, math.log10(nyq * 0.9999), points)


def loop_frequency_grid(plant: Plant, sample_time_s: float, points: int = 6000, decades: float = 7.0):
    """Like :func:`frequency_grid`, extended downwards to cover the plant's slowest dynamics.

    The grid reaches at least a hundredth of ``1 / (dead time + time constants)``
    so that slow plants sampled fast keep their crossover on the grid; the
    density per decade stays that of ``points`` over ``decades``.

    Parameters
    ----------
    plant : Plant
    sample_time_s : float
        Period T, second.
    points : int
        Points over ``decades`` decades.
    decades : float
        Least span below the Nyquist frequency.

    Returns
    -------
    ndarray
        Angular frequencies, rad/s.
    """
    a = state_space_arrays(plant.system)[0]
    poles = np.linalg.eigvals(a) if a.size else np.array([])
    slow = plant.dead_time_s + float(np.sum(1.0 / np.abs(poles[np.abs(poles) > 0]))) if poles.size else \
        plant.dead_time_s
    nyq = math.pi / sample_time_s
    span = decades
    if slow > 0:
        span = max(decades, math.log10(nyq * slow / 0.01))
    span = min(span, 3.0 * decades)
    return frequency_grid(sample_time_s, int(points * span / decades), span)


def max_sensitivity(plant: Plant, gains: PidGains, sample_time_s: float, computation_delay_samples: int = 1,
                    omega_rad_s=None):
    """Ms = 1 / min |1 + L| over a dense grid, and the frequency of the peak.

    Parameters
    ----------
    plant : Plant
    gains : PidGains
    sample_time_s : float
    computation_delay_samples : int
    omega_rad_s : array_like, optional
        Grid (default: :func:`loop_frequency_grid` with 4000 points per 6 decades).

    Returns
    -------
    ms : float
    omega_peak_rad_s : float
    """
    w = loop_frequency_grid(plant, sample_time_s, 4000, 6.0) if omega_rad_s is None else np.asarray(omega_rad_s, dtype=float)
    p = discrete_frequency_response(plant, sample_time_s, w, computation_delay_samples)
    dist = np.abs(1.0 + controller_frequency_response(gains, sample_time_s, w) * p)
    k = int(np.argmin(dist))
    return float(1.0 / dist[k]), float(w[k])


# ---------------------------------------------------------------- ultimate point
def ultimate_point(plant: Plant, sample_time_s: float | None = None, computation_delay_samples: int = 1):
    """Ultimate gain and period: where the plant's phase reaches -180 degrees.

    Parameters
    ----------
    plant : Plant
    sample_time_s : float or None
        With a period, the discretised plant (ZOH, exact delay, computation
        delay); with None, the continuous plant with its exact dead time.
    computation_delay_samples : int

    Returns
    -------
    ultimate_gain : float
        Ku, signed like the plant gain (proportional gain that puts the loop
        at the stability limit).
    ultimate_period_s : float
        Pu, second.
    """
    sign = 1.0 if plant.dc_gain >= 0 else -1.0
    if sample_time_s is None:
        def resp(w):
            return sign * continuous_frequency_response(plant, w)
        poles = np.linalg.eigvals(np.atleast_2d(np.asarray(plant.system.A, float)))
        fast = float(np.max(np.abs(poles))) if poles.size else 1.0
        hi = max(100.0 * fast, 100.0 / plant.dead_time_s if plant.dead_time_s else 100.0 * fast)
        w = np.logspace(math.log10(hi) - 8, math.log10(hi), 20000)
    else:
        w = frequency_grid(sample_time_s, 20000, 8.0)
        raw = discrete_frequency_evaluator(plant, sample_time_s, computation_delay_samples)

        def resp(w):
            return sign * raw(w)
    ph = np.unwrap(np.angle(resp(w)))
    below = np.flatnonzero(ph <= -math.pi)
    if below.size == 0 and sample_time_s is not None:
        # A sampled loop may reach -180 degrees exactly at the Nyquist frequency (e.g. a static gain behind
        # one sample of delay), where the response is real.
        at_nyquist = resp(np.array([math.pi / sample_time_s]))[0]
        if at_nyquist.real < 0 and abs(at_nyquist.imag) <= 1e-9 * abs(at_nyquist):
            return sign / abs(at_nyquist), 2.0 * sample_time_s
    if below.size == 0:
        raise ModelError("the plant's phase never reaches -180 degrees: no ultimate gain (any proportional gain is "
                         "stable)")
    k = below[0]
    if k == 0:
        raise ModelError("the plant's phase is below -180 degrees at the lowest frequency: no ultimate gain")
    lo, hi_ = w[k - 1], w[k]
    ph_lo = ph[k - 1]
    for _ in range(60):  # bisection on the unwrapped phase between two grid points
        mid = math.sqrt(lo * hi_)
        p_mid = ph_lo + np.angle(resp(np.array([mid]))[0] / resp(np.array([lo]))[0])
        if p_mid <= -math.pi:
            hi_ = mid
        else:
            lo, ph_lo = mid, p_mid
    wu = math.sqrt(lo * hi_)
    ku = 1.0 / abs(resp(np.array([wu]))[0])
    return sign * ku, 2.0 * math.pi / wu
