"""Tuning rules against their published formulas, and the robust Ms optimiser."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.loops import plants, tuning, verify
from compensator.loops.plants import FopdtModel, SopdtModel

K, TAU, THETA = 2.0, 30.0, 5.0
T = 0.1


def test_simc_pi_matches_skogestad_2003():
    # Skogestad, J. Process Control 13, 291, 2003: Kc = tau / (K (tau_c + theta)), Ti = min(tau, 4 (tau_c + theta)).
    g, tc = tuning.simc(FopdtModel(K, TAU, THETA))
    assert tc == THETA
    assert g.kp == pytest.approx(TAU / (K * 2 * THETA))
    assert g.ki_per_s == pytest.approx(g.kp / min(TAU, 8 * THETA))
    g2, _ = tuning.simc(FopdtModel(K, 100.0, THETA), tau_c_s=2.0)
    assert g2.ki_per_s == pytest.approx(100.0 / (K * 7.0) / 28.0)  # Ti = 4 (tau_c + theta) < tau


def test_simc_pid_converts_series_to_parallel():
    t1, t2 = 20.0, 4.0
    g, _ = tuning.simc(SopdtModel(K, t1, t2, THETA), pid=True)
    kc, ti, td = t1 / (K * 2 * THETA), min(t1, 8 * THETA), t2
    # Series Kc (1 + 1/(Ti s)) (1 + Td s) = Kc (1 + Td/Ti) + Kc/(Ti s) + Kc Td s.
    assert (g.kp, g.ki_per_s, g.kd_s) == pytest.approx((kc * (1 + td / ti), kc / ti, kc * td))
    with pytest.raises(ModelError, match="second-order"):
        tuning.simc(FopdtModel(K, TAU, THETA), pid=True)


def test_amigo_matches_astrom_hagglund_2004():
    # Astrom and Hagglund, J. Process Control 14, 635, 2004 (PI formulas).
    L, Tt = THETA, TAU
    k = 0.15 / K + (0.35 - L * Tt / (L + Tt) ** 2) * Tt / (K * L)
    ti = 0.35 * L + 13 * L * Tt ** 2 / (Tt ** 2 + 12 * L * Tt + 7 * L ** 2)
    g = tuning.amigo(FopdtModel(K, TAU, THETA))
    assert (g.kp, g.ki_per_s) == pytest.approx((k, k / ti))
    gd = tuning.amigo(FopdtModel(K, TAU, THETA), pid=True)  # AMIGO PID (from memory)
    kd_ = (0.2 + 0.45 * Tt / L) / K
    assert gd.kp == pytest.approx(kd_)
    assert gd.kd_s == pytest.approx(kd_ * 0.5 * L * Tt / (0.3 * L + Tt))


def test_imc_and_zn_step_rules():
    # Rivera, Morari and Skogestad 1986 (from memory): PI Kc = (2 tau + theta) / (2 K lambda), Ti = tau + theta/2.
    g, lam = tuning.imc(FopdtModel(K, TAU, THETA), lambda_s=8.0)
    assert lam == 8.0
    assert g.kp == pytest.approx((2 * TAU + THETA) / (2 * K * 8.0))
    assert g.ki_per_s == pytest.approx(g.kp / (TAU + THETA / 2))
    # Ziegler and Nichols 1942 step-response rule on a = K theta / tau = 1/3.
    z = tuning.ziegler_nichols_step(FopdtModel(K, TAU, THETA))
    assert (z.kp, z.ki_per_s) == pytest.approx((0.9 * 3, 0.9 * 3 / (3 * THETA)))
    zd = tuning.ziegler_nichols_step(FopdtModel(K, TAU, THETA), pid=True)
    assert (zd.kp, zd.ki_per_s, zd.kd_s) == pytest.approx((3.6, 3.6 / 10.0, 3.6 * 2.5))


def test_ziegler_nichols_ultimate_on_the_textbook_third_order_plant():
    # 1/(s+1)^3: phase -180 deg at w = sqrt(3), |G| = 1/8, so Ku = 8 and Pu = 2 pi / sqrt(3) (classical result).
    import control

    plant = plants.Plant(control.ss(control.tf([1], [1, 3, 3, 1])), 0.0)
    ku, pu = tuning.ultimate_point(plant, None)
    assert ku == pytest.approx(8.0, rel=1e-6)
    assert pu == pytest.approx(2 * math.pi / math.sqrt(3), rel=1e-6)
    g = tuning.ziegler_nichols_ultimate(ku, pu, pid=True)
    assert (g.kp, g.ki_per_s, g.kd_s) == pytest.approx((4.8, 4.8 / (pu / 2), 4.8 * pu / 8), rel=1e-6)
    r = tuning.tune(plant, "zn-cycle", 0.01, include_sampling_delay=False)
    assert r.gains.kp == pytest.approx(0.45 * 8.0, rel=1e-6)


def test_sampling_delay_enters_the_rules():
    plant = plants.fopdt_plant(K, TAU, THETA)
    r = tuning.tune(plant, "simc", T, model=FopdtModel(K, TAU, THETA))
    assert r.rule_dead_time_s == pytest.approx(THETA + 1.5 * T)
    assert r.gains.kp == pytest.approx(TAU / (K * 2 * (THETA + 1.5 * T)))
    r0 = tuning.tune(plant, "simc", T, model=FopdtModel(K, TAU, THETA), include_sampling_delay=False)
    assert r0.gains.kp == pytest.approx(1.5)


def test_robust_pi_meets_ms_and_mirrors_for_a_reverse_acting_plant():
    # The gains against scipy's optimum of the same problem: tests/test_loops_robust_search.py.
    plant = plants.fopdt_plant(4.0, 20.0, 2.0)
    g = tuning.robust(plant, T, 1.4)
    assert g.kp > 0 and g.ki_per_s > 0
    ms, _ = verify.max_sensitivity(plant, g, T, 1, verify.frequency_grid(T, 40000, 7.0))
    assert 1.37 < ms <= 1.4 * (1 + 1e-6)
    # A reverse-acting plant gets the mirrored gains.
    m = tuning.robust(plants.fopdt_plant(-4.0, 20.0, 2.0), T, 1.4)
    assert (m.kp, m.ki_per_s) == pytest.approx((-g.kp, -g.ki_per_s), rel=1e-9)


def test_robust_pid_on_the_cooler_is_stable_and_meets_ms(cooler):
    c = cooler.cooler
    plant = plants.linearise_cooler(c, plants.cooler_operating_point(c))
    pi = tuning.robust(plant, T, 1.4)
    pid = tuning.robust(plant, T, 1.4, pid=True)
    for g in (pi, pid):
        rep = verify.verify_loop(plant, g, T, ms_limit=1.4)
        assert rep.stable and rep.margins.ms <= 1.4 * 1.001 and not rep.warnings
        assert g.kp < 0  # more current cools: reverse acting
    assert abs(pid.ki_per_s) > abs(pi.ki_per_s)  # the extra freedom buys integral gain
    assert pid.derivative_filter_n == 10.0 and pid.kd_s < 0  # the firmware PID's default filter, N = 10


def test_robust_reports_infeasible_bounds():
    with pytest.raises(ModelError, match="exceed 1"):
        tuning.robust(plants.fopdt_plant(1.0, 1.0, 0.1), T, 0.9)


def test_unknown_method():
    with pytest.raises(ModelError, match="method"):
        tuning.tune(plants.fopdt_plant(1.0, 1.0, 0.1), "magic", T)


def test_robust_over_several_plants_and_sign_disagreement(cooler):
    c = cooler.cooler
    nominal = plants.linearise_cooler(c, plants.cooler_operating_point(c))
    cold = plants.linearise_cooler(c, plants.cooler_operating_point(c, ambient_temp_c=-25.0))
    g = tuning.robust(nominal, T, 1.4, also_plants=[cold])
    checks = verify.check_cooler_ambient_range(c, g, T, [-25.0, 25.0, 60.0], setpoint_temp_c=15.0)
    assert all(x.stable and x.ms <= 1.4 * 1.001 for x in checks[:2])
    assert not checks[2].reachable  # at 60 C ambient the plate cannot be held at 15 C
    with pytest.raises(ModelError, match="disagree in the sign"):
        tuning.robust(nominal, T, 1.4, also_plants=[plants.fopdt_plant(1.0, 10.0, 1.0)])


def test_static_plant_behind_the_sample_delay(board_ntc):
    # No filter and an instant regulator: the sampled plant is K z^-1, ultimate gain 1/|K| at the Nyquist frequency.
    sup = dataclasses.replace(board_ntc.supply, filter_capacitance_f=0.0)
    plant = plants.bias_supply_plant(sup, regulator_time_constant_s=0.0)
    ku, pu = verify.ultimate_point(plant, T)
    assert ku == pytest.approx(1.0 / sup.volts_per_code) and pu == pytest.approx(2 * T)
    for pid in (False, True):
        g = tuning.robust(plant, T, 1.4, pid=pid)
        rep = verify.verify_loop(plant, g, T)
        assert rep.stable and rep.margins.ms <= 1.4 * 1.001
    with pytest.raises(ModelError, match="static gain"):
        tuning.tune(plant, "simc", T)


def test_amigo_pid_integral_time_is_pinned():
    # AMIGO PID (Astrom and Hagglund, Advanced PID Control, 2006; from memory): Ti = L (0.4 L + 0.8 T) / (L + 0.1 T).
    L, Tt = THETA, TAU
    g = tuning.amigo(FopdtModel(K, TAU, THETA), pid=True)
    ti = L * (0.4 * L + 0.8 * Tt) / (L + 0.1 * Tt)
    assert g.ki_per_s == pytest.approx(g.kp / ti, rel=1e-12)
    assert ti == pytest.approx(16.25, rel=1e-12)  # 5 (2 + 24) / 8 by hand


def test_imc_pid_gain_derivative_time_and_default_lambda_are_pinned():
    # Rivera, Morari and Skogestad, Ind. Eng. Chem. Process Des. Dev. 25, 252, 1986 (from memory), FOPDT PID:
    # Kc = (2 tau + theta) / (K (2 lambda + theta)), Ti = tau + theta / 2, Td = tau theta / (2 tau + theta).
    g, lam = tuning.imc(FopdtModel(K, TAU, THETA), pid=True, lambda_s=4.0)
    kc = (2 * TAU + THETA) / (K * (2 * 4.0 + THETA))
    assert (g.kp, g.ki_per_s, g.kd_s) == pytest.approx((kc, kc / (TAU + THETA / 2),
                                                        kc * TAU * THETA / (2 * TAU + THETA)), rel=1e-12)
    assert (kc, TAU * THETA / (2 * TAU + THETA)) == pytest.approx((65 / 26, 150 / 65), rel=1e-12)  # by hand
    # Defaults: lambda = 1.7 theta (PI) and 0.8 theta (PID), at least 0.1 tau (the paper's lambda/theta > 1.7 and
    # > 0.8 recommendations, from memory).
    assert tuning.imc(FopdtModel(K, TAU, THETA))[1] == pytest.approx(8.5)
    assert tuning.imc(FopdtModel(K, TAU, THETA), pid=True)[1] == pytest.approx(4.0)
    assert tuning.imc(FopdtModel(K, 100.0, 1.0))[1] == pytest.approx(10.0)


def test_ziegler_nichols_ultimate_pi_integral_time_is_pinned():
    # Ziegler and Nichols, Trans. ASME 64, 759, 1942: PI kp = 0.45 Ku, Ti = Pu / 1.2.
    g = tuning.ziegler_nichols_ultimate(-3.0, 12.0)
    assert (g.kp, g.ki_per_s, g.kd_s) == pytest.approx((-1.35, -1.35 / 10.0, 0.0), rel=1e-12)


def test_fopdt_from_the_ultimate_point_has_that_ultimate_point():
    m = tuning.fopdt_from_ultimate(-4.2, -2.6, 7.0)
    ku, pu = tuning.ultimate_point(plants.model_plant(m), None)  # independent phase-crossing search
    assert (ku, pu) == pytest.approx((-2.6, 7.0), rel=1e-6)
    with pytest.raises(ModelError, match="must exceed 1"):
        tuning.fopdt_from_ultimate(4.2, -2.6, 7.0)


def test_ms_bound_out_of_range_names_the_reason():
    with pytest.raises(ModelError, match="at most 10") as info:
        tuning.tune(plants.fopdt_plant(1.0, 1.0, 0.1), "robust", T, ms_max=1e9)
    assert info.value.key == "ms_max"


def test_feasibility_test_against_a_direct_computation():
    # Ms <= bound and no crossing of the negative real axis left of -1, computed directly (interpolated crossing
    # points, |1 + L| by abs) on random loops; the search's division-free form must agree on every controller.
    rng = np.random.default_rng(7)
    # Nyquist-like spirals L = g exp(-j 3 pi x) / (1 + 4 x) with a random gain g per controller, and noise.
    x = np.linspace(0.0, 1.0, 60)
    gain = rng.uniform(0.1, 2.0, (40, 1, 1))
    fixed = 1.0 + gain * np.exp(-3j * np.pi * x) / (1.0 + 4.0 * x) + 0.02 * rng.normal(size=(40, 3, 60))
    per_ki = 0.02 * (rng.normal(size=(3, 60)) + 1j * rng.normal(size=(3, 60)))
    ki = rng.uniform(0.0, 2.0, 40)
    parts = tuning._LoopParts(fixed.real.copy(), fixed.imag.copy(), per_ki.real.copy(), per_ki.imag.copy())
    ours = tuning._feasible_batch(parts, ki, 1.4)
    loop = fixed + ki[:, None, None] * per_ki - 1.0  # L itself
    expected = []
    for c in range(40):
        ok = True
        for p in range(3):
            curve = loop[c, p]
            if np.min(np.abs(1.0 + curve)) < 1.0 / 1.4 or curve[-1].real < -1.0:
                ok = False
            for a, b in zip(curve[:-1], curve[1:]):
                if a.imag * b.imag <= 0 and a.imag != b.imag:
                    x = a.real + a.imag / (a.imag - b.imag) * (b.real - a.real)
                    ok &= not x < -1.0
        expected.append(ok)
    assert list(ours) == expected
    assert 0 < sum(expected) < 40  # both outcomes occur


def test_robust_search_returns_the_same_gains_without_the_shortcut():
    # The search bisects only controllers feasible at the smallest ki; bisecting every controller must give the
    # same largest ki (the shortcut drops nothing that could win).
    plant = plants.fopdt_plant(2.0, 30.0, 5.0)
    w = np.append(verify.loop_frequency_grid(plant, T, 700, 6.0), np.pi / T)
    p_resp = plants.discrete_frequency_response(plant, T, w)[None, :]
    kp = np.linspace(0.05, 2.0, 12)
    ours = tuning._max_ki(p_resp, w, T, kp, np.zeros_like(kp), 10.0, 1.0, 1.4, 100.0)
    parts = tuning._loop_parts(p_resp, w, T, kp, np.zeros_like(kp), 10.0)
    lo, hi = np.full(12, np.log(100.0) - 30.0), np.full(12, np.log(100.0))
    ok_lo = tuning._feasible_batch(parts, np.exp(lo), 1.4)
    for _ in range(tuning._BISECTION_STEPS):
        mid = 0.5 * (lo + hi)
        ok = tuning._feasible_batch(parts, np.exp(mid), 1.4)
        lo, hi = np.where(ok, mid, lo), np.where(ok, hi, mid)
    assert np.array_equal(ours, np.where(ok_lo, np.exp(lo), 0.0))
    # A grid of controllers keeps its shape (one largest ki per (kp, kd) pair).
    grid = tuning._max_ki(p_resp, w, T, kp.reshape(3, 4), np.zeros((3, 4)), 10.0, 1.0, 1.4, 100.0)
    assert grid.shape == (3, 4) and np.array_equal(grid.ravel(), ours)
    assert np.count_nonzero(ours == 0) >= 1 and np.count_nonzero(ours) >= 4


@pytest.mark.parametrize("call, key, reason", [
    (lambda: tuning.simc(FopdtModel(0.0, 30.0, 5.0)), "", "the model gain must be finite and nonzero"),
    (lambda: tuning.amigo(FopdtModel(float("nan"), 30.0, 5.0)), "", "the model gain must be finite and nonzero"),
    (lambda: tuning.imc(FopdtModel(2.0, 0.0, 5.0)), "", "the model time constant must be positive"),
    (lambda: tuning.simc(FopdtModel(2.0, 30.0, 5.0), pid=True), "",
     "SIMC PID needs a second-order model (tau2 > 0): give --sopdt, or tune a PI"),
    (lambda: tuning.simc(SopdtModel(2.0, 30.0, 0.0, 5.0), pid=True), "",
     "SIMC PID needs a second-order model (tau2 > 0): give --sopdt, or tune a PI"),
    (lambda: tuning.simc(FopdtModel(2.0, 30.0, 0.0)), "",
     "SIMC needs tau_c + theta > 0: the model has no dead time, give --tau-c"),
    (lambda: tuning.amigo(FopdtModel(2.0, 30.0, 0.0)), "", "AMIGO needs a positive dead time"),
    (lambda: tuning.imc(FopdtModel(2.0, 30.0, 5.0), lambda_s=0.0), "", "IMC lambda must be positive"),
    (lambda: tuning.imc(FopdtModel(2.0, 30.0, 0.0), lambda_s=-1.0), "", "IMC lambda must be positive"),
    (lambda: tuning.ziegler_nichols_step(FopdtModel(2.0, 30.0, 0.0)), "",
     "the Ziegler-Nichols step rule needs a positive dead time"),
    (lambda: tuning.ziegler_nichols_ultimate(0.0, 7.0), "",
     "the ultimate gain must be nonzero and the ultimate period positive"),
    (lambda: tuning.ziegler_nichols_ultimate(2.0, 0.0), "",
     "the ultimate gain must be nonzero and the ultimate period positive"),
    (lambda: tuning.ms_point_ultimate(0.0, 7.0), "",
     "the ultimate gain must be finite and nonzero and the ultimate period positive"),
    (lambda: tuning.ms_point_ultimate(float("inf"), 7.0), "",
     "the ultimate gain must be finite and nonzero and the ultimate period positive"),
    (lambda: tuning.ms_point_ultimate(2.0, 0.0), "",
     "the ultimate gain must be finite and nonzero and the ultimate period positive"),
    (lambda: tuning.ms_point_ultimate(2.0, float("nan")), "",
     "the ultimate gain must be finite and nonzero and the ultimate period positive"),
    (lambda: tuning.ms_point_ultimate(2.0, 7.0, 1.0), "ms_max",
     "must exceed 1 and be at most 10 (1.4 is robust, 2 aggressive; a larger bound no longer restrains the loop), "
     "got 1"),
    (lambda: tuning.ms_point_ultimate(2.0, 7.0, 10.5), "ms_max",
     "must exceed 1 and be at most 10 (1.4 is robust, 2 aggressive; a larger bound no longer restrains the loop), "
     "got 10.5"),
    (lambda: tuning.fopdt_from_ultimate(0.0, 2.0, 7.0), "static_gain", "must be finite and nonzero, got 0.0"),
    (lambda: tuning.fopdt_from_ultimate(2.0, float("nan"), 7.0), "ultimate_gain",
     "must be finite and nonzero, got nan"),
    (lambda: tuning.fopdt_from_ultimate(2.0, 2.0, 0.0), "ultimate_period_s", "must be finite and nonzero, got 0.0"),
    (lambda: tuning.fopdt_from_ultimate(2.0, 2.0, -7.0), "ultimate_period_s", "must be positive, got -7.0"),
    (lambda: tuning.fopdt_from_ultimate(2.0, 0.5, 7.0), "static_gain",
     "K Ku = 1 must exceed 1 (same sign, and a loop gain that needs more than K to oscillate); check the signs and "
     "units of the static and ultimate gains"),
    (lambda: tuning.fopdt_from_ultimate(-2.0, 2.0, 7.0), "static_gain",
     "K Ku = -4 must exceed 1 (same sign, and a loop gain that needs more than K to oscillate); check the signs and "
     "units of the static and ultimate gains"),
    (lambda: tuning.tune(plants.fopdt_plant(1.0, 1.0, 0.1), "simc", 0.0), "", "the sample time must be positive"),
    (lambda: tuning.tune(plants.fopdt_plant(1.0, 1.0, 0.1), "simc", float("nan")), "",
     "the sample time must be positive"),
    (lambda: tuning.tune(plants.fopdt_plant(1.0, 1.0, 0.1), "pid", 0.1), "",
     "method must be one of simc, amigo, imc, zn, zn-cycle, robust, got 'pid'"),
    (lambda: tuning.tune(plants.fopdt_plant(1.0, 1.0, 0.1), "robust", 0.1, ms_max=1.0), "ms_max",
     "must exceed 1 and be at most 10 (1.4 is robust, 2 aggressive; a larger bound no longer restrains the loop), "
     "got 1"),
])
def test_every_refusal_names_its_key_and_reason(call, key, reason):
    with pytest.raises(ModelError) as info:
        call()
    assert (info.value.key, info.value.reason) == (key, reason)


def test_the_edges_of_the_accepted_inputs():
    # Values just inside every bound are accepted (a mutated bound would refuse them).
    assert tuning.ziegler_nichols_ultimate(2.0, 0.5).ki_per_s == pytest.approx(0.9 / (0.5 / 1.2))
    assert tuning.ziegler_nichols_ultimate(-2.0, 7.0, pid=True).kp == pytest.approx(-1.2)
    assert tuning.ms_point_ultimate(2.0, 7.0, 10.0).kp > 0
    assert tuning.ms_point_ultimate(2.0, 0.5, 1.0001).kp > 0
    m = tuning.fopdt_from_ultimate(1.0, 1.0001, 7.0)
    assert m.gain == 1.0 and m.time_constant_s > 0
    m = tuning.fopdt_from_ultimate(2.0, 1.0, 7.0)  # a Ku of exactly 1 is a valid ultimate gain
    assert m.time_constant_s == pytest.approx(math.sqrt(3.0) * 7.0 / (2.0 * math.pi), rel=1e-12)
    assert tuning.imc(FopdtModel(2.0, 30.0, 0.0), lambda_s=1e-3)[1] == 1e-3
    assert tuning.simc(FopdtModel(2.0, 30.0, 0.0), tau_c_s=1e-3)[1] == 1e-3
    assert tuning.sampling_dead_time_s(0.1) == pytest.approx(0.15) and tuning.sampling_dead_time_s(0.1, 2) == 0.25


def test_a_loose_ms_bound_from_ku_and_pu_takes_the_point_closest_to_minus_one():
    # With Ti = Pu / 1.2, r = 1.2 / (2 pi): the ray L = -x (1 - j r) comes no closer to -1 than r / sqrt(1 + r^2)
    # (at x = 1 / (1 + r^2)); a bound looser than that (Ms 10) takes that point, a traceback before.
    r = 1.2 / (2.0 * math.pi)
    g = tuning.ms_point_ultimate(2.0, 7.0, 10.0)
    assert g.kp == pytest.approx(2.0 / (1.0 + r * r), rel=1e-12)
    assert tuning.ms_point_ultimate(2.0, 7.0, 5.0).kp < g.kp


def test_tune_records_how_each_method_got_its_gains():
    model = FopdtModel(2.0, 30.0, 5.0)
    plant = plants.model_plant(model)
    rob = tuning.tune(plant, "robust", T, ms_max=1.6)
    assert rob.gains == tuning.robust(plant, T, 1.6)
    assert (rob.method, rob.pid, rob.model, rob.ms_target) == ("robust", False, None, 1.6)
    assert rob.rule_dead_time_s == pytest.approx(1.5 * T)
    cyc = tuning.tune(plant, "zn-cycle", T, pid=True, computation_delay_samples=2)
    ku, pu = tuning.ultimate_point(plant, T, 2)  # the sampled loop with two samples of computation delay
    assert (cyc.ultimate_gain, cyc.ultimate_period_s) == (ku, pu)
    assert cyc.gains == tuning.ziegler_nichols_ultimate(ku, pu, pid=True)
    assert (cyc.method, cyc.pid, cyc.rule_dead_time_s) == ("zn-cycle", True, pytest.approx(2.5 * T))
    cont = tuning.tune(plant, "zn-cycle", T, include_sampling_delay=False)
    assert (cont.ultimate_gain, cont.ultimate_period_s) == tuning.ultimate_point(plant, None)
    assert cont.rule_dead_time_s == 0.0
    # The rules see the model's dead time plus T/2 + n T for n samples of computation delay.
    two = tuning.tune(plant, "simc", T, model=model, computation_delay_samples=2)
    assert two.rule_dead_time_s == pytest.approx(5.0 + 2.5 * T) and two.model == model
    assert two.closed_loop_time_constant_s == pytest.approx(5.0 + 2.5 * T)
    assert tuning.tune(plant, "imc", T, model=model, tau_c_s=7.0).closed_loop_time_constant_s == 7.0
    assert tuning.tune(plant, "zn", T, model=model).closed_loop_time_constant_s is None
    amigo_pid = tuning.tune(plant, "amigo", T, model=model, pid=True)
    assert amigo_pid.gains == tuning.amigo(dataclasses.replace(model, dead_time_s=5.0 + 1.5 * T), pid=True)


def test_rules_fit_their_own_model_and_simc_pid_converts_any_positive_tau2():
    plant = plants.sopdt_plant(2.0, 30.0, 4.0, 5.0)
    # Without a model the rules fit one: an FOPDT for every rule but the SIMC PID, which needs the SOPDT.
    from compensator.loops.identify import approximate_plant

    fopdt = approximate_plant(plant, "fopdt")
    res = tuning.tune(plant, "amigo", T)
    assert res.model == fopdt and res.pid is False
    assert res.gains == tuning.amigo(dataclasses.replace(fopdt, dead_time_s=fopdt.dead_time_s + 1.5 * T))
    assert tuning.tune(plant, "simc", T, pid=True).model == approximate_plant(plant, "sopdt")
    # Skogestad (2003) SIMC PID in series form, Kc (1 + Td / Ti), Kc / Ti, Kc Td in parallel form, for tau2 < 1 s too.
    g, tc = tuning.simc(SopdtModel(2.0, 30.0, 0.5, 5.0), pid=True)
    kc, ti = 30.0 / (2.0 * 10.0), 30.0
    assert (g.kp, g.ki_per_s, g.kd_s) == pytest.approx((kc * (1 + 0.5 / ti), kc / ti, kc * 0.5), rel=1e-12)


def test_loop_parts_are_one_plus_the_controller_times_the_plant():
    # fixed + ki per_ki must equal 1 + C(exp(j w T)) P for a PID with any derivative filter N (python-control's
    # frequency response of the controller transfer function is the reference).
    plant = plants.fopdt_plant(2.0, 30.0, 5.0)
    w = verify.loop_frequency_grid(plant, T, 300, 5.0)
    p = plants.discrete_frequency_response(plant, T, w)
    kp, ki, kd, n = np.array([0.8, 1.1]), np.array([0.03, 0.05]), np.array([2.0, 4.0]), 5.0
    parts = tuning._loop_parts(p[None, :], w, T, kp, kd, n)
    for j in range(2):
        c = verify.controller_tf(verify.PidGains(kp[j], ki[j], kd[j], n), T)
        ref = 1.0 + c(np.exp(1j * w * T)) * p
        got = parts.fixed_re[j, 0] + ki[j] * parts.per_ki_re[0] + 1j * (parts.fixed_im[j, 0] + ki[j] * parts.per_ki_im[0])
        assert np.allclose(got, ref, rtol=1e-9, atol=1e-12)


def test_tune_passes_every_option_to_the_robust_search_and_checks_ms_only_there():
    model = FopdtModel(2.0, 30.0, 5.0)
    plant = plants.model_plant(model)
    two = tuning.tune(plant, "robust", T, computation_delay_samples=2, model=model)
    assert two.gains == tuning.robust(plant, T, 1.4, computation_delay_samples=2) and two.model == model
    assert tuning.tune(plant, "robust", T, pid=True).gains == tuning.robust(plant, T, 1.4, pid=True)
    # The Ms bound is the robust method's: the rules ignore a value the robust method would refuse.
    assert tuning.tune(plant, "simc", T, ms_max=20.0, model=model).gains == tuning.tune(plant, "simc", T, model=model).gains


def test_rules_accept_dead_times_below_a_second():
    # AMIGO (Astrom and Hagglund 2004) PI with K = 2, T = 30 s, L = 0.5 s, and the Ziegler-Nichols step rule.
    k_, t_, l_ = 2.0, 30.0, 0.5
    g = tuning.amigo(FopdtModel(k_, t_, l_))
    kp = 0.15 / k_ + (0.35 - l_ * t_ / (l_ + t_) ** 2) * t_ / (k_ * l_)
    ti = 0.35 * l_ + 13.0 * l_ * t_ ** 2 / (t_ ** 2 + 12.0 * l_ * t_ + 7.0 * l_ ** 2)
    assert (g.kp, g.ki_per_s) == pytest.approx((kp, kp / ti), rel=1e-12)
    z = tuning.ziegler_nichols_step(FopdtModel(k_, t_, l_))
    assert (z.kp, z.ki_per_s) == pytest.approx((0.9 * t_ / (k_ * l_), 0.9 * t_ / (k_ * l_) / (3.0 * l_)), rel=1e-12)
    m = tuning.fopdt_from_ultimate(2.0, 3.0, 0.5)
    assert tuning.ultimate_point(plants.model_plant(m), None)[1] == pytest.approx(0.5, rel=1e-6)


def test_rules_reduce_a_second_order_model_by_the_half_rule():
    # Skogestad's half rule (J. Process Control 13, 291, 2003): half of tau2 = 4 s goes to tau1 and half to the
    # dead time, so SOPDT(K 2, 30 s, 4 s, 5 s) -> FOPDT(2, 32 s, 7 s); then each rule's formula by hand.
    m = SopdtModel(2.0, 30.0, 4.0, 5.0)
    g, tc = tuning.simc(m)  # Skogestad 2003 PI: Kc = 32 / (2 (7 + 7)), Ti = min(32, 4 x 14) = 32
    assert tc == 7.0 and (g.kp, g.ki_per_s) == pytest.approx((32 / 28, 32 / 28 / 32), rel=1e-12)
    z = tuning.ziegler_nichols_step(m)  # Ziegler and Nichols 1942: a = 2 x 7 / 32, kp = 0.9 / a, Ti = 3 x 7
    assert (z.kp, z.ki_per_s) == pytest.approx((0.9 * 32 / 14, 0.9 * 32 / 14 / 21), rel=1e-12)
    i, _ = tuning.imc(m, lambda_s=8.0)  # Rivera, Morari and Skogestad 1986: (64 + 7) / (2 x 2 x 8), Ti = 35.5
    assert (i.kp, i.ki_per_s) == pytest.approx((71 / 32, 71 / 32 / 35.5), rel=1e-12)
    a = tuning.amigo(m)  # Astrom and Hagglund 2004 PI with T = 32 s, L = 7 s
    kp = 0.15 / 2 + (0.35 - 7 * 32 / 39 ** 2) * 32 / (2 * 7)
    ti = 0.35 * 7 + 13 * 7 * 32 ** 2 / (32 ** 2 + 12 * 7 * 32 + 7 * 7 ** 2)
    assert (a.kp, a.ki_per_s) == pytest.approx((kp, kp / ti), rel=1e-12)


def test_rules_accept_time_constants_below_a_second():
    # Skogestad 2003 SIMC PI on K = 2, tau = 0.5 s, theta = 0.1 s: Kc = 0.5 / (2 x 0.2) = 1.25, Ti = min(0.5, 0.8).
    g, _ = tuning.simc(FopdtModel(2.0, 0.5, 0.1))
    assert (g.kp, g.ki_per_s) == pytest.approx((1.25, 2.5), rel=1e-12)


@pytest.mark.parametrize("ku, pu, ms", [(2.0, 7.0, 1.4), (-0.8, 40.0, 2.0)])
def test_ms_point_pi_from_ku_and_pu_against_a_root_search(ku, pu, ms):
    # At omega_u the loop is L = -x (1 - j r), x = kp / Ku, r = 1 / (omega_u Ti), Ti = Pu / 1.2 (the
    # Ziegler-Nichols PI integral time, kept). The smaller x with |1 + L| = 1 / Ms, found by scipy's brentq on
    # [0, 1 / (1 + r^2)] (where |1 + L| falls from 1 to its minimum), gives kp; ki = kp / Ti.
    from scipy.optimize import brentq

    r = 1.2 / (2.0 * math.pi)
    x = brentq(lambda x: abs(1.0 - x * (1.0 - 1j * r)) - 1.0 / ms, 0.0, 1.0 / (1.0 + r * r), xtol=1e-15)
    g = tuning.ms_point_ultimate(ku, pu, ms)
    assert g.kp == pytest.approx(x * ku, rel=1e-9)
    assert g.ki_per_s == pytest.approx(x * ku / (pu / 1.2), rel=1e-9)
