"""PID tuning rules on a low-order model (SIMC, AMIGO, IMC, Ziegler-Nichols) and from the ultimate point.

Each rule, its formulas and its source are listed in :mod:`compensator.loops.tuning`, which chooses among them
(and the robust search of :mod:`compensator.loops.robust_search`) and re-exports these names. Gains are in
parallel form and carry the sign of the plant gain.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from compensator.errors import ModelError
from compensator.loops.choices import DEFAULT_MS
from compensator.loops.controller import PidGains
from compensator.loops.plants import FopdtModel, SopdtModel

__all__ = [
    "MAX_MS", "sampling_dead_time_s", "simc", "amigo", "imc", "ziegler_nichols_step", "ziegler_nichols_ultimate",
    "ms_point_ultimate", "fopdt_from_ultimate",
]


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
