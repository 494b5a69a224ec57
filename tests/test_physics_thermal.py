"""The cooler heat balance of physics.thermal: first law, formulas by hand, dew point."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

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
