"""The SiPM current channel and the bias read-back: ideal ADC transfer and model refusals, by hand.

The ideal ADC with code centres on whole multiples of the LSB, ``code = clip(floor(x + 1/2), 0, 2^N - 1)``, is
common practice; every expected value below is a hand calculation from it.
"""

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.physics.bias_readback import BiasReadback
from compensator.physics.current_sense import CurrentSense, centred_adc_code


def test_centred_adc_code_by_hand():
    codes = centred_adc_code([-3.0, 0.49, 0.5, 1.4999, 2.5, 1022.5, 1e9], 1023)
    # floor(x + 0.5): -2.5 -> 0 (clipped), 0.99 -> 0, 1.0 -> 1, 1.9999 -> 1, 3.0 -> 3, 1023 -> 1023, clipped above.
    assert codes.tolist() == [0, 0, 1, 1, 3, 1023, 1023] and codes.dtype == np.int64


def test_current_channel_by_hand():
    # 12 bits, 2.5 V reference, 10 kV/A transimpedance: 2.5 / 4096 / 1e4 = 61.035 nA per code.
    cs = CurrentSense(adc_bits=12, reference_v=2.5, sense_gain_v_per_a=1e4)
    lsb = 2.5 / 4096 / 1e4
    assert cs.lsb_a == pytest.approx(lsb, rel=1e-15, abs=0) and cs.full_scale_code == 4095
    assert cs.full_scale_a == pytest.approx(4095 * lsb, rel=1e-15, abs=0)
    # 10 uA is 163.84 codes -> 164; half a code either side of 100 codes -> 100 and 101.
    assert cs.adc_code([10e-6, 99.4999 * lsb, 100.5 * lsb, -1e-6, 1.0]).tolist() == [164, 99, 101, 0, 4095]
    assert cs.continuous_code(10e-6) == pytest.approx(163.84, rel=1e-13, abs=0)
    # Errors: +1 % sense gain reads 1 % high, +1 % reference 1/1.01 as high, an offset adds its codes.
    assert cs.continuous_code(10e-6, gain_error=0.01) == pytest.approx(163.84 * 1.01, rel=1e-13, abs=0)
    assert cs.continuous_code(10e-6, reference_error=0.01) == pytest.approx(163.84 / 1.01, rel=1e-13, abs=0)
    assert cs.continuous_code(10e-6, offset_a=lsb) == pytest.approx(164.84, rel=1e-13, abs=0)
    # The same errors reach the quantised code: 163.84 x 1.01 = 165.48 -> 165; / 1.01 = 162.22 -> 162;
    # with a 0.7-code offset 164.54 -> 165.
    assert cs.adc_code(10e-6, 0.01).tolist() == 165
    assert cs.adc_code(10e-6, reference_error=0.01).tolist() == 162
    assert cs.adc_code(10e-6, offset_a=0.7 * lsb).tolist() == 165
    assert cs.current_a([0, 164, 4095]).tolist() == pytest.approx([0.0, 164 * lsb, 4095 * lsb], rel=1e-15, abs=0)


CURRENT_KW = dict(adc_bits=12, reference_v=2.5, sense_gain_v_per_a=1e4)
READBACK_KW = dict(adc_bits=12, reference_v=3.3, divider_ratio_v_per_v=0.08)


@pytest.mark.parametrize("model, field, value, reason", [
    (CurrentSense, "adc_bits", 0, "must be a whole number from 1 to 24, got 0"),
    (CurrentSense, "adc_bits", 25, "must be a whole number from 1 to 24, got 25"),
    (CurrentSense, "adc_bits", 12.0, "must be a whole number from 1 to 24, got 12.0"),
    (CurrentSense, "reference_v", 0.0, "must be a positive number, got 0.0"),
    (CurrentSense, "reference_v", float("nan"), "must be a positive number, got nan"),
    (CurrentSense, "sense_gain_v_per_a", -1.0, "must be a positive number, got -1.0"),
    (CurrentSense, "sense_gain_v_per_a", float("inf"), "must be a positive number, got inf"),
    (CurrentSense, "reference_tolerance_pct", -0.1, "must be a non-negative number, got -0.1"),
    (CurrentSense, "gain_tolerance_pct", float("nan"), "must be a non-negative number, got nan"),
    (CurrentSense, "offset_a", -1e-9, "must be a non-negative number, got -1e-09"),
    (CurrentSense, "gain_tempco_ppm_per_k", float("inf"), "must be a non-negative number, got inf"),
    (CurrentSense, "offset_drift_a_per_k", -1e-12, "must be a non-negative number, got -1e-12"),
    (BiasReadback, "adc_bits", 25, "must be a whole number from 1 to 24, got 25"),
    (BiasReadback, "adc_bits", 8.0, "must be a whole number from 1 to 24, got 8.0"),
    (BiasReadback, "reference_v", 0.0, "must be a positive number, got 0.0"),
    (BiasReadback, "reference_v", float("inf"), "must be a positive number, got inf"),
    (BiasReadback, "divider_ratio_v_per_v", 0.0, "must be above 0 and at most 1, got 0.0"),
    (BiasReadback, "divider_ratio_v_per_v", float("nan"), "must be above 0 and at most 1, got nan"),
    (BiasReadback, "reference_tolerance_pct", -0.1, "must be a non-negative number, got -0.1"),
    (BiasReadback, "divider_tolerance_pct", float("inf"), "must be a non-negative number, got inf"),
    (BiasReadback, "offset_v", -0.01, "must be a non-negative number, got -0.01"),
    (BiasReadback, "filter_time_constant_s", -1e-3, "must be a non-negative number, got -0.001"),
])
def test_channel_refusals(model, field, value, reason):
    kw = dict(CURRENT_KW if model is CurrentSense else READBACK_KW)
    kw[field] = value
    with pytest.raises(ModelError) as info:
        model(**kw)
    assert info.value.key == field and info.value.reason == reason


def test_current_channel_edges_are_accepted():
    # 1 and 24 bits, numpy integers, zero tolerances and offsets are all valid.
    assert CurrentSense(adc_bits=1, reference_v=1.0, sense_gain_v_per_a=1.0).full_scale_code == 1
    assert CurrentSense(adc_bits=np.int64(24), reference_v=1.0, sense_gain_v_per_a=1.0).full_scale_code == (1 << 24) - 1
    zero = CurrentSense(adc_bits=12, reference_v=2.5, sense_gain_v_per_a=1e4, reference_tolerance_pct=0.0,
                        gain_tolerance_pct=0.0, offset_a=0.0, gain_tempco_ppm_per_k=0.0, offset_drift_a_per_k=0.0)
    assert zero.gain_tolerance_pct == 0.0


def test_readback_edges_and_errors_by_hand():
    # A divider of exactly 1 (the ADC reads the output itself), 1 and 24 bits, zero tolerances are valid.
    rb = BiasReadback(adc_bits=1, reference_v=2.0, divider_ratio_v_per_v=1.0, reference_tolerance_pct=0.0,
                      divider_tolerance_pct=0.0, offset_v=0.0, filter_time_constant_s=0.0)
    assert rb.lsb_v == 1.0 and rb.full_scale_code == 1 and rb.full_scale_v == 1.0
    assert rb.adc_code([0.49, 0.5, 7.0]).tolist() == [0, 1, 1]
    big = BiasReadback(adc_bits=np.int32(24), reference_v=2.5, divider_ratio_v_per_v=0.05)
    assert big.lsb_v == pytest.approx(2.5 / 2 ** 24 / 0.05, rel=1e-15, abs=0)
    # 10-bit, 2.048 V, ratio 0.05: 40 mV per code. 20 V is 500 codes; +1 % divider and 40 mV offset:
    # 20.04 V x 1.01 / 0.04 V = 506.01 -> 506; a +2 % reference: 500 / 1.02 = 490.196 -> 490.
    rb = BiasReadback(adc_bits=10, reference_v=2.048, divider_ratio_v_per_v=0.05)
    assert rb.adc_code(20.0, 0.01, 0.0, 0.04).tolist() == 506
    assert rb.adc_code(20.0, reference_error=0.02).tolist() == 490
    assert rb.output_v([0, 500, 1023]).tolist() == pytest.approx([0.0, 20.0, 40.92], rel=1e-14, abs=0)
