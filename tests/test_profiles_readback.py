"""The optional bias read-back channel of a board profile: loading, the ADC transfer and its cross-checks."""

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from compensator.errors import ModelError, ProfileError
from compensator.physics.bias_readback import BiasReadback
from compensator.physics.current_sense import CurrentSense
from compensator.profiles import load_board

NTC_BOARD = (Path(__file__).parent.parent / "hardware_profiles" / "hut-board-ntc.yaml").read_text()


def test_bundled_board_has_a_readback(board_ntc, board_pt1000):
    rb = board_ntc.bias_readback
    assert rb is not None and board_pt1000.bias_readback is None  # the other board sets its bias open-loop
    # 3.3 V / 4096 codes / 0.08 = 10.07 mV of output per code; full scale 4095 codes = 41.25 V (hand calculation).
    assert rb.lsb_v == pytest.approx(3.3 / 4096 / 0.08, rel=1e-12)
    assert rb.lsb_v == pytest.approx(10.0708e-3, rel=1e-4)
    assert rb.full_scale_v == pytest.approx(41.2399, rel=1e-5)
    assert rb.filter_time_constant_s == 1e-3


def test_readback_transfer_is_centred_and_clipped():
    rb = BiasReadback(adc_bits=10, reference_v=2.048, divider_ratio_v_per_v=0.05)  # 40 mV per code
    assert rb.lsb_v == pytest.approx(0.04, rel=1e-12)
    # Codes centred on multiples of the LSB: 1.019 V -> 25.475 codes -> 25; 1.021 V -> 25.525 -> 26.
    assert rb.adc_code([1.019, 1.021, -1.0, 1e3]).tolist() == [25, 26, 0, 1023]
    assert rb.output_v(26) == pytest.approx(1.04, rel=1e-12)
    # A +1 % divider error reads 1 % high; a +1 % reference error reads 1/1.01 as high.
    assert rb.continuous_code(20.0, divider_error=0.01) == pytest.approx(505.0, rel=1e-12)
    assert rb.continuous_code(20.0, reference_error=0.01) == pytest.approx(500.0 / 1.01, rel=1e-12)
    assert rb.continuous_code(20.0, offset_v=0.04) == pytest.approx(501.0, rel=1e-12)


@pytest.mark.parametrize("field, value", [("adc_bits", 0), ("reference_v", -1.0), ("divider_ratio_v_per_v", 1.5),
                                          ("offset_v", float("nan"))])
def test_readback_model_refuses_bad_values(field, value):
    kw = dict(adc_bits=12, reference_v=3.3, divider_ratio_v_per_v=0.08)
    kw[field] = value
    with pytest.raises(ModelError) as info:
        BiasReadback(**kw)
    assert info.value.key == field


def test_readback_that_saturates_below_the_board_output_is_refused(tmp_path):
    # 3.3 V / 0.2 = 16.5 V full scale is below the highest output the network reaches (code 0 of the feedback
    # injection: 1.25 V (1 + 1 Mohm/43.2 kohm + 1 Mohm/250 kohm) = 35.185 V, under max_bias_v 36 V).
    path = tmp_path / "b.yaml"
    path.write_text(NTC_BOARD.replace("divider_ratio_v_per_v: 0.08", "divider_ratio_v_per_v: 0.2"))
    with pytest.raises(ProfileError) as info:
        load_board(path)
    (p,) = info.value.problems
    assert p.key == "bias_readback.divider_ratio_v_per_v" and "16.5 V" in p.reason and "35.19 V" in p.reason
    assert NTC_BOARD.splitlines()[p.line - 1].strip().startswith("divider_ratio_v_per_v")


def test_readback_ratio_above_one_is_refused_by_the_schema(tmp_path):
    path = tmp_path / "b.yaml"
    path.write_text(NTC_BOARD.replace("divider_ratio_v_per_v: 0.08", "divider_ratio_v_per_v: 1.2"))
    with pytest.raises(ProfileError, match="divider_ratio_v_per_v: must be at most 1"):
        load_board(path)


def test_board_without_readback_loads(tmp_path):
    text = NTC_BOARD[: NTC_BOARD.index("# Bias read-back")] + NTC_BOARD[NTC_BOARD.index("# SiPM current"):]
    path = tmp_path / "b.yaml"
    path.write_text(text)
    assert load_board(path).bias_readback is None
    assert load_board(path).current_sense is not None


def test_readback_code_with_every_error_and_the_current_channel_by_hand():
    rb = BiasReadback(adc_bits=10, reference_v=2.048, divider_ratio_v_per_v=0.05)  # 40 mV per code
    # 20 V is 500 codes; +2 % divider reads 510, +2 % reference 500/1.02 = 490.2 -> 490, +0.1 V offset 502.5 -> 503
    # (rounded half up), all three 510.1 x ... computed by hand.
    assert rb.adc_code(20.0, 0.02).tolist() == 510
    assert rb.adc_code(20.0, 0.0, 0.02).tolist() == 490
    assert rb.adc_code(20.0, 0.0, 0.0, 0.1).tolist() == 503
    assert rb.adc_code(20.0, 0.02, 0.02, 0.1).tolist() == 503
    sense = CurrentSense(adc_bits=12, reference_v=4.096, sense_gain_v_per_a=1e4)  # 0.1 uA per code
    assert sense.current_a([0, 250]).tolist() == pytest.approx([0.0, 25e-6], rel=1e-12, abs=0)


def test_current_sense_reading_with_every_error_by_hand():
    from compensator.physics.current_sense import centred_adc_code
    sense = CurrentSense(adc_bits=12, reference_v=4.096, sense_gain_v_per_a=1e4)  # 0.1 uA per code
    # 20 uA is 200 codes; +2 % sense gain reads 204, +2 % reference 200/1.02, +0.5 uA offset 205 (hand calculation).
    assert sense.continuous_code(20e-6) == pytest.approx(200.0, rel=1e-12)
    assert sense.continuous_code(20e-6, gain_error=0.02) == pytest.approx(204.0, rel=1e-12)
    assert sense.continuous_code(20e-6, reference_error=0.02) == pytest.approx(200.0 / 1.02, rel=1e-12)
    assert sense.continuous_code(20e-6, offset_a=0.5e-6) == pytest.approx(205.0, rel=1e-12)
    codes = centred_adc_code([-3.0, 0.49, 0.5, 5000.0], 4095)
    assert codes.tolist() == [0, 0, 1, 4095] and codes.dtype == np.int64


# The channels' records refuse what their models cannot handle; each bound is tried on both sides.

NAN = float("nan")
SENSE = CurrentSense(adc_bits=12, reference_v=3.3, sense_gain_v_per_a=1e4)
READBACK = BiasReadback(adc_bits=12, reference_v=3.3, divider_ratio_v_per_v=0.08)


def _refused(record, field, value):
    with pytest.raises(ModelError) as info:
        replace(record, **{field: value})
    assert info.value.key == field
    return info.value.reason


@pytest.mark.parametrize("record", [SENSE, READBACK], ids=["current_sense", "bias_readback"])
def test_adc_bits_from_1_to_24(record):
    assert replace(record, adc_bits=1).full_scale_code == 1
    assert replace(record, adc_bits=24).full_scale_code == (1 << 24) - 1
    for bad in (0, 25, 12.0):
        assert _refused(record, "adc_bits", bad) == f"must be a whole number from 1 to 24, got {bad!r}"


@pytest.mark.parametrize("field", ["reference_v", "sense_gain_v_per_a"])
def test_current_sense_positive_fields(field):
    assert getattr(replace(SENSE, **{field: 0.5}), field) == 0.5
    for bad in (0.0, -1.0, NAN):
        assert _refused(SENSE, field, bad) == f"must be a positive number, got {bad!r}"


@pytest.mark.parametrize("field", ["reference_tolerance_pct", "gain_tolerance_pct", "offset_a",
                                   "gain_tempco_ppm_per_k", "offset_drift_a_per_k"])
def test_current_sense_non_negative_fields(field):
    assert getattr(replace(SENSE, **{field: 0.0}), field) == 0.0
    for bad in (-1e-12, NAN):
        assert _refused(SENSE, field, bad) == f"must be a non-negative number, got {bad!r}"


def test_readback_reference_and_ratio():
    assert replace(READBACK, reference_v=0.5).reference_v == 0.5
    for bad in (0.0, -3.3, NAN):
        assert _refused(READBACK, "reference_v", bad) == f"must be a positive number, got {bad!r}"
    assert replace(READBACK, divider_ratio_v_per_v=1.0).lsb_v == pytest.approx(3.3 / 4096)
    for bad in (0.0, 1.0001, NAN):
        assert _refused(READBACK, "divider_ratio_v_per_v", bad) == f"must be above 0 and at most 1, got {bad!r}"


@pytest.mark.parametrize("field", ["reference_tolerance_pct", "divider_tolerance_pct", "offset_v",
                                   "filter_time_constant_s"])
def test_readback_non_negative_fields(field):
    assert getattr(replace(READBACK, **{field: 0.0}), field) == 0.0
    for bad in (-1e-12, NAN):
        assert _refused(READBACK, field, bad) == f"must be a non-negative number, got {bad!r}"
