"""The device records refuse what their models cannot handle: each error carries the field at fault and says why.

Every bound is tried on both sides: the last value accepted and the first refused.
"""

from dataclasses import replace

import pytest

from compensator.errors import ModelError
from compensator.physics.bias_readback import BiasReadback
from compensator.physics.current_sense import CurrentSense
from compensator.physics.scintillator import Scintillator
from compensator.physics.sensors import NtcSensor, SteinhartHart

NAN = float("nan")

SENSE = CurrentSense(adc_bits=12, reference_v=3.3, sense_gain_v_per_a=1e4)
READBACK = BiasReadback(adc_bits=12, reference_v=3.3, divider_ratio_v_per_v=0.08)
CRYSTAL = Scintillator(light_yield_tempco_pct_per_k=-0.3)


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


@pytest.mark.parametrize("field", ["ref_temp_c", "light_yield_tempco_pct_per_k", "light_yield_curvature_pct_per_k2",
                                   "light_yield_tempco_err_pct_per_k"])
def test_scintillator_fields_are_finite(field):
    for bad in (NAN, float("inf")):
        assert _refused(CRYSTAL, field, bad) == f"must be finite, got {bad!r}"


def test_scintillator_uncertainty_is_non_negative():
    for fine in (0.0, 0.5, 2.0):
        assert replace(CRYSTAL, light_yield_tempco_err_pct_per_k=fine).light_yield_tempco_err_pct_per_k == fine
    assert _refused(CRYSTAL, "light_yield_tempco_err_pct_per_k", -0.01) == "must be non-negative"


def test_ntc_needs_exactly_one_model():
    sh = SteinhartHart(1.129148e-3, 2.34125e-4, 8.76741e-8)
    for kwargs in ({}, {"beta_k": 3435.0, "steinhart_hart": sh}):
        with pytest.raises(ModelError) as info:
            NtcSensor(10_000.0, **kwargs)
        assert info.value.key == "beta_k"
        assert info.value.reason == "an NTC needs exactly one of beta_k and steinhart_hart"
