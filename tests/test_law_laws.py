"""Compensation laws: what they aim for, the drop correction, and the limits that clamp them."""

from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.law import build_law, check_law_in_range, constant_gain_law, constant_overvoltage_law
from compensator.physics.sipm import breakdown_v, gain
from compensator.physics.supply import sipm_bias_v

TEMPS_C = np.linspace(-25.0, 45.0, 15)


def test_constant_overvoltage_holds_vbd_plus_vov(sipm_b, board_pt1000):
    law = constant_overvoltage_law(sipm_b, board_pt1000, 4.0, drop_correction="none")
    assert np.allclose(law.output_v(TEMPS_C) - breakdown_v(sipm_b.device, TEMPS_C), 4.0, atol=1e-12)
    assert np.all(law.limiting(TEMPS_C) == "")


def test_constant_gain_holds_gain_with_capacitance_coefficient(sipm_b, board_pt1000):
    # G = C(T) (V - Vbd) / q (common practice): the law scales the overvoltage by C(T0)/C(T).
    law = constant_gain_law(sipm_b, board_pt1000, 4.0, drop_correction="none")
    dev = sipm_b.device
    g0 = gain(dev, breakdown_v(dev, 25.0) + 4.0, 25.0)
    assert np.allclose(gain(dev, law.output_v(TEMPS_C), TEMPS_C) / g0, 1.0, atol=1e-12)
    # The constant-overvoltage law leaves the capacitance coefficient: 150 ppm/K over 50 K is -0.75 % at -25 C.
    flat = constant_overvoltage_law(sipm_b, board_pt1000, 4.0, drop_correction="none")
    ratio = gain(dev, flat.output_v(-25.0), -25.0) / g0
    assert ratio - 1.0 == pytest.approx(150e-6 * (-50.0), rel=1e-9)


def test_laws_agree_without_capacitance_coefficient(sipm_a, board_ntc):
    a = constant_overvoltage_law(sipm_a, board_ntc, 3.0)
    b = constant_gain_law(sipm_a, board_ntc, 3.0)
    assert np.array_equal(a.output_v(TEMPS_C), b.output_v(TEMPS_C))


def test_drop_correction_puts_the_target_bias_on_the_sipm(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_overvoltage", drop_correction="modelled")
    drop = law.drop_v(TEMPS_C)
    assert drop[-1] > 0.02 > drop[0] > 0  # tens of mV at 45 C: dark rate doubles every 9 K
    at_sipm = sipm_bias_v(board_ntc.supply, sipm_a.device, law.output_v(TEMPS_C), TEMPS_C)
    assert np.allclose(at_sipm, law.target_bias_v(TEMPS_C), atol=2e-6)


def test_clamped_by_board_max_bias(sipm_a, board_ntc):
    low = replace(board_ntc, max_bias_v=27.0)
    law = constant_overvoltage_law(sipm_a, low, 3.0)
    out = law.output_v(TEMPS_C)
    assert out.max() <= 27.0
    assert "board max_bias_v" in set(law.limiting(TEMPS_C))
    with pytest.raises(ModelError, match="board max_bias_v"):
        check_law_in_range(law)


def test_never_above_max_overvoltage(sipm_a, board_ntc):
    # At the maximum overvoltage the drop correction would push the output above Vbd + max: clamped.
    law = constant_overvoltage_law(sipm_a, board_ntc, sipm_a.device.max_overvoltage_v)
    over = law.output_v(TEMPS_C) - breakdown_v(sipm_a.device, TEMPS_C)
    assert np.all(over <= sipm_a.device.max_overvoltage_v + 1e-12)
    assert "sipm max_overvoltage_v" in set(law.limiting(TEMPS_C))


def test_clamped_by_supply_range(sipm_b, board_ntc):
    law = constant_overvoltage_law(sipm_b, board_ntc, 4.0)
    lo, hi = board_ntc.supply.output_range_v()
    assert np.all(law.output_v(TEMPS_C) <= hi)
    with pytest.raises(ModelError, match="supply maximum output"):
        check_law_in_range(law)


def test_bad_targets(sipm_a, board_ntc):
    # Model errors carry the argument at fault as a field (nobody parses the message).
    for kwargs, key in (({"overvoltage_v": 0.5}, "overvoltage_v"), ({"overvoltage_v": float("nan")}, "overvoltage_v"),
                        ({"overvoltage_v": 3.0, "kind": "constant_current"}, "kind"),
                        ({"overvoltage_v": 3.0, "photon_rate_hz": -1.0}, "photon_rate_hz"),
                        ({"overvoltage_v": 3.0, "drop_correction": "guessed"}, "drop_correction")):
        ov = kwargs.pop("overvoltage_v")
        with pytest.raises(ModelError) as info:
            build_law(sipm_a, board_ntc, ov, **kwargs)
        assert info.value.key == key and info.value.reason


@pytest.mark.parametrize("board_name", ["board_ntc", "board_pt1000"])
def test_continuous_codes_round_trip(board_name, request):
    channel = request.getfixturevalue(board_name).temperature
    x = channel.continuous_code(TEMPS_C)
    assert np.allclose(channel.temp_at(x), TEMPS_C, atol=1e-7)
    codes = np.floor(x).astype(np.int64)
    assert np.array_equal(codes, channel.adc_code(TEMPS_C))
    assert np.allclose(channel.temp_at(codes + 0.5), channel.temp_c(codes), atol=1e-9)


def test_out_of_range_message_by_hand(sipm_b, board_ntc):
    # hut-sipm-b (38.2 V at 25 C, 34 mV/K, 0.02 mV/K^2) at 4 V on a supply that stops at 36 V: the law needs
    # 38.2 - 1.7 + 0.05 + 4 = 40.550 V at -25 C and 38.2 + 0.68 + 0.008 + 4 = 42.888 V at 45 C (hand calculation).
    law = constant_overvoltage_law(sipm_b, board_ntc, 4.0, drop_correction="none")
    with pytest.raises(ModelError) as info:
        check_law_in_range(law, step_k=0.5)
    assert info.value.key == "overvoltage_v"
    assert info.value.reason == ("the law needs 40.550 to 42.888 V from -25 to 45 C, beyond the supply maximum "
                                 "output; lower --overvoltage-v or use another board")


def test_limits_by_hand(sipm_a, sipm_b, board_ntc, board_pt1000):
    # hut-sipm-a (27.5 V at 3 V) on the 30 to 65 V board: below the supply's minimum everywhere.
    low = constant_overvoltage_law(sipm_a, board_pt1000, 3.0, drop_correction="none")
    assert set(low.limiting(TEMPS_C)) == {"supply minimum output"}
    assert np.all(low.output_v(TEMPS_C) == 30.0)
    # Lower limit: the supply's lowest output, at the highest DAC code of the feedback-injection network,
    # 1.25 (1 + 1e6/43.2e3 + 1e6/250e3) - 2.5 x 65535/65536 x 4 = 25.1853 V. Upper limit: the tightest of the
    # supply (36 V), max_bias_v (36 V) and Vbd + max_overvoltage (24.5 + 7 V at 25 C, 21.5 mV/K) -- here 31.5 V
    # at 25 C and 30.425 V at -25 C (hand calculation).
    law = constant_overvoltage_law(sipm_a, board_ntc, 3.0, drop_correction="none")
    lo, hi = law.output_limits_v([-25.0, 25.0])
    floor_v = 1.25 * (1 + 1e6 / 43.2e3 + 4.0) - 2.5 * 65535 / 65536 * 4.0
    assert lo == pytest.approx([floor_v, floor_v], abs=1e-12) and hi == pytest.approx([30.425, 31.5], abs=1e-12)
    # Slope of the constant-overvoltage law without drop: the breakdown's, 34 + 2 x 0.02 (T - 25) mV/K for
    # hut-sipm-b: 34.8 mV/K at 45 C (exact for a quadratic by central differences).
    assert constant_overvoltage_law(sipm_b, board_pt1000, 4.0, drop_correction="none").slope_v_per_k(45.0) == \
        pytest.approx(0.0348, rel=1e-9)
    # The gain laws hold the gain: their response is the gain, and 100/Vov percent per volt.
    assert float(law.response(law.sipm, 27.5, 25.0)) == pytest.approx(float(gain(law.sipm, 27.5, 25.0)), rel=1e-15)
    assert law.quantity == "gain" and law.correct_drop is False
    assert float(law.error_pct_per_v(25.0)) == pytest.approx(100.0 / 3.0, rel=1e-12)


def test_measured_output_is_clamped(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, drop_correction="measured")
    # A wrong reading of 1 mA would add 10 V: the output stops at Vbd + max_overvoltage = 31.5 V at 25 C.
    assert float(law.measured_output_v(25.0, 1e-3)) == pytest.approx(31.5, abs=1e-12)
    assert law.correct_drop is True


def test_offsets_between_breakdown_definitions(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, breakdown_offset_v=0.05)
    (finding,) = law.findings
    assert finding.code == "breakdown_offset_applied"
    assert finding.message == "the law adds +50.0 mV to hut-sipm-a's gain-intercept breakdown (given)"
    assert law.breakdown_offset_v == 0.05 and law.breakdown_offset_err_v == 0.0
    assert build_law(sipm_a, board_ntc, 3.0).findings == ()
    for bad in (5.5, -5.5, float("nan")):
        with pytest.raises(ModelError) as info:
            build_law(sipm_a, board_ntc, 3.0, breakdown_offset_v=bad)
        assert info.value.key == "breakdown_offset_v" and info.value.reason == f"must be a number within +-5 V, got {bad!r}"
    assert build_law(sipm_a, board_ntc, 3.0, breakdown_offset_v=-5.0).breakdown_offset_v == -5.0


def test_messages_of_refused_targets(sipm_a, board_ntc):
    cases = ((dict(overvoltage_v=7.5), "overvoltage_v", "7.5 V is outside hut-sipm-a's limits 1 to 7 V"),
             (dict(overvoltage_v=3.0, kind="constant_current"), "kind",
              "must be one of constant_overvoltage, constant_gain, constant_response, got 'constant_current'"),
             (dict(overvoltage_v=3.0, drop_correction="guessed"), "drop_correction",
              "must be one of none, modelled, measured, got 'guessed'"),
             (dict(overvoltage_v=3.0, photon_rate_hz=float("inf")), "photon_rate_hz",
              "must be a non-negative number, got inf"))
    for kwargs, key, reason in cases:
        ov = kwargs.pop("overvoltage_v")
        with pytest.raises(ModelError) as info:
            build_law(sipm_a, board_ntc, ov, **kwargs)
        assert (info.value.key, info.value.reason) == (key, reason)
    # Both ends of the device's range are allowed.
    assert build_law(sipm_a, board_ntc, 1.0).overvoltage_v == 1.0
    assert build_law(sipm_a, board_ntc, 7.0, drop_correction="none").overvoltage_v == 7.0
    # The record itself refuses what build_law would.
    law = build_law(sipm_a, board_ntc, 3.0)
    for field, value, reason in (
            ("kind", "x", "must be one of constant_overvoltage, constant_gain, constant_response, got 'x'"),
            ("drop_correction", "x", "must be one of none, modelled, measured, got 'x'"),
            ("drop_correction", "measured", "'measured' needs a current_sense channel"),
            ("kind", "constant_response", "the constant_response law needs a scintillator")):
        bare = replace(law, current_sense=None, scintillator=None) if value in ("measured", "constant_response") else law
        with pytest.raises(ModelError) as info:
            replace(bare, **{field: value})
        assert info.value.key == ("scintillator" if value == "constant_response" else field)
        assert info.value.reason == reason


def test_clamp_message_names_where_by_hand(sipm_a, board_ntc):
    # Constant overvoltage without drop correction: Vbd + 3 V = 27.5 + 0.0215 (T - 25) V passes the board's
    # 27 V above T = 25 - 0.5 / 0.0215 = 1.744 C, so on the 0.1 K grid from 1.8 C (27.5 - 0.0215 x 23.2 =
    # 27.001 V) to 45 C (27.930 V) (hand calculation).
    law = build_law(sipm_a, replace(board_ntc, max_bias_v=27.0), 3.0, drop_correction="none")
    with pytest.raises(ModelError) as info:
        check_law_in_range(law)
    assert info.value.key == "overvoltage_v"
    assert info.value.reason.startswith("the law needs 27.001 to 27.930 V from 1.8 to 45 C, beyond the board max_bias_v")


def test_drop_follows_the_light_and_the_shape(sipm_a, board_ntc):
    temps = np.array([[-25.0, 0.0], [25.0, 45.0]])
    none = build_law(sipm_a, board_ntc, 3.0, drop_correction="none")
    assert none.drop_v(temps).shape == (2, 2) and not np.any(none.drop_v(temps))
    dark = build_law(sipm_a, board_ntc, 3.0, drop_correction="modelled")
    lit = build_law(sipm_a, board_ntc, 3.0, drop_correction="modelled", photon_rate_hz=3e7)
    # 3e7 photons per second add at least 3e7 x PDE x gain x e of current through the 10 kohm resistor.
    assert np.all(lit.drop_v(temps) > dark.drop_v(temps) + 1e-3)


def test_response_defaults_to_the_nominal_light_yield(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_response", drop_correction="none")
    bias = law.target_bias_v(TEMPS_C)
    assert np.array_equal(law.response(law.sipm, bias, TEMPS_C), law.response(law.sipm, bias, TEMPS_C, 0.0))
    assert not np.array_equal(law.response(law.sipm, bias, TEMPS_C), law.response(law.sipm, bias, TEMPS_C, 1.0))
