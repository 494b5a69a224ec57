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
