"""Verification of the sampled loop against python-control on independently built systems."""

from __future__ import annotations

import dataclasses

import control
import numpy as np
import pytest

from compensator.loops import plants, tuning, verify
from compensator.loops.verify import PidGains

T = 0.1


def _independent_loop(k, tau, theta_samples, kp, ki):
    """L = C P built only from python-control: sample_system (ZOH), z^-(d+1), forward-Euler PI."""
    p = control.sample_system(control.tf([k], [tau, 1]), T, "zoh")
    delay = control.tf([1], [1] + [0] * (theta_samples + 1), T)
    c = control.tf([kp, ki * T - kp], [1, -1], T)  # kp + ki T z^-1 / (1 - z^-1)
    return c, p * delay


@pytest.mark.filterwarnings("ignore:stability_margins")
def test_margins_match_python_control_stability_margins():
    k, tau, theta = 2.0, 30.0, 0.5
    g = PidGains(1.2, 0.06)
    rep = verify.verify_loop(plants.fopdt_plant(k, tau, theta), g, T)
    c, p = _independent_loop(k, tau, 5, g.kp, g.ki_per_s)
    gm, pm, sm, wpc, wgc, _ = control.stability_margins(c * p)
    m = rep.margins
    assert m.gain_margin == pytest.approx(gm, rel=1e-3)
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-3)
    assert m.crossover_rad_s == pytest.approx(wgc, rel=1e-3)
    assert m.phase_crossover_rad_s == pytest.approx(wpc, rel=1e-3)
    # Ms = 1 / min |1 + L| (dense grid) and python-control's stability margin sm = min |1 + L|.
    assert m.ms == pytest.approx(1.0 / sm, rel=1e-3)
    w = np.linspace(1e-4, np.pi / T * 0.9999, 200000)
    z = np.exp(1j * w * T)
    assert m.ms == pytest.approx(1.0 / np.min(np.abs(1 + c(z) * p(z))), rel=1e-4)


def test_step_data_match_python_control_step_info():
    k, tau, theta = -3.0, 12.0, 1.0
    g = PidGains(-0.9, -0.08)
    rep = verify.verify_loop(plants.fopdt_plant(k, tau, theta), g, T)
    c, p = _independent_loop(k, tau, 10, g.kp, g.ki_per_s)
    cl = control.feedback(c * p, 1)
    t = rep.time_s
    info = control.step_info(control.forced_response(cl, t, np.ones_like(t)).outputs, T=t, yfinal=1.0)
    s = rep.step
    assert s.rise_time_s == pytest.approx(info["RiseTime"], abs=T)
    assert s.settling_time_s == pytest.approx(info["SettlingTime"], abs=T)
    assert s.overshoot_pct == pytest.approx(info["Overshoot"], rel=1e-6, abs=1e-9)
    assert rep.stable and rep.warnings == ()
    # The actuator starts at kp per unit setpoint step, after the one-sample computation delay is not in u.
    assert rep.actuator[0] == pytest.approx(g.kp)


def test_controller_model_is_the_firmware_reference():
    from compensator.firmware.pid import FloatPid, PidSettings

    g = PidGains(0.8, 0.3, 0.5, 10.0, 0.6)
    pid = FloatPid(PidSettings(g.kp, g.ki_per_s, g.kd_s, T, -1e9, 1e9, 10.0, 0.6))
    rng = np.random.default_rng(3)
    n = 400
    r = rng.normal(size=n)
    y = rng.normal(size=n)
    y[0] = 0.0  # the reference never kicks the derivative on its first sample; nor does a zero history
    u = np.array([pid.step(a, b) for a, b in zip(r, y)])
    t = np.arange(n) * T
    c = verify.controller_tf(g, T)
    cr = verify.controller_tf(g, T, setpoint_path=True)
    model = control.forced_response(cr, t, r).outputs - control.forced_response(c, t, y).outputs
    np.testing.assert_allclose(u, model, rtol=1e-9, atol=1e-9)


def test_unstable_and_poor_loops_are_flagged():
    plant = plants.fopdt_plant(1.0, 10.0, 1.0)
    ku, _ = verify.ultimate_point(plant, T)
    bad = verify.verify_loop(plant, PidGains(1.3 * ku, 0.1), T)
    assert not bad.stable and "UNSTABLE" in bad.warnings[0]
    poor = verify.verify_loop(plant, PidGains(0.7 * ku, 0.5), T)
    assert poor.stable and any("gain margin" in w for w in poor.warnings)


def test_cooler_gain_reversal_is_warned(cooler):
    p = dataclasses.replace(cooler.cooler, max_current_a=12.0)
    i_opt = plants.cooler_optimum_current_a(p)
    op = plants.cooler_operating_point(p, current_a=min(1.3 * i_opt, 11.9))
    plant = plants.linearise_cooler(p, op)
    g = tuning.tune(plant, "amigo", T).gains
    rep = verify.verify_loop(plant, g, T)
    assert any("REVERSES SIGN" in w for w in rep.warnings)
    normal = plants.linearise_cooler(p, plants.cooler_operating_point(p))
    assert not verify.cooler_warnings(normal)


def test_unsettled_step_is_reported_not_invented():
    plant = plants.fopdt_plant(1.0, 10.0, 1.0)
    short = verify.verify_loop(plant, PidGains(0.5, 0.05), T, horizon_s=5.0)
    assert np.isnan(short.step.settling_time_s) and "not settled" in short.warnings[-1]
    full = verify.verify_loop(plant, PidGains(0.5, 0.05), T)
    assert np.isfinite(full.step.settling_time_s) and not full.warnings


def test_cooler_operating_warnings_and_limits(cooler):
    from compensator.physics.thermal import dew_point_c

    c = cooler.cooler
    op = plants.cooler_operating_point(c)
    # The demo setpoint (20 C) clears the dew point at 25 C / 50 % RH plus 3 K (Magnus formula) ...
    assert float(dew_point_c(25.0, 50.0)) + 3.0 < 20.0
    assert verify.cooler_operating_warnings(c, op) == []
    # ... but a setpoint of 15 C at 60 % RH does not (dew point 16.7 C).
    humid = dataclasses.replace(c, ambient_relative_humidity_pct=60.0, setpoint_temp_c=15.0)
    assert float(dew_point_c(25.0, 60.0)) + 3.0 > 15.0
    assert any("CONDENSATION" in w for w in verify.cooler_operating_warnings(humid, plants.cooler_operating_point(humid)))
    dry = dataclasses.replace(c, ambient_relative_humidity_pct=20.0)
    assert verify.cooler_operating_warnings(dry, plants.cooler_operating_point(dry)) == []
    low_limit = dataclasses.replace(dry, max_hot_temp_c=30.0)
    hot = verify.cooler_operating_warnings(low_limit, plants.cooler_operating_point(low_limit))
    assert len(hot) == 1 and "hot side settles" in hot[0]
    lo, hi = plants.cooler_current_limits_a(c)
    assert (lo, hi) == (-3.0, 3.0)
    big = dataclasses.replace(c, max_current_a=12.0)
    lo, hi = plants.cooler_current_limits_a(big)
    assert hi == pytest.approx(plants.cooler_optimum_current_a(big)) and -12.0 < lo < 0


@pytest.mark.filterwarnings("ignore:stability_margins")
def test_margins_of_a_long_dead_time_match_python_control_over_the_whole_grid():
    # The margins are searched only where a gain or phase crossover can set them; python-control's
    # stability_margins on every grid point with |L| >= 0.01 (the reference) must find the same values.
    plant = plants.fopdt_plant(2.0, 300.0, 60.0)
    for g in (PidGains(0.7, 0.004), PidGains(0.7, 0.004, 25.0), PidGains(1.6, 0.012)):
        ours = verify._margins(plant, g, 1.0, 1)
        w = verify.loop_frequency_grid(plant, 1.0, 6000, 7.0)
        loop = verify.controller_frequency_response(g, 1.0, w) * plants.discrete_frequency_response(plant, 1.0, w)
        big = np.flatnonzero(np.abs(loop) >= 0.01)
        every = slice(None, big[-1] + 4, 3)
        gm, pm, _, wpc, wgc, _ = control.stability_margins(
            (np.abs(loop[every]), np.degrees(np.unwrap(np.angle(loop[every]))), w[every]))
        assert ours.gain_margin == pytest.approx(gm, rel=1e-6)
        assert ours.phase_margin_deg == pytest.approx(pm, rel=1e-6)
        assert ours.phase_crossover_rad_s == pytest.approx(wpc, rel=1e-6)
        assert ours.crossover_rad_s == pytest.approx(wgc, rel=1e-6)


def test_margin_search_span_holds_every_crossover_that_can_set_a_margin():
    # A loop drawn by hand: |L| = 4, 2, 0.5, 0.3, 0.02 ... with phase crossovers at |L| = 0.5 and 0.02.
    loop = np.array([4 - 1j, 2 - 1j, 0.8 - 0.2j, -0.5 - 0.1j, -0.5 + 0.1j, -0.3 + 0.1j, 0.1 + 0.1j, 0.05 - 0.05j,
                     -0.02 - 0.001j, -0.02 + 0.001j, 0.001 + 0.001j] + [1e-4] * 20)
    span = verify._margin_search_span(loop)
    # The gain crossover lies between points 1 and 2; the crossover at |L| = 0.5 between 3 and 4 sets the gain
    # margin (2); the one at |L| = 0.02 (GM 50) is 25 times farther from 1 and is left out.
    assert span == slice(0, 3 + 5)
    assert verify._margin_search_span(np.full(10, 0.5 + 0j)) == slice(0, 0)  # no crossover at all
    assert verify._margin_search_span(np.full(10, 1e-3 + 0j)) == slice(0, 0)


def test_one_blas_thread_inside_and_the_limits_restored_after():
    from threadpoolctl import threadpool_info

    from compensator.loops._blas import one_blas_thread

    before = [lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"]
    with one_blas_thread():
        inside = [lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"]
    after = [lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"]
    assert inside == [1] * len(before) and after == before
