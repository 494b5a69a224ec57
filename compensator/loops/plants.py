"""Plant models of the two loops: the thermoelectric cooler and the bias supply.

The cooler (heat balance of a lumped thermoelectric module, common practice)::

    Qc = S I Tc - I^2 R / 2 - K (Th - Tc)       heat pumped off the cold plate
    Qh = S I Th + I^2 R / 2 - K (Th - Tc)       heat released on the hot side
    Cc dTc/dt = Qload + Gleak (Ta - Tc) - Qc
    Ch dTh/dt = Qh - (Th - Ta) / Rsink
    tau_s dTs/dt = Tc - Ts                       sensor lag, then a dead time

with absolute temperatures (kelvin) in the Seebeck terms. A positive current
cools the plate; a negative one heats it. Beyond the *current of maximum
cooling* the Joule heat wins and a larger current warms the plate: the loop
gain reverses sign there.

The bias supply: the DAC code sets the regulator's target, the regulator
follows with a first-order lag, and the series resistor and filter capacitor
form an RC low pass in front of the SiPM.

Dead time is kept apart from the delay-free state-space model: continuous
analysis replaces it by a Pade approximant (:func:`continuous_tf`), discrete
analysis represents it exactly (:func:`discretise`), including the fraction
of a sample (ZOH sampling of a system with input delay: Astrom and
Wittenmark, Computer-Controlled Systems, section 2.3, from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import control
import numpy as np
from scipy.linalg import expm
from scipy.optimize import brentq, minimize_scalar

from compensator.errors import ModelError

KELVIN_OFFSET = 273.15


# ---------------------------------------------------------------- generic plants
@dataclass(frozen=True)
class Plant:
    """A single-input single-output linear plant with an input dead time.

    Attributes
    ----------
    system : control.StateSpace
        Continuous-time, delay-free part (deviation variables).
    dead_time_s : float
        Pure delay in front of ``system``, second.
    name : str
        Short label, e.g. ``"cooler"``.
    input_label, output_label : str
        What the input and output are, with units (for reports and plots).
    operating_point : object or None
        The operating point the model was linearised at, if any.
    """

    system: control.StateSpace
    dead_time_s: float
    name: str = "plant"
    input_label: str = "input"
    output_label: str = "output"
    operating_point: object = None

    @property
    def dc_gain(self) -> float:
        """Steady-state gain, output units per input unit."""
        return float(np.real(control.dcgain(self.system)))


@dataclass(frozen=True)
class FopdtModel:
    """First order plus dead time: ``K exp(-theta s) / (tau s + 1)``.

    Attributes
    ----------
    gain : float
        K, output units per input unit (may be negative).
    time_constant_s : float
        tau, second.
    dead_time_s : float
        theta, second.
    """

    gain: float
    time_constant_s: float
    dead_time_s: float


@dataclass(frozen=True)
class SopdtModel:
    """Second order plus dead time: ``K exp(-theta s) / ((tau1 s + 1)(tau2 s + 1))``, ``tau1 >= tau2``.

    Attributes
    ----------
    gain : float
        K, output units per input unit.
    time_constant_s, time_constant2_s : float
        tau1 >= tau2 >= 0, second.
    dead_time_s : float
        theta, second.
    """

    gain: float
    time_constant_s: float
    time_constant2_s: float
    dead_time_s: float

    def half_rule_fopdt(self) -> FopdtModel:
        """FOPDT by Skogestad's half rule (J. Process Control 13, 291, 2003): half of tau2 goes to each."""
        return FopdtModel(self.gain, self.time_constant_s + self.time_constant2_s / 2.0,
                          self.dead_time_s + self.time_constant2_s / 2.0)


def _check_finite(**values):
    for name, value in values.items():
        if not np.isfinite(value):
            raise ModelError(f"{name} must be finite, got {value!r}")


def fopdt_plant(gain: float, time_constant_s: float, dead_time_s: float, name: str = "fopdt") -> Plant:
    """The FOPDT plant ``K exp(-theta s) / (tau s + 1)``.

    Parameters
    ----------
    gain : float
        K, output units per input unit, nonzero.
    time_constant_s : float
        tau > 0, second.
    dead_time_s : float
        theta >= 0, second.

    Returns
    -------
    Plant
    """
    _check_finite(gain=gain, time_constant_s=time_constant_s, dead_time_s=dead_time_s)
    if gain == 0:
        raise ModelError("gain must be nonzero")
    if time_constant_s <= 0:
        raise ModelError(f"time_constant_s must be positive, got {time_constant_s}")
    if dead_time_s < 0:
        raise ModelError(f"dead_time_s must be >= 0, got {dead_time_s}")
    sys = control.ss([[-1.0 / time_constant_s]], [[gain / time_constant_s]], [[1.0]], [[0.0]])
    return Plant(sys, float(dead_time_s), name)


def sopdt_plant(gain: float, time_constant_s: float, time_constant2_s: float, dead_time_s: float,
                name: str = "sopdt") -> Plant:
    """The SOPDT plant ``K exp(-theta s) / ((tau1 s + 1)(tau2 s + 1))``.

    Parameters
    ----------
    gain : float
        K, nonzero.
    time_constant_s, time_constant2_s : float
        tau1 > 0 and tau2 >= 0, second (a zero tau2 gives the FOPDT).
    dead_time_s : float
        theta >= 0, second.

    Returns
    -------
    Plant
    """
    _check_finite(time_constant2_s=time_constant2_s)
    if time_constant2_s < 0:
        raise ModelError(f"time_constant2_s must be >= 0, got {time_constant2_s}")
    first = fopdt_plant(gain, time_constant_s, dead_time_s, name)
    if time_constant2_s == 0:
        return first
    t1, t2 = time_constant_s, time_constant2_s
    a = np.array([[-1.0 / t1, 1.0 / t1], [0.0, -1.0 / t2]])
    b = np.array([[0.0], [gain / t2]])
    sys = control.ss(a, b, [[1.0, 0.0]], [[0.0]])
    return Plant(sys, float(dead_time_s), name)


def model_plant(model, name: str | None = None) -> Plant:
    """The :class:`Plant` of a :class:`FopdtModel` or :class:`SopdtModel`."""
    if isinstance(model, SopdtModel):
        return sopdt_plant(model.gain, model.time_constant_s, model.time_constant2_s, model.dead_time_s,
                           name or "sopdt")
    return fopdt_plant(model.gain, model.time_constant_s, model.dead_time_s, name or "fopdt")


# ---------------------------------------------------------------- delay handling
def continuous_tf(plant: Plant, pade_order: int = 6) -> control.TransferFunction:
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


def discretise(plant: Plant, sample_time_s: float, computation_delay_samples: int = 1) -> control.StateSpace:
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
    a, b, c, dmat = (np.atleast_2d(np.asarray(m, dtype=float)) for m in (
        plant.system.A, plant.system.B, plant.system.C, plant.system.D))
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


def discrete_frequency_response(plant: Plant, sample_time_s: float, omega_rad_s, computation_delay_samples: int = 1):
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
    return discrete_response_function(plant, sample_time_s, computation_delay_samples)(omega_rad_s)


def discrete_response_function(plant: Plant, sample_time_s: float, computation_delay_samples: int = 1):
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
    a, b, c, dmat = (np.atleast_2d(np.asarray(m, dtype=float)) for m in (
        plant.system.A, plant.system.B, plant.system.C, plant.system.D))
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


def continuous_frequency_response(plant: Plant, omega_rad_s):
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
    a, b, c, dmat = (np.atleast_2d(np.asarray(m, dtype=float)) for m in (
        plant.system.A, plant.system.B, plant.system.C, plant.system.D))
    s = 1j * omega.ravel()
    resp = np.full(s.shape, complex(dmat[0, 0]) if dmat.size else 0j)
    n = a.shape[0] if a.size else 0
    if n:
        x = np.linalg.solve(s.reshape(-1, 1, 1) * np.eye(n)[None] - a[None], np.broadcast_to(b, (s.size, n, 1)))
        resp = resp + (c[None] @ x)[:, 0, 0]
    return (resp * np.exp(-s * plant.dead_time_s)).reshape(omega.shape)


def step_response(plant: Plant, time_s):
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
    a, b, c = (np.atleast_2d(np.asarray(m, dtype=float)) for m in (plant.system.A, plant.system.B, plant.system.C))
    dd = float(np.asarray(plant.system.D)[0, 0])
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


# ---------------------------------------------------------------- the cooler
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
    return params.ambient_temp_c if ambient_temp_c is None else float(ambient_temp_c)


def _conductance_matrix(p, current_a):
    """Entries of the fixed-current heat-balance matrix (watt per kelvin): d(heat flow into node)/d(temperature).

    Rows and columns are (cold plate, hot side); the same matrix gives the
    steady state, its stability, and (divided by the heat capacities) the
    linearised dynamics.
    """
    i = np.asarray(current_a, dtype=float)
    s, k, g, rs = p.seebeck_v_per_k, p.conductance_w_per_k, p.cold_leak_conductance_w_per_k, p.sink_resistance_k_per_w
    return -(g + s * i + k), np.full_like(i, k), np.full_like(i, k), s * i - k - 1.0 / rs


def _thermally_stable(p, current_a):
    """Whether the two-node thermal system at a fixed current has both eigenvalues in the left half plane."""
    m11, m12, m21, m22 = _conductance_matrix(p, current_a)
    cc, ch = p.cold_heat_capacity_j_per_k, p.hot_heat_capacity_j_per_k
    return (m11 / cc + m22 / ch < 0) & (m11 * m22 - m12 * m21 > 0)


def stable_current_range_a(params) -> tuple[float, float]:
    """Currents within ``[-max_current_a, max_current_a]`` where the module has a stable steady state, ampere.

    Strong heating (negative) currents can run away: the Peltier heat ``S |I| Tc``
    grows with the plate temperature faster than the leak removes it.
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
    params : compensator.physics.thermal.CoolerParams
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
        The hot side has no stable steady state (the heat sink cannot carry
        the heat: thermal runaway).
    """
    p = params
    ta = _ambient(p, ambient_temp_c)
    i = np.asarray(current_a, dtype=float)
    r, g, rs = p.resistance_ohm, p.cold_leak_conductance_w_per_k, p.sink_resistance_k_per_w
    # Unknowns in kelvin.  Row 1: cold balance, row 2: hot balance.
    a11, a12, a21, a22 = _conductance_matrix(p, i)
    ta_k = ta + KELVIN_OFFSET
    b1 = -(p.cold_heat_load_w + g * ta_k + i ** 2 * r / 2.0)
    b2 = -(i ** 2 * r / 2.0 + ta_k / rs)
    det = a11 * a22 - a12 * a21
    if not np.all(_thermally_stable(p, i)):
        bad = float(np.atleast_1d(i)[~np.atleast_1d(_thermally_stable(p, i))][0])
        raise ModelError(f"the module has no stable steady state at {bad:g} A: the Peltier and Joule heat outgrow "
                         "what the heat sink and leaks carry away (thermal runaway); lower the current or improve "
                         "the heat sink")
    tc = (b1 * a22 - a12 * b2) / det
    th = (a11 * b2 - a21 * b1) / det
    return tc - KELVIN_OFFSET, th - KELVIN_OFFSET


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
        The setpoint cannot be reached within ``[-max_current_a, optimum]``.
    """
    p = params
    ta = _ambient(p, ambient_temp_c)
    i_opt = cooler_optimum_current_a(p, ta)
    t_cold = float(cooler_steady_state(p, i_opt, ta)[0])
    if current_a is None:
        sp = p.setpoint_temp_c if setpoint_temp_c is None else float(setpoint_temp_c)
        i_warm = stable_current_range_a(p)[0]
        t_warm = float(cooler_steady_state(p, i_warm, ta)[0])
        if sp < t_cold:
            raise ModelError(f"setpoint {sp:g} C is below the coldest reachable {t_cold:.2f} C at ambient {ta:g} C "
                             f"(current of maximum cooling {i_opt:.3f} A)")
        if sp > t_warm:
            raise ModelError(f"setpoint {sp:g} C is above the warmest reachable {t_warm:.2f} C at ambient {ta:g} C "
                             f"(heating at {i_warm:.3g} A)")
        if sp == t_cold:
            current = i_opt
        else:
            current = brentq(lambda x: float(cooler_steady_state(p, x, ta)[0]) - sp, i_warm, i_opt, xtol=1e-12)
    else:
        current = float(current_a)
        if abs(current) > p.max_current_a:
            raise ModelError(f"current {current:g} A exceeds the module's max_current_a {p.max_current_a:g} A")
    tc, th = (float(v) for v in cooler_steady_state(p, current, ta))
    s, r, k = p.seebeck_v_per_k, p.resistance_ohm, p.conductance_w_per_k
    qc = s * current * (tc + KELVIN_OFFSET) - current ** 2 * r / 2.0 - k * (th - tc)
    power = current * (s * (th - tc) + current * r)
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


def linearise_cooler_over_ambient(params, ambient_temps_c, setpoint_temp_c=None):
    """The cooler linearised at the setpoint for each ambient temperature.

    Parameters
    ----------
    params : CoolerParams
    ambient_temps_c : array_like
        Degree Celsius.
    setpoint_temp_c : float, optional
        Cold-plate setpoint (default: the profile's).

    Returns
    -------
    plants : list of Plant
        One per ambient at which the setpoint can be held.
    unreachable : list of str
        One message per ambient at which it cannot.
    """
    out, problems = [], []
    for ta in np.atleast_1d(np.asarray(ambient_temps_c, dtype=float)):
        try:
            out.append(linearise_cooler(params, cooler_operating_point(params, setpoint_temp_c, None, float(ta))))
        except ModelError as exc:
            problems.append(f"at ambient {ta:g} C the setpoint cannot be held: {exc}")
    return out, problems


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
    ta = _ambient(p, None) if ambient_temp_c is None else np.asarray(ambient_temp_c, dtype=float)
    tc, th, ts, i = (np.asarray(v, dtype=float) for v in (cold_temp_c, hot_temp_c, sensor_temp_c, current_a))
    s, r, k = p.seebeck_v_per_k, p.resistance_ohm, p.conductance_w_per_k
    qc = s * i * (tc + KELVIN_OFFSET) - i ** 2 * r / 2.0 - k * (th - tc)
    qh = s * i * (th + KELVIN_OFFSET) + i ** 2 * r / 2.0 - k * (th - tc)
    dtc = (p.cold_heat_load_w + p.cold_leak_conductance_w_per_k * (ta - tc) - qc) / p.cold_heat_capacity_j_per_k
    dth = (qh - (th - ta) / p.sink_resistance_k_per_w) / p.hot_heat_capacity_j_per_k
    if p.sensor_time_constant_s > 0:
        dts = (tc - ts) / p.sensor_time_constant_s
    else:
        dts = np.zeros_like(tc)
    return dtc, dth, dts


def linearise_cooler(params, point: CoolerOperatingPoint) -> Plant:
    """Small-signal model from current (A) to the sensor reading (K) at ``point``.

    States ``[dTc, dTh, dTs]`` (the sensor state is dropped when the sensor
    has no lag); the sensor dead time becomes the plant's dead time.

    Parameters
    ----------
    params : CoolerParams
    point : CoolerOperatingPoint

    Returns
    -------
    Plant
    """
    p = params
    i, tc, th = point.current_a, point.cold_temp_c + KELVIN_OFFSET, point.hot_temp_c + KELVIN_OFFSET
    s, r = p.seebeck_v_per_k, p.resistance_ohm
    cc, ch = p.cold_heat_capacity_j_per_k, p.hot_heat_capacity_j_per_k
    m11, m12, m21, m22 = (float(v) for v in _conductance_matrix(p, i))
    a = np.array([[m11 / cc, m12 / cc], [m21 / ch, m22 / ch]])
    b = np.array([[(-s * tc + i * r) / cc], [(s * th + i * r) / ch]])
    if p.sensor_time_constant_s > 0:
        tau = p.sensor_time_constant_s
        a = np.block([[a, np.zeros((2, 1))], [np.array([[1.0 / tau, 0.0, -1.0 / tau]])]])
        b = np.vstack([b, [[0.0]]])
        c = np.array([[0.0, 0.0, 1.0]])
    else:
        c = np.array([[1.0, 0.0]])
    sys = control.ss(a, b, c, np.zeros((1, 1)))
    return Plant(sys, float(p.sensor_dead_time_s), "cooler", "cooler current, A", "cold-plate sensor, degree C",
                 point)


# ---------------------------------------------------------------- the bias supply


@dataclass(frozen=True)
class SupplyOperatingPoint:
    """What the bias-supply model assumed.

    Attributes
    ----------
    volts_per_code : float
        Signed supply output change per DAC code, volt.
    regulator_time_constant_s : float
        First-order lag of the regulator, second.
    filter_time_constant_s : float
        Series resistor times filter capacitor (with the load), second.
    load_resistance_ohm : float
        Small-signal resistance of the SiPM load (inf when neglected), ohm.
    """

    volts_per_code: float
    regulator_time_constant_s: float
    filter_time_constant_s: float
    load_resistance_ohm: float


def bias_supply_plant(supply, regulator_time_constant_s: float | None = None,
                      load_resistance_ohm: float = float("inf")) -> Plant:
    """Small-signal model from DAC code to the bias at the SiPM, volt per code.

    ``V_sipm(s) / code(s) = k_v / ((tau_reg s + 1)(R C' s + 1)) * R_load / (R + R_load)``
    with ``k_v = supply.volts_per_code`` (negative for feedback injection),
    ``C'`` the filter capacitor and the load in parallel.

    Parameters
    ----------
    supply : compensator.physics.supply.BiasSupply
    regulator_time_constant_s : float, optional
        The regulator's closed-loop lag, second (default: the supply's
        ``regulator_time_constant_s``, from the board profile).
    load_resistance_ohm : float
        Small-signal resistance of the SiPM, ohm (``dV/dI``; inf neglects the
        load, right when the dark current is microamperes).

    Returns
    -------
    Plant
    """
    if regulator_time_constant_s is None:
        regulator_time_constant_s = supply.regulator_time_constant_s
    if regulator_time_constant_s < 0:
        raise ModelError("regulator_time_constant_s must be >= 0")
    if not load_resistance_ohm > 0:
        raise ModelError("load_resistance_ohm must be positive")
    kv = supply.volts_per_code
    r = supply.series_resistor_ohm
    div = 1.0 if np.isinf(load_resistance_ohm) else load_resistance_ohm / (r + load_resistance_ohm)
    r_par = r if np.isinf(load_resistance_ohm) else r * load_resistance_ohm / (r + load_resistance_ohm)
    tau_f = r_par * supply.filter_capacitance_f
    taus = sorted([t for t in (regulator_time_constant_s, tau_f) if t > 0], reverse=True)
    gain = kv * div
    if not taus:
        sys = control.ss(np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), [[gain]])
    elif len(taus) == 1:
        sys = fopdt_plant(gain, taus[0], 0.0).system
    else:
        sys = sopdt_plant(gain, taus[0], taus[1], 0.0).system
    op = SupplyOperatingPoint(kv, regulator_time_constant_s, tau_f, load_resistance_ohm)
    return Plant(sys, 0.0, "bias supply", "DAC code", "SiPM bias, V", op)
