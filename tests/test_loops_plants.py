"""Plant models: the cooler's heat balance, its linearisation, exact sampled delays, the bias supply."""

from __future__ import annotations

import dataclasses

import control
import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.loops import plants


@pytest.fixture
def params(cooler):
    return cooler.cooler


def test_steady_state_satisfies_both_heat_balances(params):
    currents = np.linspace(-2.0, 3.0, 11)
    tc, th = plants.cooler_steady_state(params, currents)
    dtc, dth, dts = plants.cooler_derivatives(params, tc, th, tc, currents)
    assert np.max(np.abs(dtc)) < 1e-10 and np.max(np.abs(dth)) < 1e-10 and np.max(np.abs(dts)) < 1e-12
    # Heating current warms the plate, cooling current cools it.
    assert tc[0] > params.ambient_temp_c > tc[-1]


def test_operating_point_holds_setpoint_on_normal_branch(params):
    op = plants.cooler_operating_point(params)
    assert op.cold_temp_c == pytest.approx(params.setpoint_temp_c, abs=1e-9)
    assert 0 < op.current_a < op.optimum_current_a
    assert op.gain_k_per_a < 0 and not op.beyond_optimum
    # Energy balance of the module: electrical power = heat released - heat pumped (first law).
    qh = op.heat_pumped_w + op.electrical_power_w
    assert qh == pytest.approx((op.hot_temp_c - op.ambient_temp_c) / params.sink_resistance_k_per_w, rel=1e-6)


def test_optimum_current_matches_ideal_module_formula(params):
    # With the hot side pinned to ambient (ideal sink), dTc/dI = 0 gives I = S Tc / R at the coldest point
    # (differentiate the cold-side balance; common practice for a lumped module).
    p = dataclasses.replace(params, sink_resistance_k_per_w=1e-7, max_current_a=50.0, cold_leak_conductance_w_per_k=0.0)
    i_opt = plants.cooler_optimum_current_a(p)
    tc_min = float(plants.cooler_steady_state(p, i_opt)[0])
    assert i_opt == pytest.approx(p.seebeck_v_per_k * (tc_min + 273.15) / p.resistance_ohm, rel=1e-5)


def test_linearisation_matches_the_nonlinear_model(params):
    op = plants.cooler_operating_point(params)
    plant = plants.linearise_cooler(params, op)
    # DC gain of the state-space model equals the slope of the exact steady state.
    assert plant.dc_gain == pytest.approx(op.gain_k_per_a, rel=1e-6)
    # Jacobian against central differences of the nonlinear derivatives.
    x0 = np.array([op.cold_temp_c, op.hot_temp_c, op.cold_temp_c])
    a = np.asarray(plant.system.A)
    for j in range(3):
        h = np.zeros(3)
        h[j] = 1e-4
        f = lambda x: np.array(plants.cooler_derivatives(params, *x, op.current_a))  # noqa: E731
        np.testing.assert_allclose((f(x0 + h) - f(x0 - h)) / 2e-4, a[:, j], rtol=1e-6, atol=1e-12)
    assert plant.dead_time_s == params.sensor_dead_time_s


def test_gain_reverses_beyond_the_optimum(params):
    p = dataclasses.replace(params, max_current_a=12.0)
    op = plants.cooler_operating_point(p, current_a=0.5 * (plants.cooler_optimum_current_a(p) + 12.0))
    assert op.beyond_optimum and op.gain_k_per_a > 0
    assert plants.linearise_cooler(p, op).dc_gain > 0


def test_unreachable_setpoint_and_runaway_are_clear_errors(params):
    with pytest.raises(ModelError, match="below the coldest reachable"):
        plants.cooler_operating_point(params, setpoint_temp_c=-60.0)
    hot = dataclasses.replace(params, sink_resistance_k_per_w=50.0, max_current_a=10.0)
    with pytest.raises(ModelError, match="thermal runaway"):
        plants.cooler_steady_state(hot, 9.0)


def test_whole_sample_delay_matches_python_control_sample_system():
    # Reference: python-control sample_system (ZOH) times z^-(5 + 1).
    f = plants.fopdt_plant(2.0, 3.0, 0.5)
    T = 0.1
    d = plants.discretise(f, T, 1)
    ref = control.sample_system(control.ss(f.system), T, "zoh") * control.tf([1], [1, 0, 0, 0, 0, 0, 0], T)
    w = np.logspace(-3, np.log10(0.99 * np.pi / T), 200)
    z = np.exp(1j * w * T)
    np.testing.assert_allclose(d(z), ref(z), rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(plants.discrete_frequency_response(f, T, w, 1), ref(z), rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("dead_time_s", [0.0, 0.03, 0.37, 1.0])
def test_fractional_delay_is_exact_at_the_samples(dead_time_s):
    # The sampled step response equals the continuous one at the sample instants (ZOH is exact for a step).
    p = plants.sopdt_plant(-1.5, 4.0, 0.7, dead_time_s)
    T = 0.1
    t = np.arange(300) * T
    y = control.forced_response(plants.discretise(p, T, 1), t, np.ones_like(t)).outputs
    np.testing.assert_allclose(y, plants.step_response(p, t - T), atol=1e-12)
    k = 1.5 * (1 - (4.0 * np.exp(-(t - T - dead_time_s) / 4.0) - 0.7 * np.exp(-(t - T - dead_time_s) / 0.7)) / 3.3)
    np.testing.assert_allclose(y, np.where(t - T > dead_time_s, -k, 0.0), atol=1e-12)


def test_pade_continuous_model_agrees_with_exact_delay_at_low_frequency():
    p = plants.fopdt_plant(2.0, 30.0, 5.0)
    tf = plants.continuous_tf(p, 6)  # python-control pade
    w = np.logspace(-3, -0.5, 50)
    exact = 2.0 / (30.0j * w + 1) * np.exp(-5.0j * w)
    np.testing.assert_allclose(tf(1j * w), exact, rtol=1e-6)


def test_strong_heating_current_runs_away_and_is_excluded(params):
    p = dataclasses.replace(params, max_current_a=12.0)
    lo, hi = plants.stable_current_range_a(p)
    assert -12.0 < lo < 0 and hi == 12.0
    with pytest.raises(ModelError, match="thermal runaway"):
        plants.cooler_steady_state(p, lo - 0.1)
    plants.cooler_steady_state(p, lo)  # the edge itself is still stable
    assert plants.cooler_operating_point(p, setpoint_temp_c=40.0).current_a < 0  # heating below the edge


def test_bias_supply_model(board_ntc, board_pt1000):
    p = plants.bias_supply_plant(board_ntc.supply)
    assert p.dc_gain == pytest.approx(board_ntc.supply.volts_per_code) and p.dc_gain < 0
    rc = board_ntc.supply.series_resistor_ohm * board_ntc.supply.filter_capacitance_f
    np.testing.assert_allclose(sorted(np.real(p.system.poles())), sorted([-1 / rc, -1 / 1e-4]), rtol=1e-9)
    q = plants.bias_supply_plant(board_pt1000.supply, regulator_time_constant_s=0.0, load_resistance_ohm=1e6)
    r = board_pt1000.supply.series_resistor_ohm
    assert q.dc_gain == pytest.approx(board_pt1000.supply.volts_per_code * 1e6 / (r + 1e6))


def test_half_rule_and_model_validation():
    m = plants.SopdtModel(2.0, 10.0, 4.0, 1.0).half_rule_fopdt()  # Skogestad 2003 half rule
    assert (m.time_constant_s, m.dead_time_s) == (12.0, 3.0)
    with pytest.raises(ModelError, match="time_constant_s"):
        plants.fopdt_plant(1.0, 0.0, 1.0)
    with pytest.raises(ModelError, match="gain"):
        plants.fopdt_plant(0.0, 1.0, 1.0)


def test_bias_plant_takes_the_regulator_lag_from_the_profile(tmp_path, profiles_dir):
    from compensator.profiles import load_board

    text = (profiles_dir / "hut-board-ntc.yaml").read_text()
    slow = tmp_path / "slow.yaml"
    slow.write_text(text.replace("  filter_capacitance_f: 100e-9", "  filter_capacitance_f: 100e-9\n"
                                 "  regulator_time_constant_s: 0.002"))
    board = load_board(slow)
    assert board.supply.regulator_time_constant_s == 0.002
    assert plants.bias_supply_plant(board.supply).operating_point.regulator_time_constant_s == 0.002
    assert plants.bias_supply_plant(board.supply, 1e-5).operating_point.regulator_time_constant_s == 1e-5
    default = load_board(profiles_dir / "hut-board-ntc.yaml")
    assert plants.bias_supply_plant(default.supply).operating_point.regulator_time_constant_s == 1e-4
