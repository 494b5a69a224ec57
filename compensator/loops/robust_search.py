"""The robust PI/PID search: the largest integral gain with ``Ms <= Ms_max`` on the discretised loop.

For every proportional (and derivative) gain on a grid, a vectorised bisection on ln(ki) finds the largest
integral gain whose loop keeps the bound on every plant given (the MIGO idea of Astrom, Panagopoulos and
Hagglund, Automatica 34, 585, 1998, from memory); :mod:`compensator.loops.tuning` calls it as the ``robust``
method and re-exports these names.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import NamedTuple

import numpy as np

from compensator.errors import ModelError
from compensator.loops.choices import DEFAULT_MS
from compensator.loops.controller import PidGains, controller_frequency_response
from compensator.loops.frequency import loop_frequency_grid, max_sensitivity, ultimate_point
from compensator.loops.plants import Plant
from compensator.loops.sampled import discrete_frequency_response
from compensator.loops.tuning_rules import _check_ms, _with_dead_time, amigo, sampling_dead_time_s, simc
from compensator.loops.verify import closed_loop_stable

__all__ = ["robust"]


class _LoopParts(NamedTuple):
    """``1 + L = fixed + ki * per_ki`` for a batch of controllers, as real and imaginary parts."""

    fixed_re: np.ndarray
    fixed_im: np.ndarray
    per_ki_re: np.ndarray
    per_ki_im: np.ndarray


def _loop_parts(p_resp, w, T, kp, kd, n) -> _LoopParts:
    """``1 + L`` of controllers (arrays kp, kd of one shape) split as ``fixed + ki * per_ki``.

    ``p_resp`` has shape ``(plants, len(w))``. The integral term of the
    discrete PID is ``ki T q / (1 - q)`` (``q = exp(-j omega T)``), linear in
    ki, so a bisection on ki reuses ``fixed`` (one plus the proportional and
    derivative terms times the plant, shape ``kp.shape + p_resp.shape``) and
    ``per_ki`` (shape ``p_resp.shape``).
    """
    gains = PidGains(kp, 0.0, kd, n)
    fixed = 1.0 + controller_frequency_response(gains, T, w)[..., None, :] * p_resp
    q = np.exp(-1j * w * T)
    per_ki = (T * q / (1.0 - q)) * p_resp
    return _LoopParts(np.ascontiguousarray(fixed.real), np.ascontiguousarray(fixed.imag),
                      np.ascontiguousarray(per_ki.real), np.ascontiguousarray(per_ki.imag))


def _feasible_batch(parts: _LoopParts, ki, ms_max):
    """Whether each controller keeps Ms <= ms_max on every plant (see :func:`_loop_parts`).

    ``ki`` has the controllers' shape. The Ms bound alone admits some
    unstable loops (a Nyquist curve can pass far outside -1 on the wrong
    side), so a controller is also rejected when its loop crosses the
    negative real axis left of -1 (the grid must end at the Nyquist
    frequency).

    With ``a = 1 + L`` the bound is ``min |a|^2 >= 1 / Ms^2``. Between two
    grid points where ``Im a`` changes sign the chord meets the real axis at
    ``Re a = (Im a0 Re a1 - Im a1 Re a0) / (Im a0 - Im a1)``, left of -1 on
    the ``L`` plane when that is negative: the sign of the product of
    numerator and denominator decides, without a division.
    """
    k = ki[..., None, None]
    re = parts.per_ki_re * k
    re += parts.fixed_re
    im = parts.per_ki_im * k
    im += parts.fixed_im
    dist2 = re * re
    dist2 += im * im
    ms_ok = np.min(dist2, axis=-1) >= 1.0 / (ms_max * ms_max)
    im0, im1, re0, re1 = im[..., :-1], im[..., 1:], re[..., :-1], re[..., 1:]
    cross = im0 * im1 <= 0
    side = im0 * re1
    side -= im1 * re0
    side *= im0 - im1
    cross &= side < 0
    outside = np.any(cross, axis=-1)
    # The Nyquist curve of a sampled loop meets the real axis again at the Nyquist frequency (the last point).
    outside |= re[..., -1] < 0.0
    return np.all(ms_ok & ~outside, axis=1)


#: Bisection steps on ln(ki) over a span of 30: the largest ki is found to within 30 / 2**17, 0.023 %.
_BISECTION_STEPS = 17


def _max_ki(p_resp, w, T, kp, kd, n, sign, ms_max, ki_hi):
    """Largest |ki| (bisection in log space, vectorised) with Ms <= ms_max for each (kp, kd); 0 if none.

    Controllers that miss the bound even at the smallest ki searched get 0 at
    once; only the others are bisected (on a PID grid most are out).
    """
    shape = kp.shape
    parts = _loop_parts(p_resp, w, T, kp.ravel(), kd.ravel(), n)
    top = math.log(ki_hi)
    live = np.flatnonzero(_feasible_batch(parts, np.full(kp.size, sign * math.exp(top - 30.0)), ms_max))
    parts = parts._replace(fixed_re=parts.fixed_re[live], fixed_im=parts.fixed_im[live])
    lo = np.full(live.size, top - 30.0)
    hi = np.full(live.size, top)
    for _ in range(_BISECTION_STEPS):
        mid = 0.5 * (lo + hi)
        ok = _feasible_batch(parts, sign * np.exp(mid), ms_max)
        lo = np.where(ok, mid, lo)
        hi = np.where(ok, hi, mid)
    best = np.zeros(kp.size)
    best[live] = np.exp(lo)
    return best.reshape(shape)


def robust(plant: Plant, sample_time_s: float, ms_max: float = DEFAULT_MS, *, pid: bool = False,
           computation_delay_samples: int = 1, derivative_filter_n: float = 10.0,
           reference: PidGains | None = None, also_plants=()) -> PidGains:
    """Gains that maximise the integral gain subject to ``Ms <= ms_max`` on the discretised loop.

    For every proportional (and derivative) gain on a grid the largest
    integral gain meeting the bound is found by bisection; the best point is
    refined on a finer grid, checked for closed-loop stability, and its Ms
    confirmed on a dense grid.

    Parameters
    ----------
    plant : Plant
    sample_time_s : float
        Firmware period, second.
    ms_max : float
        Bound on the maximum sensitivity (> 1).
    pid : bool
        Optimise a derivative gain too.
    computation_delay_samples : int
    derivative_filter_n : float
    reference : PidGains, optional
        A rule's gains that set the search scale (default: SIMC on a fitted FOPDT).
    also_plants : sequence of Plant
        More plants the same gains must satisfy (e.g. the cooler linearised
        over the field's ambient range): the bound holds on every one.

    Returns
    -------
    PidGains
    """
    _check_ms(ms_max)
    T = float(sample_time_s)
    every = (plant, *also_plants)
    dc_gains = [p.dc_gain for p in every]
    if not all(dc_gains):
        raise ModelError("a plant has zero static gain: integral action cannot hold a setpoint on it")
    signs = {math.copysign(1.0, g) for g in dc_gains}
    if len(signs) > 1:
        raise ModelError("the plants disagree in the sign of their gain: no single controller suits them all")
    (sign,) = signs
    w = np.append(loop_frequency_grid(plant, T, 700, 6.0), math.pi / T)  # include Nyquist, where sampled loops often cross
    p_resp = np.array([discrete_frequency_response(p, T, w, computation_delay_samples) for p in every])
    # The grid of proportional gains spans up to the smallest ultimate gain.
    kp_grid_max = min(abs(ultimate_point(p, T, computation_delay_samples)[0]) for p in every)
    # Only the reference's magnitudes set the scale.
    ref_model = None
    if reference is None:
        from compensator.loops.identify import approximate_plant

        try:
            ref_model = _with_dead_time(approximate_plant(plant), sampling_dead_time_s(T, computation_delay_samples))
        except ModelError:  # a static plant: scale the search by its ultimate gain alone (ki_hi needs no ki)
            reference = PidGains(0.2 * kp_grid_max, 0.0)
        else:
            reference = simc(ref_model)[0]
    ki_hi = 1e3 * max(abs(reference.ki_per_s), kp_grid_max / T)
    if pid:
        ref_kd = abs((reference if ref_model is None else amigo(ref_model, pid=True)).kd_s)
        kd_max = 4.0 * max(ref_kd, abs(reference.kp) * T)
        kp_axis = np.linspace(0.0, 1.5 * kp_grid_max, 26)[1:]
        kd_axis = np.linspace(0.0, kd_max, 17)
        KP, KD = np.broadcast_arrays(kp_axis[:, None], kd_axis)
    else:
        KP = np.linspace(0.0, kp_grid_max, 121)[1:]
        KD = np.zeros_like(KP)
    KP, KD = sign * KP, sign * KD
    ki = _max_ki(p_resp, w, T, KP, KD, derivative_filter_n, sign, ms_max, ki_hi)
    # Refine around the best few points on a finer grid, then take the best that is closed-loop stable.
    order = np.argsort(ki, axis=None)[::-1]
    dkp = (1.5 * kp_grid_max / 25.0 if pid else kp_grid_max / 120.0)  # one step of the coarse grid
    dense = loop_frequency_grid(plant, T, 20000)  # the dense grid of the final check
    for flat in order[:12]:
        if ki.flat[flat] <= 0:
            break
        kp0, kd0 = KP.flat[flat], KD.flat[flat]
        kps = sign * np.linspace(max(abs(kp0) - dkp, 1e-12 * kp_grid_max), abs(kp0) + dkp, 15 if pid else 21)
        if pid:
            dkd = kd_max / 16.0
            kds = sign * np.linspace(max(abs(kd0) - dkd, 0.0), abs(kd0) + dkd, 9)
            kpf, kdf = np.broadcast_arrays(kps[:, None], kds)
        else:
            kpf, kdf = kps, np.zeros_like(kps)
        kif = _max_ki(p_resp, w, T, kpf, kdf, derivative_filter_n, sign, ms_max, ki_hi)
        cand = None
        for j in np.argsort(kif, axis=None)[::-1][:5]:
            trial = PidGains(float(kpf.flat[j]), float(sign * kif.flat[j]), float(kdf.flat[j]), derivative_filter_n)
            if kif.flat[j] > 0 and all(closed_loop_stable(p, trial, T, computation_delay_samples=computation_delay_samples) for p in every):
                cand = trial
                break
        if cand is None:
            continue
        # Confirm on the dense grid; shrink ki until the bound holds there too.
        for _ in range(60):
            ms = max(max_sensitivity(p, cand, T, computation_delay_samples, dense)[0] for p in every)
            if ms <= ms_max * (1 + 1e-6):
                return cand
            cand = replace(cand, ki_per_s=cand.ki_per_s * 0.995)
    raise ModelError(f"no PI{'D' if pid else ''} gains reach Ms <= {ms_max:g} on this loop (the sampling and "
                     "dead time may leave too little phase; raise --ms or the rate)")
