"""The cooler heat balance of physics.thermal: first law, formulas by hand, dew point."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from compensator.errors import ModelError
from compensator.physics import thermal


@pytest.fixture
def params(cooler):
    return cooler.cooler


def test_heat_pumped_and_released_by_hand(params):
    # Qc = S I Tc - I^2 R / 2 - K (Th - Tc); Qh = S I Th + I^2 R / 2 - K (Th - Tc) (lumped module, common practice).
    s, r, k = params.seebeck_v_per_k, params.resistance_ohm, params.conductance_w_per_k
    i, tc, th = 1.5, 10.0, 40.0
    assert thermal.heat_pumped_w(params, i, tc, th) == pytest.approx(
        s * i * 283.15 - i * i * r / 2 - k * 30.0, rel=1e-12)
    assert thermal.heat_released_w(params, i, tc, th) == pytest.approx(
        s * i * 313.15 + i * i * r / 2 - k * 30.0, rel=1e-12)


def test_steady_state_obeys_the_first_law(params):
    for i in (-1.0, 0.0, 0.8, 2.5):
        op = thermal.cooler_operating_point(params, current_a=i)
        # Heat into the sink = pumped heat + electrical power; the plate's balance closes too.
        assert op.heat_pumped_w + op.electrical_power_w == pytest.approx(
            (op.hot_temp_c - op.ambient_temp_c) / params.sink_resistance_k_per_w, rel=1e-9, abs=1e-12)
        assert op.heat_pumped_w == pytest.approx(
            params.cold_heat_load_w + params.cold_leak_conductance_w_per_k * (op.ambient_temp_c - op.cold_temp_c),
            rel=1e-9, abs=1e-12)


def test_non_finite_inputs_are_model_errors_not_runaway(params):
    with pytest.raises(ModelError) as info:
        thermal.cooler_operating_point(params, current_a=float("nan"))
    assert info.value.key == "current_a" and "runaway" not in info.value.reason
    with pytest.raises(ModelError) as info:
        thermal.cooler_operating_point(params, ambient_temp_c=float("nan"))
    assert info.value.key == "ambient_temp_c"
    with pytest.raises(ModelError) as info:
        thermal.cooler_operating_point(params, setpoint_temp_c=float("nan"))
    assert info.value.key == "setpoint_temp_c"


def test_dew_point_magnus_values():
    # Magnus formula (Alduchov and Eskridge, J. Appl. Meteor. 35, 601, 1996): 25 C at 50 % RH -> 13.86 C;
    # 45 C at 50 % RH -> 32.2 C (computed with a = 17.625, b = 243.04 C).
    assert thermal.dew_point_c(25.0, 50.0) == pytest.approx(13.86, abs=0.01)
    g = np.log(0.5) + 17.625 * 45.0 / (243.04 + 45.0)
    assert thermal.dew_point_c(45.0, 50.0) == pytest.approx(243.04 * g / (17.625 - g), rel=1e-12)
    assert thermal.dew_point_c(45.0, 50.0) == pytest.approx(32.2, abs=0.05)
    with pytest.raises(ModelError):
        thermal.dew_point_c(20.0, float("nan"))


def test_old_import_paths_still_work(params):
    from compensator.loops import plants, verify

    assert plants.cooler_steady_state is thermal.cooler_steady_state
    assert plants.discrete_response_function is plants.discrete_frequency_evaluator
    assert verify.check_cooler_ambient_range.__module__ == "compensator.loops.cooler"
    hot = dataclasses.replace(params, sink_resistance_k_per_w=50.0, max_current_a=10.0)
    with pytest.raises(ModelError, match="thermal runaway"):
        plants.cooler_steady_state(hot, 9.0)


def test_dew_point_refuses_humidity_outside_0_to_100_percent_with_its_key():
    for rh in (0.0, -5.0, 100.5, float("nan")):
        with pytest.raises(ModelError) as info:
            thermal.dew_point_c(20.0, rh)
        assert (info.value.key, info.value.reason) == ("relative_humidity_pct", "must be in (0, 100] percent")
    assert thermal.dew_point_c(20.0, 100.0) == pytest.approx(20.0, abs=1e-12)  # saturated air: Td = T


def test_derivatives_by_hand_at_another_ambient_and_without_sensor_lag(params):
    # The two heat balances written out (Peltier module, common practice): C_c dTc/dt = P + G (Ta - Tc) - Qc,
    # C_h dTh/dt = Qh - (Th - Ta) / R_sink, with Qc = S I Tc[K] - I^2 R / 2 - K (Th - Tc), Qh = Qc + I (S (Th - Tc) + I R).
    p = params
    tc, th, ts, i, ta = 18.0, 33.0, 19.5, 1.2, 40.0
    qc = p.seebeck_v_per_k * i * (tc + 273.15) - i * i * p.resistance_ohm / 2 - p.conductance_w_per_k * (th - tc)
    qh = qc + i * (p.seebeck_v_per_k * (th - tc) + i * p.resistance_ohm)
    dtc, dth, dts = thermal.cooler_derivatives(p, tc, th, ts, i, ambient_temp_c=ta)
    assert dtc == pytest.approx((p.cold_heat_load_w + p.cold_leak_conductance_w_per_k * (ta - tc) - qc)
                                / p.cold_heat_capacity_j_per_k, rel=1e-12)
    assert dth == pytest.approx((qh - (th - ta) / p.sink_resistance_k_per_w) / p.hot_heat_capacity_j_per_k, rel=1e-12)
    assert dts == pytest.approx((tc - ts) / p.sensor_time_constant_s, rel=1e-12)
    assert float(thermal.heat_released_w(p, i, tc, th)) == pytest.approx(qh, rel=1e-12)
    instant = dataclasses.replace(p, sensor_time_constant_s=0.0)
    _, _, dts = thermal.cooler_derivatives(instant, np.array([tc, tc]), th, ts, i)
    assert np.array_equal(dts, [0.0, 0.0])


def test_current_limits_are_the_stable_heating_edge_and_the_optimum(params):
    # Upper limit: the current of maximum cooling of an ideal module, I = S Tc[K] / R at the coldest point
    # (dQc/dI = 0; common practice), checked against the steady state on a fine grid; lower limit: the strongest
    # heating current whose fixed-current heat balance is still stable (both eigenvalues in the left half plane).
    lo, hi = thermal.cooler_current_limits_a(params, 10.0)
    grid = np.linspace(0.0, params.max_current_a, 20001)
    tc, _ = thermal.cooler_steady_state(params, grid, 10.0)
    assert hi == pytest.approx(grid[np.argmin(tc)], abs=2 * params.max_current_a / 20000)
    assert hi == pytest.approx(thermal.cooler_optimum_current_a(params, 10.0), rel=1e-12)
    assert hi < params.max_current_a and hi != thermal.cooler_current_limits_a(params, 40.0)[1]
    assert lo == thermal.stable_current_range_a(params)[0] and -params.max_current_a <= lo < 0
    limited = dataclasses.replace(params, max_current_a=0.5 * hi)
    assert thermal.cooler_current_limits_a(limited, 10.0)[1] == 0.5 * hi  # the module's limit comes first


def test_operating_point_at_another_ambient_holds_the_setpoint_and_both_heat_balances(params):
    ta = 40.0
    op = thermal.cooler_operating_point(params, 25.0, ambient_temp_c=ta)
    assert op.cold_temp_c == pytest.approx(25.0, abs=1e-9) and op.ambient_temp_c == ta
    # Steady state at that ambient, by hand: no heat flows into either node.
    p, i, tc, th = params, op.current_a, op.cold_temp_c, op.hot_temp_c
    qc = p.seebeck_v_per_k * i * (tc + 273.15) - i * i * p.resistance_ohm / 2 - p.conductance_w_per_k * (th - tc)
    qh = qc + i * (p.seebeck_v_per_k * (th - tc) + i * p.resistance_ohm)
    assert p.cold_heat_load_w + p.cold_leak_conductance_w_per_k * (ta - tc) - qc == pytest.approx(0.0, abs=1e-9)
    assert qh - (th - ta) / p.sink_resistance_k_per_w == pytest.approx(0.0, abs=1e-9)
    assert op.optimum_current_a == pytest.approx(thermal.cooler_optimum_current_a(p, ta), rel=1e-12)
    assert op.coldest_temp_c == pytest.approx(float(thermal.cooler_steady_state(p, op.optimum_current_a, ta)[0]))
    # The gain dTc/dI by a central difference of the steady state.
    h = 1e-5
    slope = (float(thermal.cooler_steady_state(p, i + h, ta)[0]) - float(thermal.cooler_steady_state(p, i - h, ta)[0]))
    assert op.gain_k_per_a == pytest.approx(slope / (2 * h), rel=1e-5)
    # Exactly the coldest reachable temperature is held at the current of maximum cooling.
    coldest = thermal.cooler_operating_point(p, op.coldest_temp_c, ambient_temp_c=ta)
    assert coldest.current_a == op.optimum_current_a
    # At the module's limit current the point exists (the limit itself is allowed).
    assert thermal.cooler_operating_point(p, current_a=p.max_current_a).current_a == p.max_current_a


def test_operating_point_refusals_name_key_and_reason(params):
    p, ta = params, 40.0
    cases = [(dict(current_a=float("nan")), "current_a", "must be finite, got nan"),
             (dict(setpoint_temp_c=float("inf")), "setpoint_temp_c", "must be finite, got inf"),
             (dict(ambient_temp_c=float("nan")), "ambient_temp_c", "must be finite, got nan"),
             (dict(current_a=p.max_current_a * 1.5), "current_a",
              f"current {p.max_current_a * 1.5:g} A exceeds the module's max_current_a {p.max_current_a:g} A")]
    for kwargs, key, reason in cases:
        with pytest.raises(ModelError) as info:
            thermal.cooler_operating_point(p, **kwargs)
        assert (info.value.key, info.value.reason) == (key, reason)
    i_opt = thermal.cooler_optimum_current_a(p, ta)
    t_cold = float(thermal.cooler_steady_state(p, i_opt, ta)[0])
    with pytest.raises(ModelError) as info:
        thermal.cooler_operating_point(p, t_cold - 1.0, ambient_temp_c=ta)
    assert info.value.key == "setpoint_temp_c"
    assert info.value.reason == (f"setpoint {t_cold - 1.0:g} C is below the coldest reachable {t_cold:.2f} C at "
                                 f"ambient 40 C (current of maximum cooling {i_opt:.3f} A)")
    i_warm = thermal.stable_current_range_a(p)[0]
    t_warm = float(thermal.cooler_steady_state(p, i_warm, ta)[0])
    with pytest.raises(ModelError) as info:
        thermal.cooler_operating_point(p, t_warm + 1.0, ambient_temp_c=ta)
    assert info.value.key == "setpoint_temp_c"
    assert info.value.reason == (f"setpoint {t_warm + 1.0:g} C is above the warmest reachable {t_warm:.2f} C at "
                                 f"ambient 40 C (heating at {i_warm:.3g} A)")


def _stable_by_hand(p, i):
    # Both eigenvalues of the fixed-current two-node heat balance in the left half plane: trace < 0, det > 0.
    m11 = -(p.cold_leak_conductance_w_per_k + p.seebeck_v_per_k * i + p.conductance_w_per_k)
    m22 = p.seebeck_v_per_k * i - p.conductance_w_per_k - 1.0 / p.sink_resistance_k_per_w
    k = p.conductance_w_per_k
    return m11 / p.cold_heat_capacity_j_per_k + m22 / p.hot_heat_capacity_j_per_k < 0 and m11 * m22 - k * k > 0


def test_stable_current_range_against_a_scan_when_strong_cooling_runs_the_hot_side_away(params):
    # A strong module on a poor heat sink: S I outgrows K + 1 / R_sink below 1 A, so the cooling edge is unstable too.
    p = dataclasses.replace(params, seebeck_v_per_k=0.2, conductance_w_per_k=0.01, sink_resistance_k_per_w=10.0)
    lo, hi = thermal.stable_current_range_a(p)
    grid = np.linspace(-p.max_current_a, p.max_current_a, 600001)
    stable = np.array([_stable_by_hand(p, i) for i in grid[::100]])
    edges = grid[::100][stable]
    assert 0.0 < hi < 1.0 and -p.max_current_a <= lo < 0.0
    assert hi == pytest.approx(edges.max(), abs=2 * p.max_current_a / 6000)
    assert lo == pytest.approx(edges.min(), abs=2 * p.max_current_a / 6000)
    assert _stable_by_hand(p, hi) and not _stable_by_hand(p, hi * (1 + 1e-6))
    # With no leak and no module conductance even zero current has no stable state.
    dead = dataclasses.replace(params, conductance_w_per_k=0.0, cold_leak_conductance_w_per_k=0.0)
    with pytest.raises(ModelError) as info:
        thermal.stable_current_range_a(dataclasses.replace(dead, max_current_a=3.0, seebeck_v_per_k=0.2,
                                                           sink_resistance_k_per_w=10.0))
    assert info.value.reason == "the module has no stable steady state even at zero current"


def test_optimum_current_inside_the_range_against_a_fine_scan(params):
    # A module with a large resistance has its maximum cooling well inside +-max_current_a (an ideal module peaks
    # near S Tc / R; common practice): the search must find the coldest steady state of a fine scan, at any ambient.
    p = dataclasses.replace(params, resistance_ohm=20.0)
    for ta in (-20.0, 25.0, 45.0):
        grid = np.linspace(0.0, p.max_current_a, 300001)
        tc, _ = thermal.cooler_steady_state(p, grid, ta)
        best = grid[np.argmin(tc)]
        assert 0.1 < best < 0.9 * p.max_current_a
        assert thermal.cooler_optimum_current_a(p, ta) == pytest.approx(best, abs=2e-5)
        # scipy's bounded Brent search to 1e-12 A over the whole range is the reference to 1e-7 A.
        ref = minimize_scalar(lambda x: float(thermal.cooler_steady_state(p, x, ta)[0]), bounds=(0.0, p.max_current_a),
                              method="bounded", options={"xatol": 1e-12}).x
        assert thermal.cooler_optimum_current_a(p, ta) == pytest.approx(ref, abs=1e-7)
    # At the module's limit the limit itself is returned, exactly.
    assert thermal.cooler_optimum_current_a(params, 25.0) == thermal.stable_current_range_a(params)[1]


def test_heat_balance_matrix_by_hand_also_for_a_whole_number_current(params):
    p = params
    for current in (0, 2, np.array([0, 1])):  # whole numbers must not truncate the conductances
        m11, m12, m21, m22 = thermal.heat_balance_matrix_w_per_k(p, current)
        i = np.asarray(current, dtype=float)
        assert np.allclose(m11, -(p.cold_leak_conductance_w_per_k + p.seebeck_v_per_k * i + p.conductance_w_per_k))
        assert np.allclose(m12, p.conductance_w_per_k) and np.allclose(m21, p.conductance_w_per_k)
        assert np.allclose(m22, p.seebeck_v_per_k * i - p.conductance_w_per_k - 1.0 / p.sink_resistance_k_per_w)


def test_steady_state_refusals_name_key_and_reason(params):
    with pytest.raises(ModelError) as info:
        thermal.cooler_steady_state(params, [1.0, float("nan")])
    assert (info.value.key, info.value.reason) == ("current_a", "must be finite, got nan")
    strong = dataclasses.replace(params, seebeck_v_per_k=0.2, conductance_w_per_k=0.01, sink_resistance_k_per_w=10.0)
    with pytest.raises(ModelError) as info:
        thermal.cooler_steady_state(strong, 3.0)
    assert info.value.reason == (
        "the module has no stable steady state at 3 A: the Peltier and Joule heat outgrow what the heat sink and "
        "leaks carry away (thermal runaway); lower the current or improve the heat sink")


def test_edges_of_humidity_setpoint_and_sensor_lag(params):
    assert np.isfinite(thermal.dew_point_c(20.0, 0.5))  # dry air, below 1 %, is still air
    # The warmest reachable setpoint itself is held, at the strongest stable heating current.
    i_warm = thermal.stable_current_range_a(params)[0]
    t_warm = float(thermal.cooler_steady_state(params, i_warm, 25.0)[0])
    assert thermal.cooler_operating_point(params, t_warm, ambient_temp_c=25.0).current_a == pytest.approx(i_warm)
    # A sensor lag below a second still lags.
    quick = dataclasses.replace(params, sensor_time_constant_s=0.5)
    assert thermal.cooler_derivatives(quick, 20.0, 30.0, 21.0, 1.0)[2] == pytest.approx(-2.0, rel=1e-12)
    # The optimum current follows the ambient where it lies inside the range (a 20 ohm module).
    big_r = dataclasses.replace(params, resistance_ohm=20.0)
    op = thermal.cooler_operating_point(big_r, 40.0, ambient_temp_c=40.0)
    assert op.optimum_current_a == pytest.approx(thermal.cooler_optimum_current_a(big_r, 40.0), rel=1e-9)
    assert op.optimum_current_a != pytest.approx(thermal.cooler_optimum_current_a(big_r, -20.0), rel=1e-3)
    # The matrix entries keep the shape of the current.
    m = thermal.heat_balance_matrix_w_per_k(params, np.array([0.0, 1.0, 2.0]))
    assert [np.shape(e) for e in m] == [(3,)] * 4
