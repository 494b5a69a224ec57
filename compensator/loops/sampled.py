"""Sampling and responses of a linear plant with an input dead time.

Dead time is kept apart from the delay-free state-space model: continuous
analysis replaces it by a Pade approximant (:func:`continuous_tf`) or keeps it
exact in the frequency response (:func:`continuous_frequency_response`);
discrete analysis represents it exactly (:func:`discretise`,
:func:`discrete_frequency_response`), including the fraction of a sample (ZOH
sampling of a system with input delay: Astrom and Wittenmark,
Computer-Controlled Systems, section 2.3, from memory).

A *plant* here is any object with ``system`` (a python-control state-space
model of the delay-free part) and ``dead_time_s`` (second), such as
:class:`compensator.loops.plants.Plant`.

A long dead time at a high rate makes a delay line of thousands of states;
time-domain analysis of such a loop is bounded by :func:`analysis_period_s`
(see :data:`MAX_DELAY_SAMPLES`).
"""

from __future__ import annotations

import math

import control
import numpy as np
from scipy.linalg import expm

from compensator.errors import ModelError

__all__ = [
    "MAX_DELAY_SAMPLES", "state_space_arrays", "continuous_tf", "discretise", "discrete_frequency_response",
    "discrete_frequency_evaluator", "continuous_frequency_response", "step_response", "delay_samples",
    "analysis_period_s", "analysis_plant",
]

#: Largest delay line (whole samples of dead time plus computation delay) that time-domain analysis builds;
#: above it the closed-loop poles and step response are computed at a longer analysis period (see
#: :func:`analysis_period_s`). Frequency-domain figures (margins, Ms) stay exact at any delay.
MAX_DELAY_SAMPLES = 200


def state_space_arrays(system):
    """``A, B, C, D`` of a python-control state-space model as 2-D float arrays.

    Parameters
    ----------
    system : control.StateSpace
        Single input, single output.

    Returns
    -------
    a, b, c, d : ndarray
        Shapes ``(n, n)``, ``(n, 1)``, ``(1, n)``, ``(1, 1)`` (``n`` may be 0).
    """
    return tuple(np.atleast_2d(np.asarray(m, dtype=float)) for m in (system.A, system.B, system.C, system.D))


def delay_samples(dead_time_s: float, sample_time_s: float, computation_delay_samples: int = 1) -> int:
    """Length of the delay line of the sampled loop: whole samples of dead time plus the computation delay.

    Parameters
    ----------
    dead_time_s : float
        Plant dead time, second.
    sample_time_s : float
        Period, second.
    computation_delay_samples : int

    Returns
    -------
    int
    """
    return _delay_split(dead_time_s, sample_time_s)[0] + computation_delay_samples


def analysis_period_s(dead_time_s: float, sample_time_s: float, computation_delay_samples: int = 1) -> float:
    """Period at which time-domain analysis runs: the firmware period, or a whole multiple of it.

    When the dead time spans more than :data:`MAX_DELAY_SAMPLES` samples, the
    closed-loop poles and step response are computed with the loop sampled
    ``m`` times more slowly, the smallest whole ``m`` that brings the delay
    line within the bound (see :func:`analysis_plant`).

    Parameters
    ----------
    dead_time_s : float
        Plant dead time, second.
    sample_time_s : float
        Firmware period, second.
    computation_delay_samples : int

    Returns
    -------
    float
        Second (``sample_time_s`` when no approximation is needed).
    """
    if delay_samples(dead_time_s, sample_time_s, computation_delay_samples) <= MAX_DELAY_SAMPLES:
        return float(sample_time_s)
    m = math.ceil(dead_time_s / (sample_time_s * (MAX_DELAY_SAMPLES - computation_delay_samples - 2)))
    return float(m * sample_time_s)


def analysis_plant(plant, sample_time_s: float, computation_delay_samples: int = 1):
    """The plant and period for time-domain analysis, with the delay line bounded.

    Sampling at ``Ta = m T`` instead of ``T`` adds ``(0.5 + c) (Ta - T)`` of
    effective delay (half a period for the hold, ``c`` for the computation;
    common practice), so the plant's dead time is shortened by that much:
    the phase of the loop is then the same at every frequency, the hold's
    gain ``sinc(omega Ta / 2)`` differs by about 1e-6 at a crossover near
    ``1 / dead_time_s``, and the controller's forward-Euler integrator by
    ``omega Ta / 2`` (about 0.15 degree there).

    Parameters
    ----------
    plant : Plant
    sample_time_s : float
        Firmware period, second.
    computation_delay_samples : int

    Returns
    -------
    plant : Plant
        ``plant`` itself, or a copy with the shortened dead time.
    period_s : float
        ``sample_time_s``, or the longer analysis period.
    """
    import dataclasses

    ta = analysis_period_s(plant.dead_time_s, sample_time_s, computation_delay_samples)
    if ta == sample_time_s:
        return plant, float(sample_time_s)
    shorter = plant.dead_time_s - (0.5 + computation_delay_samples) * (ta - sample_time_s)
    return dataclasses.replace(plant, dead_time_s=max(shorter, 0.0)), ta


def continuous_tf(plant, pade_order: int = 6) -> control.TransferFunction:
    """Continuous transfer function with the dead time replaced by a Pade approximant.

    Parameters
    ----------
    plant : Plant
    pade_order : int
        Order of the Pade approximant (python-control ``pade``).

    Returns
    -------
    control.TransferFunction
    """
    tf = control.ss2tf(plant.system)
    if plant.dead_time_s > 0:
        num, den = control.pade(plant.dead_time_s, pade_order)
        tf = tf * control.tf(num, den)
    return tf


def _zoh_integrals(a: np.ndarray, b: np.ndarray, h: float):
    """``exp(A h)`` and ``int_0^h exp(A s) ds B`` through one augmented matrix exponential."""
    n, m = b.shape
    big = np.zeros((n + m, n + m))
    big[:n, :n] = a * h
    big[:n, n:] = b * h
    e = expm(big)
    return e[:n, :n], e[:n, n:]


def _delay_split(dead_time_s: float, sample_time_s: float):
    """Whole samples ``d`` and the remainder ``rem`` in ``(0, T]`` with ``theta = (d - 1) T + rem``."""
    if dead_time_s <= 0:
        return 0, 0.0
    ratio = dead_time_s / sample_time_s
    d = int(np.ceil(ratio - 1e-9))
    rem = dead_time_s - (d - 1) * sample_time_s
    return d, min(max(rem, 0.0), sample_time_s)


def discretise(plant, sample_time_s: float, computation_delay_samples: int = 1) -> control.StateSpace:
    """The plant as the firmware sees it: zero-order hold, exact dead time, computation delay.

    The dead time ``theta = (d - 1) T + rem`` (``0 < rem <= T``) is exact:
    ``x[k+1] = Phi x[k] + Gamma0 u[k-d+1] + Gamma1 u[k-d]`` with
    ``Gamma0 = int_0^{T-rem} e^{As} ds B`` and ``Gamma1 = e^{A(T-rem)} int_0^rem e^{As} ds B``
    (Astrom and Wittenmark, Computer-Controlled Systems, from memory); a whole
    number of samples reduces to ``z^-d`` times the ZOH model. The
    ``computation_delay_samples`` more samples model the firmware applying
    its output one period after it sampled the input.

    Parameters
    ----------
    plant : Plant
    sample_time_s : float
        Firmware period T, second.
    computation_delay_samples : int
        Extra whole-sample delay (1: output applied at the next tick).

    Returns
    -------
    control.StateSpace
        Discrete system with ``dt = sample_time_s``; states are the plant
        states followed by the input delay line.
    """
    if not sample_time_s > 0:
        raise ModelError(f"sample_time_s must be positive, got {sample_time_s}")
    if computation_delay_samples < 0:
        raise ModelError("computation_delay_samples must be >= 0")
    a, b, c, dmat = state_space_arrays(plant.system)
    n = a.shape[0]
    T = float(sample_time_s)
    d, rem = _delay_split(plant.dead_time_s, T)
    # The zero-order-hold sampling of the delay-free part is python-control's sample_system; only the
    # fractional part of the dead time needs the split integrals below.
    sampled = control.sample_system(control.ss(a, b, c, dmat), T, method="zoh")
    phi, gamma_full = np.atleast_2d(np.asarray(sampled.A, float)), np.atleast_2d(np.asarray(sampled.B, float))
    total = d + computation_delay_samples  # length of the input delay line
    if d == 0:
        g0, g1 = gamma_full, np.zeros_like(gamma_full)
    else:
        phi_a, g0 = _zoh_integrals(a, b, T - rem)
        _, g_rem = _zoh_integrals(a, b, rem)
        g1 = phi_a @ g_rem
    # Plant input v[k] = u[k - computation_delay]; the plant sees v[k-d+1] and v[k-d].
    lag0 = computation_delay_samples + max(d - 1, 0) if d else computation_delay_samples
    lag1 = computation_delay_samples + d
    size = n + total
    A = np.zeros((size, size))
    B = np.zeros((size, 1))
    C = np.zeros((1, size))
    D = np.zeros((1, 1))
    A[:n, :n] = phi
    C[0, :n] = c[0]

    def attach(gamma, lag):
        # lag 0: the current input; lag k >= 1: delay-line state k (index n + k - 1).
        if lag == 0:
            B[:n, :] += gamma
        else:
            A[:n, n + lag - 1] += gamma[:, 0]

    attach(g0, lag0)
    if d:
        attach(g1, lag1)
    if total:
        B[n, 0] = 1.0
        for k in range(1, total):
            A[n + k, n + k - 1] = 1.0
    if dmat[0, 0] != 0.0:
        if lag1 == 0:
            D[0, 0] = dmat[0, 0]
        else:
            C[0, n + lag1 - 1] += dmat[0, 0]
    return control.ss(A, B, C, D, T)


def discrete_frequency_response(plant, sample_time_s: float, omega_rad_s, computation_delay_samples: int = 1):
    """Frequency response of :func:`discretise` at ``omega_rad_s``, vectorised and fast.

    Parameters
    ----------
    plant : Plant
    sample_time_s : float
        Firmware period, second.
    omega_rad_s : array_like
        Angular frequencies, rad/s (below the Nyquist frequency pi/T).
    computation_delay_samples : int

    Returns
    -------
    ndarray of complex
        ``P(exp(j omega T))`` including dead time and computation delay.
    """
    return discrete_frequency_evaluator(plant, sample_time_s, computation_delay_samples)(omega_rad_s)


def discrete_frequency_evaluator(plant, sample_time_s: float, computation_delay_samples: int = 1):
    """A function ``omega_rad_s -> P(exp(j omega T))`` with the discretisation done once.

    Parameters
    ----------
    plant : Plant
    sample_time_s : float
        Firmware period, second.
    computation_delay_samples : int

    Returns
    -------
    callable
        Same values as :func:`discrete_frequency_response`; use it when evaluating many times.
    """
    a, b, c, dmat = state_space_arrays(plant.system)
    n = a.shape[0] if a.size else 0
    T = float(sample_time_s)
    d, rem = _delay_split(plant.dead_time_s, T)
    d00 = float(dmat[0, 0]) if dmat.size else 0.0
    if n:
        phi, gamma_full = _zoh_integrals(a, b, T)
        if d:
            phi_a, g0 = _zoh_integrals(a, b, T - rem)
            _, g_rem = _zoh_integrals(a, b, rem)
            g1 = phi_a @ g_rem

    def response(omega_rad_s):
        omega = np.asarray(omega_rad_s, dtype=float)
        z = np.exp(1j * omega.ravel() * T)
        resp = d00 * z ** (-d)
        if n:
            zf = z.reshape(-1, 1, 1)
            if d == 0:
                gam = np.broadcast_to(gamma_full[None, :, :], (z.size, n, 1)).astype(complex)
            else:
                gam = g0[None] * zf ** (-(d - 1)) + g1[None] * zf ** (-d)
            x = np.linalg.solve(zf * np.eye(n)[None] - phi[None], gam)
            resp = resp + (c[None] @ x)[:, 0, 0]
        return (resp * z ** (-computation_delay_samples)).reshape(omega.shape)

    return response


def continuous_frequency_response(plant, omega_rad_s):
    """``P(j omega)`` of the continuous plant with its exact dead time (vectorised).

    Parameters
    ----------
    plant : Plant
    omega_rad_s : array_like
        Angular frequencies, rad/s.

    Returns
    -------
    ndarray of complex
    """
    omega = np.asarray(omega_rad_s, dtype=float)
    a, b, c, dmat = state_space_arrays(plant.system)
    s = 1j * omega.ravel()
    resp = np.full(s.shape, complex(dmat[0, 0]) if dmat.size else 0j)
    n = a.shape[0] if a.size else 0
    if n:
        x = np.linalg.solve(s.reshape(-1, 1, 1) * np.eye(n)[None] - a[None], np.broadcast_to(b, (s.size, n, 1)))
        resp = resp + (c[None] @ x)[:, 0, 0]
    return (resp * np.exp(-s * plant.dead_time_s)).reshape(omega.shape)


def step_response(plant, time_s):
    """Continuous unit-step response (input steps at t = 0), dead time exact.

    Parameters
    ----------
    plant : Plant
    time_s : array_like
        Times, second (any order; negative times give 0).

    Returns
    -------
    ndarray
        Output change per unit input step.
    """
    t = np.asarray(time_s, dtype=float) - plant.dead_time_s
    a, b, c, dmat = state_space_arrays(plant.system)
    dd = float(dmat[0, 0]) if dmat.size else 0.0
    out = np.zeros_like(t)
    pos = t > 0
    if np.any(pos):
        # Diagonalise when possible (all our plants have distinct real poles); fall back to expm.
        w, v = np.linalg.eig(a)
        if np.linalg.cond(v) < 1e8 and np.all(np.abs(w) > 0):
            vinv = np.linalg.inv(v)
            cb = (c @ v)[0] * (vinv @ b)[:, 0]
            tp = t[pos][:, None]
            out[pos] = np.real(np.sum(cb / w * (np.exp(w * tp) - 1.0), axis=1)) + dd
        else:
            for i in np.flatnonzero(pos):
                _, g = _zoh_integrals(a, b, t[i])
                out[i] = (c @ g)[0, 0] + dd
    return out
