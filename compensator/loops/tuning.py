"""PID tuning: published rules on a low-order model, and a robust optimiser on the real loop.

This module holds the one entry point :func:`tune` and its :class:`TuningResult`; the rules are in
:mod:`compensator.loops.tuning_rules` and the robust search in :mod:`compensator.loops.robust_search`
(their names are re-exported here).

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

from dataclasses import dataclass

from compensator.errors import ModelError
from compensator.loops._blas import one_blas_thread
from compensator.loops.choices import DEFAULT_MS, METHODS
from compensator.loops.plants import FopdtModel, Plant, SopdtModel
from compensator.loops.robust_search import _BISECTION_STEPS, _feasible_batch, _loop_parts, _LoopParts, _max_ki, robust
from compensator.loops.sampled import discrete_frequency_response
from compensator.loops.tuning_rules import (
    MAX_MS,
    _as_fopdt,
    _check_model,
    _check_ms,
    _with_dead_time,
    amigo,
    fopdt_from_ultimate,
    imc,
    ms_point_ultimate,
    sampling_dead_time_s,
    simc,
    ziegler_nichols_step,
    ziegler_nichols_ultimate,
)
from compensator.loops.verify import (
    PidGains,
    closed_loop_stable,
    controller_frequency_response,
    frequency_grid,
    loop_frequency_grid,
    max_sensitivity,
    ultimate_point,
)

# The rules' and the robust search's names (private ones included: the tests reach ``tuning._max_ki`` and its
# kin) and the loop-analysis names imported above keep their old paths through this module.
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
