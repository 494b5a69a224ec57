"""PID tuning: published rules on a low-order model, and a robust optimiser on the real loop.

All gains are in parallel form, ``u = kp e + ki integral(e) + kd de/dt``, and
carry the sign of the plant gain (a cooler, whose temperature falls as the
current rises, gets negative gains).

Rules (FOPDT ``K, tau, theta``; SOPDT ``K, tau1, tau2, theta``):

* ``simc`` -- Skogestad, J. Process Control 13, 291, 2003:
  ``Kc = tau1 / (K (tau_c + theta))``, ``Ti = min(tau1, 4 (tau_c + theta))``,
  PID (SOPDT only) adds ``Td = tau2`` in series form; ``tau_c = theta`` by
  default. A SOPDT used for PI is reduced by the half rule.
* ``amigo`` -- Astrom and Hagglund, J. Process Control 14, 635, 2004:
  PI ``K = 0.15/Kp + (0.35 - L T / (L + T)^2) T / (Kp L)``,
  ``Ti = 0.35 L + 13 L T^2 / (T^2 + 12 L T + 7 L^2)``;
  PID ``K = (0.2 + 0.45 T / L) / Kp``, ``Ti = L (0.4 L + 0.8 T) / (L + 0.1 T)``,
  ``Td = 0.5 L T / (0.3 L + T)`` (PID formulas from memory).
* ``imc`` -- Rivera, Morari and Skogestad, Ind. Eng. Chem. Process Des. Dev.
  25, 252, 1986 (from memory): PI ``Kc = (2 tau + theta) / (2 K lambda)``,
  ``Ti = tau + theta / 2``; PID ``Kc = (2 tau + theta) / (K (2 lambda + theta))``,
  ``Ti = tau + theta / 2``, ``Td = tau theta / (2 tau + theta)``; default
  ``lambda = 1.7 theta`` (PI) or ``0.8 theta`` (PID), at least ``0.1 tau``.
* ``zn`` -- Ziegler and Nichols, Trans. ASME 64, 759, 1942, step-response
  rule with ``a = K theta / tau``: PI ``0.9 / a, Ti = 3 theta``; PID
  ``1.2 / a, Ti = 2 theta, Td = theta / 2`` (table as in Astrom and
  Hagglund's PID books, from memory).
* ``zn-cycle`` -- Ziegler and Nichols 1942, ultimate-cycle rule from the
  model's exact ultimate gain and period: PI ``0.45 Ku, Ti = Pu / 1.2``;
  PID ``0.6 Ku, Ti = Pu / 2, Td = Pu / 8``.
* ``robust`` -- maximise the integral gain subject to ``Ms <= Ms_max``
  (default 1.4), Ms evaluated on the discretised loop (the MIGO idea of
  Astrom, Panagopoulos and Hagglund, Automatica 34, 585, 1998, from memory).

Sampling: the rules are continuous-time; a loop sampled every ``T`` with a
zero-order hold and one sample of computation delay behaves like one with
``T / 2 + T`` more dead time (common practice; Skogestad 2003 adds ``T / 2``
for the hold). The rules use that *effective* dead time unless told not to.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import NamedTuple

import numpy as np

from compensator.errors import ModelError
from compensator.loops._blas import one_blas_thread
from compensator.loops.choices import DEFAULT_MS, METHODS
from compensator.loops.plants import FopdtModel, Plant, SopdtModel
from compensator.loops.sampled import discrete_frequency_response
from compensator.loops.verify import (
    PidGains,
    closed_loop_stable,
    controller_frequency_response,
    frequency_grid,
    loop_frequency_grid,
    max_sensitivity,
    ultimate_point,
)

__all__ = [
    "METHODS", "DEFAULT_MS", "TuningResult", "sampling_dead_time_s", "simc", "amigo", "imc",
    "ziegler_nichols_step", "ziegler_nichols_ultimate", "ms_point_ultimate", "fopdt_from_ultimate", "robust",
    "tune",
]


@dataclass(frozen=True)
class TuningResult:
    """Gains and how they were obtained.

    Attributes
    ----------
    gains : PidGains
    method : str
    pid : bool
    model : FopdtModel or SopdtModel or None
        The low-order model the rule used (continuous, before sampling delay).
    rule_dead_time_s : float
        Dead time the rule saw (the model's plus the sampling delay), second.
    closed_loop_time_constant_s : float or None
        tau_c (SIMC) or lambda (IMC), second.
    ultimate_gain, ultimate_period_s : float or None
        Ku and Pu (``zn-cycle``).
    ms_target : float or None
        Ms bound (``robust``).
    """

    gains: PidGains
    method: str
    pid: bool
    model: object = None
    rule_dead_time_s: float = 0.0
    closed_loop_time_constant_s: float | None = None
    ultimate_gain: float | None = None
    ultimate_period_s: float | None = None
    ms_target: float | None = None


#: Largest Ms bound accepted: above it the bound no longer restrains the loop (common practice: 1.2 to 2).
MAX_MS = 10.0


def _check_ms(ms_max):
    if not (np.isfinite(ms_max) and 1.0 < ms_max <= MAX_MS):
        raise ModelError(f"must exceed 1 and be at most {MAX_MS:g} (1.4 is robust, 2 aggressive; a larger bound no "
                         f"longer restrains the loop), got {ms_max:g}", key="ms_max")


def sampling_dead_time_s(sample_time_s: float, computation_delay_samples: int = 1) -> float:
    """Dead time a ZOH plus computation delay add: ``T / 2 + n T`` (common practice), second."""
    return sample_time_s * (0.5 + computation_delay_samples)


def _as_fopdt(model) -> FopdtModel:
    return model.half_rule_fopdt() if isinstance(model, SopdtModel) else model


def _with_dead_time(model, extra_s):
    return replace(model, dead_time_s=model.dead_time_s + extra_s)


def _check_model(model):
    if model.gain == 0 or not np.isfinite(model.gain):
        raise ModelError("the model gain must be finite and nonzero")
    if not model.time_constant_s > 0:
        raise ModelError("the model time constant must be positive")


def simc(model, *, pid: bool = False, tau_c_s: float | None = None) -> tuple[PidGains, float]:
    """SIMC gains (Skogestad, J. Process Control 13, 291, 2003).

    Parameters
    ----------
    model : FopdtModel or SopdtModel
        Dead time already including any sampling delay.
    pid : bool
        PID needs a SOPDT (``Td = tau2``, series form converted to parallel).
    tau_c_s : float, optional
        Desired closed-loop time constant (default: the dead time), second.

    Returns
    -------
    gains : PidGains
    tau_c_s : float
    """
    _check_model(model)
    if pid:
        if not isinstance(model, SopdtModel) or model.time_constant2_s <= 0:
            raise ModelError("SIMC PID needs a second-order model (tau2 > 0): give --sopdt, or tune a PI")
        k, t1, t2, theta = model.gain, model.time_constant_s, model.time_constant2_s, model.dead_time_s
    else:
        f = _as_fopdt(model)
        k, t1, t2, theta = f.gain, f.time_constant_s, 0.0, f.dead_time_s
    tc = theta if tau_c_s is None else float(tau_c_s)
    if tc + theta <= 0:
        raise ModelError("SIMC needs tau_c + theta > 0: the model has no dead time, give --tau-c")
    kc = t1 / (k * (tc + theta))
    ti = min(t1, 4.0 * (tc + theta))
    if t2 > 0:  # series -> parallel
        return PidGains(kc * (1.0 + t2 / ti), kc / ti, kc * t2), tc
    return PidGains(kc, kc / ti), tc


def amigo(model, *, pid: bool = False) -> PidGains:
    """AMIGO gains (Astrom and Hagglund, J. Process Control 14, 635, 2004).

    Parameters
    ----------
    model : FopdtModel or SopdtModel
        A SOPDT is reduced by the half rule.
    pid : bool

    Returns
    -------
    PidGains
    """
    _check_model(model)
    f = _as_fopdt(model)
    kp_, T, L = f.gain, f.time_constant_s, f.dead_time_s
    if L <= 0:
        raise ModelError("AMIGO needs a positive dead time")
    if pid:
        k = (0.2 + 0.45 * T / L) / kp_
        ti = L * (0.4 * L + 0.8 * T) / (L + 0.1 * T)
        td = 0.5 * L * T / (0.3 * L + T)
        return PidGains(k, k / ti, k * td)
    k = 0.15 / kp_ + (0.35 - L * T / (L + T) ** 2) * T / (kp_ * L)
    ti = 0.35 * L + 13.0 * L * T ** 2 / (T ** 2 + 12.0 * L * T + 7.0 * L ** 2)
    return PidGains(k, k / ti)


def imc(model, *, pid: bool = False, lambda_s: float | None = None) -> tuple[PidGains, float]:
    """IMC gains for a FOPDT (Rivera, Morari and Skogestad 1986, from memory).

    Parameters
    ----------
    model : FopdtModel or SopdtModel
        A SOPDT is reduced by the half rule.
    pid : bool
    lambda_s : float, optional
        Closed-loop time constant lambda, second.

    Returns
    -------
    gains : PidGains
    lambda_s : float
    """
    _check_model(model)
    f = _as_fopdt(model)
    k, tau, theta = f.gain, f.time_constant_s, f.dead_time_s
    lam = lambda_s if lambda_s is not None else max((0.8 if pid else 1.7) * theta, 0.1 * tau)
    if lam <= 0:
        raise ModelError("IMC lambda must be positive")
    ti = tau + theta / 2.0
    if pid:
        kc = (2.0 * tau + theta) / (k * (2.0 * lam + theta))
        td = tau * theta / (2.0 * tau + theta)
        return PidGains(kc, kc / ti, kc * td), lam
    kc = (2.0 * tau + theta) / (2.0 * k * lam)
    return PidGains(kc, kc / ti), lam


def ziegler_nichols_step(model, *, pid: bool = False) -> PidGains:
    """Ziegler-Nichols step-response rule (Trans. ASME 64, 759, 1942) with ``a = K theta / tau``."""
    _check_model(model)
    f = _as_fopdt(model)
    if f.dead_time_s <= 0:
        raise ModelError("the Ziegler-Nichols step rule needs a positive dead time")
    a = f.gain * f.dead_time_s / f.time_constant_s
    L = f.dead_time_s
    if pid:
        k = 1.2 / a
        return PidGains(k, k / (2.0 * L), k * L / 2.0)
    k = 0.9 / a
    return PidGains(k, k / (3.0 * L))


def ziegler_nichols_ultimate(ultimate_gain: float, ultimate_period_s: float, *, pid: bool = False) -> PidGains:
    """Ziegler-Nichols ultimate-cycle rule (1942): PI 0.45 Ku, Pu/1.2; PID 0.6 Ku, Pu/2, Pu/8.

    Parameters
    ----------
    ultimate_gain : float
        Ku (signed like the plant gain).
    ultimate_period_s : float
        Pu, second.
    pid : bool

    Returns
    -------
    PidGains
    """
    if ultimate_gain == 0 or not ultimate_period_s > 0:
        raise ModelError("the ultimate gain must be nonzero and the ultimate period positive")
    if pid:
        k = 0.6 * ultimate_gain
        return PidGains(k, k / (ultimate_period_s / 2.0), k * ultimate_period_s / 8.0)
    k = 0.45 * ultimate_gain
    return PidGains(k, k / (ultimate_period_s / 1.2))


def ms_point_ultimate(ultimate_gain: float, ultimate_period_s: float, ms_max: float = DEFAULT_MS) -> PidGains:
    """A PI from Ku and Pu alone that puts the loop's ultimate point on the Ms circle.

    The Ziegler-Nichols PI (``Ti = Pu / 1.2``) keeps its integral time; its
    gain is lowered so that the loop at the ultimate frequency,
    ``L = -(kp / Ku) (1 - j / (omega_u Ti))``, lies on ``|1 + L| = 1 / Ms``
    (moving one point of the Nyquist curve, as the modified Ziegler-Nichols
    method does; Astrom and Hagglund, PID Controllers, 1995, from memory).
    With ``r = 1 / (omega_u Ti)`` and ``x = kp / Ku``,
    ``(1 + r^2) x^2 - 2 x + 1 - 1 / Ms^2 = 0``, smaller root (for a bound
    so loose that the ray never comes within ``1 / Ms`` of -1, Ms above
    ``sqrt(1 + r^2) / r``, about 5.3, the point closest to -1). One point only:
    the bound holds at the ultimate frequency, not necessarily elsewhere;
    verify on a model.

    Parameters
    ----------
    ultimate_gain : float
        Ku, signed like the plant gain.
    ultimate_period_s : float
        Pu, second.
    ms_max : float
        Ms bound (> 1).

    Returns
    -------
    PidGains
    """
    if not (np.isfinite(ultimate_gain) and ultimate_gain != 0 and np.isfinite(ultimate_period_s)
            and ultimate_period_s > 0):
        raise ModelError("the ultimate gain must be finite and nonzero and the ultimate period positive")
    _check_ms(ms_max)
    ti = ultimate_period_s / 1.2
    r = ultimate_period_s / (2.0 * math.pi * ti)
    q = 1.0 + r * r
    # Below zero the ray never comes within 1 / Ms of -1 (Ms above sqrt(q) / r, about 5.3): the closest point, x = 1 / q.
    x = (1.0 - math.sqrt(max(1.0 - q * (1.0 - 1.0 / ms_max ** 2), 0.0))) / q
    kp = x * ultimate_gain
    return PidGains(kp, kp / ti)


def fopdt_from_ultimate(static_gain: float, ultimate_gain: float, ultimate_period_s: float) -> FopdtModel:
    """The FOPDT ``K exp(-theta s) / (tau s + 1)`` whose ultimate point is (Ku, Pu).

    At ``omega_u = 2 pi / Pu`` the FOPDT has ``|G| = 1 / |Ku|`` and phase
    -180 degrees: ``K Ku = sqrt(1 + (omega_u tau)^2)`` and
    ``omega_u theta + atan(omega_u tau) = pi``.

    Parameters
    ----------
    static_gain : float
        K, output units per input unit.
    ultimate_gain : float
        Ku, input units per output unit, same sign as K.
    ultimate_period_s : float
        Pu, second.

    Returns
    -------
    FopdtModel

    Raises
    ------
    ModelError
        The signs differ, or ``|K Ku| <= 1`` (no FOPDT reaches -180 degrees with that gain).
    """
    for key, value in (("static_gain", static_gain), ("ultimate_gain", ultimate_gain),
                       ("ultimate_period_s", ultimate_period_s)):
        if not np.isfinite(value) or value == 0:
            raise ModelError(f"must be finite and nonzero, got {value!r}", key=key)
    if ultimate_period_s <= 0:
        raise ModelError(f"must be positive, got {ultimate_period_s!r}", key="ultimate_period_s")
    kk = static_gain * ultimate_gain
    if kk <= 1.0:
        raise ModelError(f"K Ku = {kk:.4g} must exceed 1 (same sign, and a loop gain that needs more than K to "
                         "oscillate); check the signs and units of the static and ultimate gains",
                         key="static_gain")
    wu = 2.0 * math.pi / ultimate_period_s
    tau = math.sqrt(kk * kk - 1.0) / wu
    theta = (math.pi - math.atan(wu * tau)) / wu
    return FopdtModel(float(static_gain), tau, theta)


# ---------------------------------------------------------------- robust optimiser
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
    gains = PidGains(kp, np.zeros_like(kp), kd, n)
    fixed = 1.0 + controller_frequency_response(gains, T, w)[..., None, :] * p_resp
    q = np.exp(-1j * np.asarray(w, dtype=float) * T)
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
    k = np.asarray(ki, dtype=float)[..., None, None]
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
    return np.all(ms_ok & ~outside, axis=-1)


#: Bisection steps on ln(ki) over a span of 30: the largest ki is found to within 30 / 2**17, 0.023 %.
_BISECTION_STEPS = 17


def _max_ki(p_resp, w, T, kp, kd, n, sign, ms_max, ki_hi):
    """Largest |ki| (bisection in log space, vectorised) with Ms <= ms_max for each (kp, kd); 0 if none.

    Controllers that miss the bound even at the smallest ki searched get 0 at
    once; only the others are bisected (on a PID grid most are out).
    """
    kp = np.asarray(kp, float)
    kd = np.asarray(kd, float)
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
    sign = 1.0 if plant.dc_gain >= 0 else -1.0
    every = (plant, *also_plants)
    if any((p.dc_gain >= 0) != (sign > 0) for p in every):
        raise ModelError("the plants disagree in the sign of their gain: no single controller suits them all")
    w = np.append(loop_frequency_grid(plant, T, 700, 6.0), math.pi / T)  # include Nyquist, where sampled loops often cross
    p_resp = np.array([discrete_frequency_response(p, T, w, computation_delay_samples) for p in every])
    # The grid of proportional gains spans up to the smallest ultimate gain.
    kp_grid_max = min(abs(ultimate_point(p, T, computation_delay_samples)[0]) for p in every)
    if reference is None:
        from compensator.loops.identify import approximate_plant

        try:
            ref_model = _with_dead_time(approximate_plant(plant), sampling_dead_time_s(T, computation_delay_samples))
        except ModelError:  # a static plant: scale the search by its ultimate gain alone
            reference = PidGains(0.2 * sign * kp_grid_max, 0.05 * sign * kp_grid_max / T)
            ref_kd = 0.0
        else:
            reference = simc(ref_model)[0]
            ref_kd = abs(amigo(ref_model, pid=True).kd_s) if pid else 0.0
    else:
        ref_kd = abs(reference.kd_s)
    ki_hi = 1e3 * max(abs(reference.ki_per_s), abs(kp_grid_max) / T)
    if pid:
        kd_max = 4.0 * max(ref_kd, abs(reference.kp) * T)
        kp_axis = np.linspace(0.0, 1.5 * kp_grid_max, 26)[1:]
        kd_axis = np.linspace(0.0, kd_max, 17)
        KP, KD = np.meshgrid(kp_axis, kd_axis, indexing="ij")
    else:
        KP = np.linspace(0.0, kp_grid_max, 121)[1:]
        KD = np.zeros_like(KP)
    KP, KD = sign * KP, sign * KD
    ki = _max_ki(p_resp, w, T, KP, KD, derivative_filter_n, sign, ms_max, ki_hi)
    # Refine around the best few points on a finer grid, then take the best that is closed-loop stable.
    order = np.argsort(ki, axis=None)[::-1]
    for flat in order[:12]:
        if ki.flat[flat] <= 0:
            break
        kp0, kd0 = KP.flat[flat], KD.flat[flat]
        dkp = (1.5 * kp_grid_max / 25.0 if pid else kp_grid_max / 120.0)
        kps = sign * np.linspace(max(abs(kp0) - dkp, 1e-12 * kp_grid_max), abs(kp0) + dkp, 15 if pid else 21)
        if pid:
            dkd = kd_max / 16.0
            kds = sign * np.linspace(max(abs(kd0) - dkd, 0.0), abs(kd0) + dkd, 9)
            kpf, kdf = np.meshgrid(kps, kds, indexing="ij")
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
        dense = loop_frequency_grid(plant, T, 20000, 7.0)
        for _ in range(60):
            ms = max(max_sensitivity(p, cand, T, computation_delay_samples, dense)[0] for p in every)
            if ms <= ms_max * (1 + 1e-6):
                return cand
            cand = replace(cand, ki_per_s=cand.ki_per_s * 0.995)
        continue
    raise ModelError(f"no PI{'D' if pid else ''} gains reach Ms <= {ms_max:g} on this loop (the sampling and "
                     "dead time may leave too little phase; raise --ms or the rate)")


# ---------------------------------------------------------------- one entry point
def tune(plant: Plant, method: str, sample_time_s: float, *, pid: bool = False, ms_max: float = DEFAULT_MS,
         tau_c_s: float | None = None, model=None, include_sampling_delay: bool = True,
         computation_delay_samples: int = 1, also_plants=()) -> TuningResult:
    """Tune a PI or PID controller for ``plant`` with one method.

    Parameters
    ----------
    plant : Plant
        The full plant (used by ``zn-cycle`` and ``robust``, and to fit a
        low-order model when ``model`` is not given).
    method : {"simc", "amigo", "imc", "zn", "zn-cycle", "robust"}
    sample_time_s : float
        Firmware period, second.
    pid : bool
        PID instead of PI.
    ms_max : float
        Ms bound for ``robust``.
    tau_c_s : float, optional
        tau_c for SIMC, lambda for IMC, second.
    model : FopdtModel or SopdtModel, optional
        Low-order model for the rules (default: fitted to ``plant``'s step response).
    include_sampling_delay : bool
        Add the hold and computation delay to the rules' dead time.
    computation_delay_samples : int
    also_plants : sequence of Plant
        ``robust`` only: more plants the gains must also satisfy.

    Returns
    -------
    TuningResult

    Examples
    --------
    SIMC on an FOPDT with ``K = 2``, ``tau = 30 s``, ``theta = 5 s`` and
    ``tau_c = theta``: ``Kc = tau / (K 2 theta) = 1.5`` and
    ``Ti = min(tau, 8 theta) = 30 s`` (Skogestad 2003), so ``ki = Kc / Ti``:

    >>> from compensator.loops.plants import FopdtModel, model_plant
    >>> model = FopdtModel(2.0, 30.0, 5.0)
    >>> result = tune(model_plant(model), "simc", 0.1, model=model, include_sampling_delay=False)
    >>> result.gains.kp, result.gains.ki_per_s
    (1.5, 0.05)

    Sampled at 10 Hz the rule sees 1.5 samples more dead time:

    >>> result = tune(model_plant(model), "simc", 0.1, model=model)
    >>> result.rule_dead_time_s, round(result.gains.kp, 4)
    (5.15, 1.4563)
    """
    if method not in METHODS:
        raise ModelError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
    if method == "robust":
        _check_ms(ms_max)
    T = float(sample_time_s)
    if not T > 0:
        raise ModelError("the sample time must be positive")
    with one_blas_thread():  # small dense problems: see compensator.loops._blas
        extra = sampling_dead_time_s(T, computation_delay_samples) if include_sampling_delay else 0.0
        if method == "robust":
            gains = robust(plant, T, ms_max, pid=pid, computation_delay_samples=computation_delay_samples,
                           also_plants=also_plants)
            return TuningResult(gains, method, pid, model, extra, ms_target=ms_max)
        if method == "zn-cycle":
            ku, pu = ultimate_point(plant, T if include_sampling_delay else None, computation_delay_samples)
            return TuningResult(ziegler_nichols_ultimate(ku, pu, pid=pid), method, pid, model, extra,
                                ultimate_gain=ku, ultimate_period_s=pu)
        if model is None:
            from compensator.loops.identify import approximate_plant

            model = approximate_plant(plant, "sopdt" if (pid and method == "simc") else "fopdt")
        rule_model = _with_dead_time(model, extra)
        tc = None
        if method == "simc":
            gains, tc = simc(rule_model, pid=pid, tau_c_s=tau_c_s)
        elif method == "amigo":
            gains = amigo(rule_model, pid=pid)
        elif method == "imc":
            gains, tc = imc(rule_model, pid=pid, lambda_s=tau_c_s)
        else:
            gains = ziegler_nichols_step(rule_model, pid=pid)
        return TuningResult(gains, method, pid, model, rule_model.dead_time_s, tc)
