"""The robust search against scipy's optimiser on the same bound, and its refusals."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy.optimize import brentq, minimize, minimize_scalar

from compensator.errors import ModelError
from compensator.loops import plants, tuning
from compensator.loops.verify import closed_loop_stable

# The search works on finite numbers throughout: a numpy RuntimeWarning (a division by zero, an invalid value) fails.
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

T = 0.1


def _fopdt_pi_optimum(k, tau_s, theta_s, ms_max, delay_samples):
    """Largest ki of a PI with ``|1 + L| >= 1 / Ms`` on a FOPDT sampled at T, by scipy (independent of the search).

    The plant is the zero-order-hold FOPDT written out by hand, ``K (1 - a) q / (1 - a q)`` with
    ``a = exp(-T / tau)``, times ``q`` per sample of dead time and per sample of computation delay
    (``q = exp(-j omega T)``); the PI is the firmware's forward-Euler ``kp + ki T q / (1 - q)``; the bound is
    taken on 3000 log-spaced frequencies. For each kp below the largest P gain that meets the bound, scipy's brentq finds the first
    ki where the bound fails (scanning up from ki = 0, so that the loop stays in the stable region); scipy's
    bounded minimize_scalar maximises that over kp (the MIGO problem of Astrom, Panagopoulos and Hagglund,
    Automatica 34, 585, 1998).
    """
    w = np.geomspace(1e-3, math.pi / T, 3000)
    q = np.exp(-1j * w * T)
    a = math.exp(-T / tau_s)
    p = k * (1.0 - a) * q / (1.0 - a * q) * q ** (round(theta_s / T) + delay_samples)
    i = T * q / (1.0 - q)
    phase = np.unwrap(np.angle(p))
    kp_max = 1.0 / abs(p[np.argmax(phase < -math.pi)])  # the ultimate gain, where the phase first passes -180 deg

    def margin(kp, ki):
        return np.min(np.abs(1.0 + (kp + ki * i) * p)) - 1.0 / ms_max

    def largest_ki(kp):
        kis = np.geomspace(1e-6 * kp_max, 10.0 * kp_max, 80)
        bad = np.flatnonzero([margin(kp, ki) < 0 for ki in kis])
        if margin(kp, 0.0) < 0 or bad.size == 0 or bad[0] == 0:
            return 0.0
        return brentq(lambda ki: margin(kp, ki), kis[bad[0] - 1], kis[bad[0]], xtol=1e-12 * kp_max, rtol=1e-12)

    kp_top = brentq(lambda kp: margin(kp, 0.0), 0.0, kp_max)  # the largest P gain that meets the bound
    res = minimize_scalar(lambda kp: -largest_ki(kp), bounds=(0.0, kp_top), method="bounded",
                          options={"xatol": 1e-9 * kp_max})
    return res.x, -res.fun


@pytest.mark.parametrize("k, tau_s, theta_s, ms_max, delay_samples", [
    (4.0, 20.0, 2.0, 1.4, 1),
    (0.5, 10.0, 1.0, 1.4, 1),  # a positive gain below one
    (-2.0, 30.0, 2.0, 1.6, 2),  # reverse acting, two samples of computation delay, a looser bound
    # No computation delay and a loose bound (Ms <= 3): the optimum's loop would be unstable with one sample of
    # delay (asserted below), so the search must use the delay it was given at every step.
    (1.0, 2.0, 0.1, 3.0, 0),
])
def test_robust_pi_reaches_the_optimum_of_scipy(k, tau_s, theta_s, ms_max, delay_samples):
    kp_opt, ki_opt = _fopdt_pi_optimum(abs(k), tau_s, theta_s, ms_max, delay_samples)
    g = tuning.robust(plants.fopdt_plant(k, tau_s, theta_s), T, ms_max, computation_delay_samples=delay_samples)
    sign = math.copysign(1.0, k)
    # The search confirms Ms on a dense grid and shrinks ki by 0.5 % steps until it holds there: within two
    # steps (1 %) of the optimum, never above it.
    assert 0.99 * ki_opt <= sign * g.ki_per_s <= ki_opt * (1.0 + 1e-4)
    assert sign * g.kp == pytest.approx(kp_opt, rel=0.02) and g.kd_s == 0.0
    if delay_samples == 0:
        assert not closed_loop_stable(plants.fopdt_plant(k, tau_s, theta_s), g, T, computation_delay_samples=1)


def test_a_plant_without_static_gain_is_refused():
    # s / (s + 1): integral action cannot hold a setpoint through a zero at s = 0 (the search used to return
    # gains for it).
    plant = plants.Plant(control.ss(control.tf([1.0, 0.0], [1.0, 1.0])), 0.2)
    reason = "a plant has zero static gain: integral action cannot hold a setpoint on it"
    for others in ((), (plants.fopdt_plant(1.0, 10.0, 1.0),)):
        for call in (lambda: tuning.robust(plants.fopdt_plant(1.0, 10.0, 1.0), T, 1.4, also_plants=(plant, *others)),
                     lambda: tuning.robust(plant, T, 1.4, also_plants=others)):
            with pytest.raises(ModelError) as info:
                call()
            assert info.value.reason == reason


def test_plants_of_opposite_sign_are_refused():
    # Integral action of one sign drives a plant of the other sign away from its setpoint (a positive feedback
    # loop): no single controller suits a gain of +1 and one of -2 (or -1 and +0.5), in either order, with or
    # without a third plant of the first one's sign. The refusal comes before any search.
    reason = "the plants disagree in the sign of their gain: no single controller suits them all"
    for k1, k2 in ((1.0, -2.0), (-1.0, 0.5)):
        first, second = plants.fopdt_plant(k1, 10.0, 1.0), plants.fopdt_plant(k2, 10.0, 1.0)
        for plant, others in ((first, (second,)), (second, (first,)), (first, (first, second)), (first, (second, first))):
            with pytest.raises(ModelError) as info:
                tuning.robust(plant, T, 1.4, also_plants=others)
            assert info.value.reason == reason


def _largest_ki(p, q, kp, kd, ms_max, n=10.0):
    """First ki where ``|1 + C P| >= 1 / Ms`` fails, for the firmware PID written out (independent of the search).

    ``C = kp + ki T q / (1 - q) + kd (1 - q) / (T + Tf (1 - q))`` with ``Tf = |kd / kp| / N`` (the controller's
    documented discrete form), ``p`` the plant's response at ``q = exp(-j omega T)``; the first failure above
    ki = 1e-6 (staying in the stable region that starts at ki = 0).
    """
    def margin(ki):
        c = kp + ki * T * q / (1.0 - q) + kd * (1.0 - q) / (T + abs(kd / kp) / n * (1.0 - q))
        return np.min(np.abs(1.0 + c * p)) - 1.0 / ms_max

    if kp <= 0 or kd < 0 or margin(0.0) < 0:
        return 0.0
    return _first_failure(margin, 1e-6)


def _first_failure(f, start):
    """The first root of ``f`` above ``start`` where it turns negative: doubling, then scipy's brentq."""
    lo = start
    while f(2.0 * lo) >= 0:
        lo *= 2.0
    return brentq(f, lo, 2.0 * lo, xtol=1e-12, rtol=1e-12)


def _pid_optimum(p, q, start, ms_max, n=10.0):
    """(kp, kd, ki) maximising ki by scipy's Nelder-Mead over (kp, kd) from a feasible start chosen by hand."""
    res = minimize(lambda x: -_largest_ki(p, q, x[0], x[1], ms_max, n), start, method="Nelder-Mead",
                   options={"xatol": 1e-6, "fatol": 1e-9})
    assert res.success
    return res.x[0], res.x[1], -res.fun


def test_robust_pid_reaches_the_optimum_of_scipy():
    # PID on K = 1, tau = 10 s, theta = 1 s at 10 Hz, Ms <= 1.4, derivative filter N = 10, against the optimum
    # of the hand-written ZOH FOPDT (10 samples of dead time, one of computation delay) from kp = 3, kd = 2.
    w = np.geomspace(1e-2, math.pi / T, 1000)
    q = np.exp(-1j * w * T)
    a = math.exp(-T / 10.0)
    kp_opt, kd_opt, ki_opt = _pid_optimum((1.0 - a) * q / (1.0 - a * q) * q ** 11, q, [3.0, 2.0], 1.4)
    g = tuning.robust(plants.fopdt_plant(1.0, 10.0, 1.0), T, 1.4, pid=True)
    # The search's PID grid (25 kp by 17 kd, refined on 15 by 9 around the best) leaves 1.0 % on this plant:
    # within 2 % of the optimum, never above it.
    assert 0.98 * ki_opt <= g.ki_per_s <= ki_opt * (1.0 + 1e-4)
    assert (g.kp, g.kd_s) == pytest.approx((kp_opt, kd_opt), rel=0.05) and g.derivative_filter_n == 10.0
    # A rule's gains given as the search's scale (here the AMIGO PID of Astrom and Hagglund on the plant with the
    # sampling delay) and a derivative filter N = 8: the optimum of that problem, to the same 2 %.
    _, _, ki8 = _pid_optimum((1.0 - a) * q / (1.0 - a * q) * q ** 11, q, [3.0, 2.0], 1.4, n=8.0)
    ref = tuning.amigo(plants.FopdtModel(1.0, 10.0, 1.15), pid=True)
    g8 = tuning.robust(plants.fopdt_plant(1.0, 10.0, 1.0), T, 1.4, pid=True, reference=ref, derivative_filter_n=8.0)
    assert 0.98 * ki8 <= g8.ki_per_s <= ki8 * (1.0 + 1e-4) and g8.derivative_filter_n == 8.0
    assert g8.kp > 0 and g8.kd_s > 0  # (the ridge of the optimum is flat along kp and kd: the objective is ki)


def test_robust_on_the_cooler_reaches_the_optimum_of_scipy(cooler):
    # The bundled cooler linearised at its operating point (reverse acting: the reference works with -P and
    # positive gains), sampled by python-control's c2d (zero-order hold), its 0.5 s dead time and one sample of
    # computation delay as q^6; PI and PID with Ms <= 1.4 against scipy (PID from kp = 0.5, kd = 1 by hand).
    c = cooler.cooler
    plant = plants.linearise_cooler(c, plants.cooler_operating_point(c))
    w = np.geomspace(1e-4, math.pi / T, 1000)
    q = np.exp(-1j * w * T)
    resp = control.frequency_response(control.c2d(plant.system, T, "zoh"), w)
    p = -np.squeeze(resp.complex) * q ** (round(plant.dead_time_s / T) + 1)
    kp_top = _first_failure(lambda kp: np.min(np.abs(1.0 + kp * p)) - 1.0 / 1.4, 1e-6)  # the largest P gain allowed
    pi_opt = minimize_scalar(lambda kp: -_largest_ki(p, q, kp, 0.0, 1.4), bounds=(0.0, kp_top), method="bounded",
                             options={"xatol": 1e-9})
    kp_opt, kd_opt, ki_opt = _pid_optimum(p, q, [0.5, 1.0], 1.4)
    pi = tuning.robust(plant, T, 1.4)
    pid = tuning.robust(plant, T, 1.4, pid=True)
    # Within the search's resolution (1 % for a PI, 2 % for a PID) of the optimum, never above it.
    assert 0.99 * -pi_opt.fun <= -pi.ki_per_s <= -pi_opt.fun * (1.0 + 1e-4)
    assert 0.98 * ki_opt <= -pid.ki_per_s <= ki_opt * (1.0 + 1e-4)
    assert (-pid.kp, -pid.kd_s) == pytest.approx((kp_opt, kd_opt), rel=0.05)


@pytest.mark.parametrize("pid, kind", [(False, "PI"), (True, "PID")])
def test_a_bound_no_controller_meets_is_refused_with_its_reason(pid, kind):
    # Ms <= 1.001 asks |1 + L| >= 0.999 at every frequency: no loop with integral action and a dead time gets it.
    with pytest.raises(ModelError) as info:
        tuning.robust(plants.fopdt_plant(1.0, 10.0, 1.0), T, 1.001, pid=pid)
    assert info.value.reason == (f"no {kind} gains reach Ms <= 1.001 on this loop (the sampling and dead time may "
                                 "leave too little phase; raise --ms or the rate)")


@pytest.mark.parametrize("points, feasible", [
    # Points of a = 1 + L; each verdict by hand: a crossing of the real axis at Re a < 0 (L left of -1) is out,
    # anywhere else (or along the axis on the right) is in; every |a| here is above 1 / 1.4, and each curve ends
    # with Re a > 0, so only the crossing decides.
    ([(2, -1), (2, 1), (-1, 1), (-1, -1), (2, -1)], False),  # crosses at Re a = -1 after starting below the axis
    ([(2, 1), (-1, 0), (2, -1)], False),  # touches the axis at Re a = -1 on a grid point
    ([(2, 1), (2, 0), (3, 0), (3, -1)], True),  # runs along the axis at Re a = 2 to 3
    ([(3, 1), (-0.5, -1), (2, -1)], True),  # chord crosses at Re a = (1 x -0.5 + 1 x 3) / 2 = 1.25
    ([(0.5, 1), (-3, -1), (2, -1)], False),  # chord crosses at Re a = (1 x -3 - 1 x 0.5) / 2 = -1.25
])
def test_the_feasibility_test_on_curves_worked_by_hand(points, feasible):
    a = np.array([complex(re, im) for re, im in points])
    parts = tuning._LoopParts(a.real[None, None, :], a.imag[None, None, :], np.zeros((1, a.size)),
                              np.zeros((1, a.size)))
    assert list(tuning._feasible_batch(parts, np.array([0.0]), 1.4)) == [feasible]


def test_the_bound_itself_is_feasible():
    # Ms <= Ms_max includes the equality: min |1 + L| = 1 / Ms exactly (0.5 for Ms = 2, both exact in binary)
    # is allowed, just below it is not.
    for edge, feasible in ((0.5, True), (0.5 - 1e-12, False)):
        a = np.array([2 + 1j, 1j * edge, 2 + 1j])
        parts = tuning._LoopParts(a.real[None, None, :], a.imag[None, None, :], np.zeros((1, a.size)),
                                  np.zeros((1, a.size)))
        assert list(tuning._feasible_batch(parts, np.array([0.0]), 2.0)) == [feasible]


def test_an_open_loop_unstable_plant_is_refused():
    # 1 / (10 s - 1) behind 1 s of dead time: its pole at s = +0.1 s^-1 (python-control) asks a Nyquist curve that
    # encircles -1 once counter-clockwise (the Nyquist criterion), which the search's feasibility test excludes;
    # the controllers it keeps all leave the loop unstable, so it must refuse rather than return one of them.
    plant = plants.Plant(control.ss([[0.1]], [[0.1]], [[1.0]], [[0.0]]), 1.0, "unstable")
    assert max(np.real(control.poles(plant.system))) == pytest.approx(0.1, abs=1e-12)
    for pid, kind in ((False, "PI"), (True, "PID")):
        with pytest.raises(ModelError) as info:
            tuning.robust(plant, T, 1.4, pid=pid)
        assert info.value.reason.startswith(f"no {kind} gains reach Ms <= 1.4 on this loop")


def test_robust_on_a_static_plant_reaches_the_optimum_of_scipy():
    # A static gain of 2 behind 0.3 s of dead time (no time constant: the search scales itself by the ultimate
    # gain alone) at 10 Hz with one sample of computation delay, so 2 q^4; Ms <= 1.4. Against scipy's optimum of
    # the same problem written out by hand (PI: bounded minimize_scalar over kp; PID: Nelder-Mead from
    # kp = 0.1, kd = 0.001), to the search's resolution (1 % PI, 2 % PID), never above it. Here a PID's
    # derivative action gains 5.6 % of ki over the PI.
    plant = plants.Plant(control.ss(control.tf([2.0], [1.0])), 0.3)
    w = np.geomspace(1e-3, math.pi / T, 2000)
    q = np.exp(-1j * w * T)
    p = 2.0 * q ** 4
    kp_top = _first_failure(lambda kp: np.min(np.abs(1.0 + kp * p)) - 1.0 / 1.4, 1e-6)
    pi_opt = -minimize_scalar(lambda kp: -_largest_ki(p, q, kp, 0.0, 1.4), bounds=(0.0, kp_top), method="bounded",
                              options={"xatol": 1e-9}).fun
    _, _, pid_opt = _pid_optimum(p, q, [0.1, 0.001], 1.4)
    assert pid_opt > 1.05 * pi_opt
    pi = tuning.robust(plant, T, 1.4)
    pid = tuning.robust(plant, T, 1.4, pid=True)
    assert 0.99 * pi_opt <= pi.ki_per_s <= pi_opt * (1.0 + 1e-4) and pi.kd_s == 0.0
    assert 0.98 * pid_opt <= pid.ki_per_s <= pid_opt * (1.0 + 1e-4) and pid.kd_s > 0.0
