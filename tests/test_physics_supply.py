"""Bias supply network."""

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.physics.supply import BiasSupply, Dac, sipm_bias_v


def test_feedback_injection_hand_example():
    # Vout = Vfb (1 + R1/R2) + (Vfb - Vdac) R1/R3 (node equation at the feedback pin).
    # Vfb 1.25 V, R1 1 Mohm, R2 50 kohm, R3 200 kohm, 12-bit DAC at 2.5 V, code 2048 -> Vdac 1.25 V:
    # Vout = 1.25 * 21 + 0 = 26.25 V; code 0 -> 26.25 + 1.25 * 5 = 32.5 V.
    s = BiasSupply(Dac(12, 2.5), "feedback_injection", feedback_v=1.25, r1_ohm=1e6, r2_ohm=50e3, r3_ohm=200e3,
                   min_output_v=0.0, max_output_v=100.0)
    assert s.output_v(2048) == pytest.approx(26.25)
    assert s.output_v(0) == pytest.approx(32.5)
    # One code moves the output by Vref/2^N * R1/R3 = 2.5/4096 * 5 V, downwards.
    assert s.volts_per_code == pytest.approx(-2.5 / 4096 * 5)
    assert s.lsb_v == pytest.approx(2.5 / 4096 * 5)


def test_direct_topology_and_limits():
    s = BiasSupply(Dac(12, 4.096), "direct", gain_v_per_v=10.0, offset_v=5.0, min_output_v=10.0, max_output_v=40.0)
    assert s.output_v(1000) == pytest.approx(15.0)
    assert s.output_v(0) == pytest.approx(10.0)  # clipped to the regulator's minimum
    assert s.network_output_v(0) == pytest.approx(5.0)
    assert s.output_range_v() == pytest.approx((10.0, 40.0))


def test_every_code_of_a_16_bit_dac_round_trips(board_ntc, board_pt1000):
    for supply in (board_ntc.supply, board_pt1000.supply):
        codes = np.arange(1 << 16)
        np.testing.assert_array_equal(supply.dac_code(supply.network_output_v(codes)), codes)


def test_rounding_modes(board_pt1000):
    s = board_pt1000.supply
    v = s.network_output_v(1000) + 0.3 * s.volts_per_code
    assert s.dac_code(v, "nearest") == 1000
    assert s.dac_code(v, "floor") == 1000
    assert s.dac_code(v, "ceil") == 1001
    with pytest.raises(ModelError):
        s.dac_code(v, "banker")
    assert s.dac_code(1e6) == s.dac.full_scale_code and s.dac_code(-1e6) == 0


def test_series_resistor_drop_operating_point(sipm_a, board_ntc):
    from compensator.physics.sipm import steady_current_a
    dev, supply = sipm_a.device, board_ntc.supply
    v_sipm = sipm_bias_v(supply, dev, 27.5, 45.0)
    # Self-consistent: V = Vsupply - R I(V).
    assert v_sipm == pytest.approx(27.5 - supply.series_resistor_ohm * steady_current_a(dev, v_sipm, 45.0), abs=1e-9)
    assert 27.5 - v_sipm > 0.01  # tens of millivolts at 45 C with a 10 kohm filter
    assert supply.drop_v(1e-6) == pytest.approx(0.01)


def test_network_must_depend_on_code():
    with pytest.raises(ModelError):
        BiasSupply(Dac(12, 2.5), "direct", gain_v_per_v=0.0)


def test_dac_voltage_and_integer_codes(board_pt1000):
    # An ideal 16-bit DAC at 2.5 V: code n gives n x 2.5 / 65536 V; mid-scale 1.25 V.
    dac = Dac(16, 2.5)
    assert dac.voltage_v([0, 32768, 65535]).tolist() == pytest.approx([0.0, 1.25, 2.5 * 65535 / 65536], rel=1e-15)
    codes = board_pt1000.supply.dac_code([31.0, 40.0])
    assert codes.dtype == np.int64
    with pytest.raises(ModelError) as info:
        board_pt1000.supply.dac_code(40.0, "banker")
    assert info.value.key == "rounding" and info.value.reason == "must be one of nearest, floor, ceil, got 'banker'"


def test_operating_point_options(sipm_a, board_ntc):
    from compensator.physics.sipm import steady_current_a
    dev, supply = sipm_a.device, board_ntc.supply
    r = supply.series_resistor_ohm
    # Light adds current, so more drop: at 1e8 photons/s the drop is larger than in the dark.
    dark = sipm_bias_v(supply, dev, 27.5, 25.0)
    lit = sipm_bias_v(supply, dev, 27.5, 25.0, photon_rate_hz=1e8)
    assert lit == pytest.approx(27.5 - r * steady_current_a(dev, lit, 25.0, 1e8), abs=1e-9) and lit < dark - 0.01
    # A loose tolerance stops after the first step, V1 = Vs - R I(Vs), which is within 0.5 V of Vs; a tight one
    # goes on to the fixed point, some 20 mV away (the iteration alternates about it).
    v1 = 27.5 - r * steady_current_a(dev, 27.5, 25.0, 1e8)
    assert sipm_bias_v(supply, dev, 27.5, 25.0, photon_rate_hz=1e8, tol_v=0.5) == v1
    assert abs(v1 - lit) > 0.01
    with pytest.raises(ModelError) as info:
        sipm_bias_v(supply, dev, 27.5, 25.0, photon_rate_hz=1e8, max_iter=1)
    assert info.value.key == "series_resistor_ohm"


def test_supply_refuses_unknown_topology_and_a_code_independent_network():
    with pytest.raises(ModelError) as info:
        BiasSupply(Dac(12, 2.5), "boost")
    assert info.value.key == "topology" and info.value.reason == "must be 'feedback_injection' or 'direct', got 'boost'"
    with pytest.raises(ModelError) as info:
        BiasSupply(Dac(12, 2.5), "feedback_injection", r1_ohm=0.0)
    assert info.value.key == "topology" and info.value.reason == "the supply network does not depend on the DAC code"
