"""Interlocks and their limits, pinned where mutation testing found them loose (tools/mutation.md).

Every expected value is a hand calculation from the profile's numbers or the rule as the docstrings state it
(written again here), never the module's own output. Quick: no C compiler, no long sequences.
"""

from __future__ import annotations

import dataclasses
from types import SimpleNamespace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware.faults import FaultFlag
from compensator.firmware.interlocks import (
    ABSENT,
    INT32_MAX,
    STATE_OFF,
    STATE_RUN,
    STATE_TRIPPED,
    InterlockInputs,
    InterlockLimits,
    Interlocks,
    build_interlock_limits,
    floor_div_pow2,
)
from compensator.firmware.interlock_limits import supply_fault_tolerance_v
from compensator.law.safety import highest_output_v

#: Small limits written by hand: a 12-bit DAC whose bias rises with the code, the sensor on the divider's high
#: side (a code below the band is an open sensor), no read-back channel.
SMALL = InterlockLimits(
    tick_ms=100, dac_full_scale=4095, bias_rises_with_code=True, safe_dac_code=0, bias_limit_level=4000,
    ov_limit_ref_mdegc=0, ov_limit_level_at_ref=2000, ov_limit_slope_q=1 << 24, slew_levels_per_tick=10,
    adc_fault_lo=100, adc_fault_hi=3900, adc_low_is_open=True, max_step_mdegc=500, over_current_na=1000,
    hot_side_max_mdegc=60_000, dew_margin_mdegc=1000, heartbeat_timeout_ms=0)


def _in(**kw):
    base = dict(now_ms=0, adc_code=2000, temp_mdegc=20_000, request_dac_code=0, outputs_enabled=1, last_host_ms=0)
    return InterlockInputs(**{**base, **kw})


# ---------------------------------------------------------------- the limits record

@pytest.mark.parametrize("key, edge", [
    ("dac_full_scale", (1 << 31) - 1), ("max_step_mdegc", INT32_MAX), ("over_current_na", INT32_MAX),
    ("heartbeat_timeout_ms", INT32_MAX), ("ov_limit_level_at_ref", INT32_MAX), ("ov_limit_level_at_ref", -INT32_MAX),
    ("readback_at_level0_q", 1 << 50), ("readback_at_level0_q", -(1 << 50)), ("readback_per_level_q", INT32_MAX),
    ("readback_per_level_q", 0), ("supply_fault_codes", INT32_MAX), ("supply_fault_codes", 0),
    ("supply_fault_ticks", 65_535), ("supply_fault_ticks", 0), ("adc_fault_lo", 3900),
])
def test_limits_accepted_at_their_ends(key, edge):
    assert getattr(dataclasses.replace(SMALL, **{key: edge}), key) == edge


def test_the_smallest_dac_and_a_single_readback_code_are_accepted():
    one = dataclasses.replace(SMALL, dac_full_scale=1, bias_limit_level=1, slew_levels_per_tick=1)
    assert one.dac_full_scale == 1 and one.code(1) == 1
    top = dataclasses.replace(SMALL, readback_min_code=INT32_MAX, readback_max_code=INT32_MAX)
    assert top.readback_min_code == top.readback_max_code == INT32_MAX


@pytest.mark.parametrize("key, bad, others", [
    ("readback_at_level0_q", (1 << 50) + 1, {}), ("readback_at_level0_q", -(1 << 50) - 1, {}),
    ("readback_per_level_q", -1, {}), ("readback_per_level_q", 1 << 31, {}),
    ("readback_min_code", -1, {}), ("readback_min_code", 5, {"readback_max_code": 4}),
    ("readback_min_code", 0, {"readback_max_code": 1 << 31}),
    ("supply_fault_codes", -1, {}), ("supply_fault_codes", 1 << 31, {}),
    ("supply_fault_ticks", -1, {}), ("supply_fault_ticks", 65_536, {}),
    ("ov_limit_level_at_ref", -(1 << 31), {}), ("adc_fault_lo", 3901, {}),
])
def test_limits_refused_beyond_their_ends_with_the_key_and_value(key, bad, others):
    with pytest.raises(ModelError) as info:
        dataclasses.replace(SMALL, **{key: bad, **others})
    assert info.value.key == key and info.value.reason == f"{bad!r} is out of range"


def test_the_level_and_the_limit_line_by_hand():
    falling = dataclasses.replace(SMALL, bias_rises_with_code=False)
    assert falling.level(1000) == 3095 and falling.code(3095) == 1000 and SMALL.level(1000) == 1000
    # 2000 levels at 0 C, one level per milli-kelvin (slope 2^24 / 2^24), at most the board's 4000, at least 0
    assert [SMALL.limit_level(t) for t in (0, 1500, -1500, 2500, -2500, -(1 << 31))] == [2000, 3500, 500, 4000, 0, 0]
    half = dataclasses.replace(SMALL, ov_limit_slope_q=1 << 23)       # half a level per milli-kelvin, floored
    assert [half.limit_level(t) for t in (1, 3, -1, -3)] == [2000, 2001, 1999, 1998]
    # the temperature difference is clamped to +-2^30 mK before the product (-2^31 - 0 would be -2^31)
    steep = dataclasses.replace(SMALL, ov_limit_level_at_ref=0, ov_limit_slope_q=-(1 << 24), bias_limit_level=4095)
    assert steep.limit_level(-(1 << 31)) == 4095
    assert floor_div_pow2(-1, 1) == -1 and floor_div_pow2(-3, 1) == -2 and floor_div_pow2(5, 2) == 1


def test_expected_readback_rounds_half_up_and_clamps():
    # 1.5 read-back codes per level, 10 codes at level 0, clamped to [12, 20]
    lim = dataclasses.replace(SMALL, readback_at_level0_q=10 << 16, readback_per_level_q=3 << 15,
                              readback_min_code=12, readback_max_code=20)
    assert [lim.expected_readback_code(v) for v in (0, 1, 2, 3, 4, 5, 6, 7, 100)] == [12, 12, 13, 15, 16, 18, 19, 20, 20]
    # 10.5 rounds up, -0.5 rounds up too (floor of x + 1/2)
    lim = dataclasses.replace(lim, readback_min_code=0, readback_at_level0_q=-(1 << 15), readback_per_level_q=1 << 16)
    assert lim.expected_readback_code(0) == 0 and lim.expected_readback_code(1) == 1


# ---------------------------------------------------------------- the reference, rule by rule

def test_latch_records_only_the_new_bits_and_keeps_the_old_ones():
    ilk = Interlocks(SMALL)
    ilk.latch(FaultFlag.REQUEST_REFUSED, 10, 5)
    ilk.latch(FaultFlag.OVER_CURRENT | FaultFlag.REQUEST_REFUSED, 20, 6)
    assert ilk.faults_latched == FaultFlag.OVER_CURRENT | FaultFlag.REQUEST_REFUSED
    assert ilk.trip_record(8) == (10, 5)           # latched before: its record is kept
    assert ilk.trip_record(3) == (20, 6)           # OVER_CURRENT is bit 3
    assert all(ilk.trip_record(b) == (0, 0) for b in range(16) if b not in (3, 8))
    # values are saturated to int32, the time is kept modulo 2^32
    ilk.latch(1 << 12, (1 << 32) + 7, -(1 << 40))
    ilk.latch(1 << 13, 1, 1 << 40)
    assert ilk.trip_record(12) == (7, -(1 << 31)) and ilk.trip_record(13) == (1, INT32_MAX)
    # clearing one bit leaves the others' records
    ilk.clear(FaultFlag.REQUEST_REFUSED)
    assert ilk.trip_record(8) == (0, 0) and ilk.trip_record(3) == (20, 6) and ilk.trip_record(12) == (7, -(1 << 31))


def test_two_faults_in_one_tick_are_both_raised_and_recorded():
    ilk = Interlocks(SMALL)
    out = ilk.step(_in(now_ms=300, sipm_current_na=1001, hot_side_mdegc=60_001))
    assert out.faults_live == FaultFlag.OVER_CURRENT | FaultFlag.HOT_SIDE_OVER_TEMP and out.state == STATE_TRIPPED
    assert ilk.trip_record(3) == (300, 1001) and ilk.trip_record(5) == (300, 60_001)   # bits 3 and 5


def test_sensor_on_the_high_side_a_low_code_is_open():
    assert Interlocks(SMALL).step(_in(adc_code=99)).faults_live == FaultFlag.SENSOR_OPEN
    assert Interlocks(SMALL).step(_in(adc_code=3901)).faults_live == FaultFlag.SENSOR_SHORT
    low = dataclasses.replace(SMALL, adc_low_is_open=False)
    assert Interlocks(low).step(_in(adc_code=99)).faults_live == FaultFlag.SENSOR_SHORT
    assert Interlocks(low).step(_in(adc_code=3901)).faults_live == FaultFlag.SENSOR_OPEN


@pytest.mark.parametrize("bad_code", [99, 3901])
def test_no_rate_check_across_an_implausible_code(bad_code):
    ilk = Interlocks(SMALL)
    assert ilk.step(_in(temp_mdegc=20_000)).faults_live == 0
    ilk.step(_in(adc_code=bad_code, temp_mdegc=-99_000))
    # the next plausible reading is 5 K away from the last plausible one: not a rate fault, there is no previous
    out = ilk.step(_in(temp_mdegc=25_000))
    assert not out.faults_live & FaultFlag.SENSOR_RATE
    assert ilk.step(_in(temp_mdegc=25_501)).faults_live & FaultFlag.SENSOR_RATE      # 501 mK > 500 mK


def test_the_slew_toward_a_request_and_back_to_the_safe_code():
    ilk = Interlocks(SMALL)
    codes = [ilk.step(_in(request_dac_code=35, temp_mdegc=0)).dac_code for _ in range(5)]
    assert codes == [10, 20, 30, 35, 35]
    codes = [ilk.step(_in(request_dac_code=35, temp_mdegc=0, outputs_enabled=0)).dac_code for _ in range(5)]
    assert codes == [25, 15, 5, 0, 0]
    assert ilk.step(_in(temp_mdegc=0, outputs_enabled=0)).state == STATE_OFF


def test_dew_point_margin_and_heartbeat_by_hand():
    ilk = Interlocks(dataclasses.replace(SMALL, heartbeat_timeout_ms=1000))
    # cold side 1 K above the dew point is within the 1 K margin only when strictly below it
    out = ilk.step(_in(cold_side_mdegc=11_000, dew_point_mdegc=10_000, cooler_request=5))
    assert out.faults_live == 0 and out.cooler_drive == 5
    out = ilk.step(_in(cold_side_mdegc=10_999, dew_point_mdegc=10_000, cooler_request=5))
    assert out.faults_live == FaultFlag.DEW_POINT and out.cooler_drive == 0 and out.state == STATE_RUN
    assert ilk.trip_record(6)[1] == 999
    assert ilk.step(_in(now_ms=1000, last_host_ms=0)).state == STATE_RUN
    out = ilk.step(_in(now_ms=1001, last_host_ms=0))
    assert out.faults_live == FaultFlag.HEARTBEAT_LOST and out.state == STATE_TRIPPED


def test_absent_channels_never_trip():
    out = Interlocks(SMALL).step(_in(sipm_current_na=ABSENT, hot_side_mdegc=ABSENT, cold_side_mdegc=ABSENT,
                                     dew_point_mdegc=0, bias_readback_code=ABSENT))
    assert out.faults_live == 0 and out.state == STATE_RUN


# ---------------------------------------------------------------- limits from the profiles, by hand

def test_supply_fault_tolerance_is_the_stated_sum(board_ntc):
    # the rule of supply_fault_tolerance_v written again: the worst set-point error at either end of the DAC range
    # (law.safety.highest_output_v), the read-back's gain error at the highest output, its offset, one code, one
    # slew step
    s, rb = board_ntc.supply, board_ntc.bias_readback
    span = SimpleNamespace(supply=s, min_temp_c=board_ntc.min_temp_c, max_temp_c=board_ntc.max_temp_c)
    setpoint = max(highest_output_v(span, board_ntc, c) - float(s.output_v(c)) for c in (0, 65535))
    gain = 35.18518518518518 * (0.2 + 0.5) / 100        # hut-board-ntc: 35.185 V top, 0.2 % divider, 0.5 % ref
    expected = setpoint + gain + 0.02 + 3.3 / 4096 / 0.08   # offset 20 mV, one 12-bit code through 0.08 V/V
    assert supply_fault_tolerance_v(board_ntc) == pytest.approx(expected, rel=1e-12, abs=0)
    assert supply_fault_tolerance_v(board_ntc, slew_step_v=0.25) == pytest.approx(expected + 0.25, rel=1e-12, abs=0)
    assert setpoint == pytest.approx(0.369489, abs=1e-6)     # at code 0, the highest output
    # a board whose set point cannot err upward adds nothing for it (max with 0)
    exact = dataclasses.replace(board_ntc, supply=dataclasses.replace(
        s, dac=dataclasses.replace(s.dac, reference_tolerance_pct=0.0, reference_tempco_ppm_per_k=0.0, offset_lsb=0.0,
                                   gain_error_pct=0.0, inl_lsb=0.0),
        resistor_tolerance_pct=0.0, resistor_tempco_ppm_per_k=0.0, feedback_tolerance_pct=0.0,
        feedback_tempco_ppm_per_k=0.0))
    assert supply_fault_tolerance_v(exact) == pytest.approx(gain + 0.02 + 3.3 / 4096 / 0.08, rel=1e-9, abs=0)


def test_no_readback_channel_is_refused(board_pt1000):
    with pytest.raises(ModelError) as info:
        supply_fault_tolerance_v(board_pt1000)
    assert info.value.key == "bias_readback"
    assert info.value.reason == "the board has no bias read-back channel: a supply fault cannot be detected"


def test_readback_constants_by_hand(sipm_a, board_ntc):
    lim = build_interlock_limits(sipm_a, board_ntc)
    lsb = 3.3 / 4096 / 0.08                 # read-back volts per code
    vpl = 2.5 / 65536 * 1e6 / 250e3         # feedback injection: DAC volts per code times R1 / R3
    assert lim.volts_per_level == pytest.approx(vpl, rel=1e-12)
    v0 = float(board_ntc.supply.output_v(65535))   # level 0 is the top code: the lowest output
    assert lim.readback_at_level0_q == round(v0 / lsb * 65536)
    assert lim.readback_per_level_q == round(vpl / lsb * 65536) == 993
    lo, hi = board_ntc.supply.output_range_v()
    assert (lim.readback_min_code, lim.readback_max_code) == (round(lo / lsb), round(hi / lsb)) == (2501, 3494)
    slew_levels = int(2.0 * 0.1 / vpl)      # 2 V/s at 10 Hz
    assert lim.slew_levels_per_tick == slew_levels == 1310
    tol = supply_fault_tolerance_v(board_ntc, slew_step_v=slew_levels * vpl)
    assert lim.supply_fault_codes == int(np.ceil(tol / lsb)) == 84
    # settling: five time constants of the read-back filter and the bias filter (10 kohm x 100 nF), at least 3
    assert lim.supply_fault_ticks == 3
    slow = dataclasses.replace(board_ntc, bias_readback=dataclasses.replace(board_ntc.bias_readback,
                                                                            filter_time_constant_s=0.2))
    # 5 x (0.2 + 0.001) s / 0.1 s = 10.05 -> 11 ticks, plus the tick of the jump
    assert build_interlock_limits(sipm_a, slow).supply_fault_ticks == 12
    no_c = dataclasses.replace(slow, supply=dataclasses.replace(board_ntc.supply, filter_capacitance_f=None))
    assert build_interlock_limits(sipm_a, no_c).supply_fault_ticks == 11      # 5 x 0.2 / 0.1 = 10 -> 10, + 1


def test_options_at_their_ends(sipm_a, board_ntc):
    assert build_interlock_limits(sipm_a, board_ntc, fault_margin_k=0.0).adc_fault_lo > \
        build_interlock_limits(sipm_a, board_ntc).adc_fault_lo
    assert build_interlock_limits(sipm_a, board_ntc, heartbeat_timeout_s=0.0).heartbeat_timeout_ms == 0
    assert build_interlock_limits(sipm_a, board_ntc, slew_v_per_s=0.5).slew_levels_per_tick == int(0.05 / 2.5 * 65536 / 4)
    for key, value, word in (("fault_margin_k", -1e-3, "non-negative"), ("heartbeat_timeout_s", -0.5, "non-negative"),
                             ("slew_v_per_s", 0.0, "positive"), ("fault_margin_k", float("inf"), "non-negative")):
        with pytest.raises(ModelError) as info:
            build_interlock_limits(sipm_a, board_ntc, **{key: value})
        assert info.value.key == key and info.value.reason == f"must be a {word} number, got {value!r}"


def test_the_cooler_parameters_work_as_the_profile(sipm_a, board_ntc, cooler):
    assert build_interlock_limits(sipm_a, board_ntc, cooler.cooler) == build_interlock_limits(sipm_a, board_ntc, cooler)
    # twice (S I T_hot + R I^2) / C over a 0.1 s tick: 2 (0.05 x 3 x 343.15 + 2 x 9) / 20 x 0.1 K = 0.6947 K
    assert build_interlock_limits(sipm_a, board_ntc, cooler).max_step_mdegc == 695


def test_board_maximum_exactly_at_a_code(sipm_b, board_pt1000):
    # hut-board-pt1000's direct supply: a board maximum exactly at the output of code 1000 allows level 1000
    s = board_pt1000.supply
    at = float(s.output_v(1000))
    assert (at - s.intercept_v) / s.volts_per_code == pytest.approx(1000, abs=1e-9)
    assert build_interlock_limits(sipm_b, dataclasses.replace(board_pt1000, max_bias_v=at)).bias_limit_level == 1000
    # a maximum below the supply's lowest output allows level 0 only
    low = dataclasses.replace(board_pt1000, max_bias_v=float(s.output_range_v()[0]) - 1.0)
    assert build_interlock_limits(sipm_b, low).bias_limit_level == 0


def test_limits_of_the_rules_exactly_at_their_values():
    ilk = Interlocks(SMALL)
    # a hot side present and at its limit, or below it, does not trip (only above)
    assert ilk.step(_in(temp_mdegc=0, hot_side_mdegc=60_000)).faults_live == 0
    assert ilk.step(_in(temp_mdegc=0, hot_side_mdegc=25_000)).faults_live == 0
    # a request above the limit line is clamped; the record is by how many levels (3000 asked, 2000 allowed at 0 C)
    out = ilk.step(_in(now_ms=100, temp_mdegc=0, request_dac_code=3000))
    assert out.faults_live == FaultFlag.BIAS_LIMIT and ilk.trip_record(4) == (100, 1000)
    # a latch from outside the tick records the value 0 unless given one
    ilk.latch(FaultFlag.REQUEST_REFUSED, 5)
    assert ilk.trip_record(8) == (5, 0)
    with pytest.raises(ModelError) as info:
        Interlocks({"tick_ms": 100})
    assert info.value.key == "limits" and info.value.reason == "need InterlockLimits, got dict"


def test_a_readback_exactly_at_the_fault_limit_is_healthy():
    # expected code 16 at level 0 (16 codes, one code per level); a disagreement of 4 codes is allowed, 5 is not
    lim = dataclasses.replace(SMALL, readback_at_level0_q=16 << 16, readback_per_level_q=1 << 16,
                              readback_min_code=0, readback_max_code=5000, supply_fault_codes=4, supply_fault_ticks=2)
    ilk = Interlocks(lim)
    for _ in range(5):
        assert ilk.step(_in(temp_mdegc=0, bias_readback_code=20)).faults_live == 0
        assert ilk.step(_in(temp_mdegc=0, bias_readback_code=12)).faults_live == 0
    assert ilk.step(_in(temp_mdegc=0, bias_readback_code=21)).faults_live == 0         # one tick of two
    out = ilk.step(_in(now_ms=7, temp_mdegc=0, bias_readback_code=11))
    assert out.faults_live == FaultFlag.SUPPLY_FAULT and ilk.trip_record(9) == (7, -5)


def test_limit_line_level_at_its_reference_by_hand(sipm_a, board_ntc):
    # hut-sipm-a: Vbd = 24.5 V + 21.5 mV/K (T - 25 C), straight; at most 7 V over it. hut-board-ntc: feedback
    # injection, Vout = 1.25 V (1 + 1 M/43.2 k + 1 M/250 k) - code x 2.5 V/65536 x 1 M/250 k; level = 65535 - code.
    intercept_v = 1.25 * (1 + 1e6 / 43.2e3 + 1e6 / 250e3)
    v_per_code = 2.5 / 65536 * 1e6 / 250e3

    def level_below(volts):     # the level just below a bias, one more level down for the rounding (docstring)
        return int(np.floor(65535 - (intercept_v - volts) / v_per_code)) - 1

    lim = build_interlock_limits(sipm_a, board_ntc)
    assert lim.ov_limit_ref_mdegc == -45_000
    assert lim.ov_limit_level_at_ref == level_below(24.5 + 0.0215 * (-45 - 25) + 7.0) == 31519
    # a margin that puts the coldest temperature between two milli-kelvin: the line is taken at the whole
    # milli-kelvin below it (-45.005 C for -45.0043 C)
    lim = build_interlock_limits(sipm_a, board_ntc, fault_margin_k=20.0043)
    assert lim.ov_limit_ref_mdegc == -45_005
    assert lim.ov_limit_level_at_ref == level_below(24.5 + 0.0215 * (-45.005 - 25) + 7.0) == 31518
    assert lim.adc_low_is_open is False and lim.bias_rises_with_code is False


def test_a_sensor_on_the_high_side_reads_open_low(sipm_a, board_ntc):
    fe = dataclasses.replace(board_ntc.temperature.front_end, sensor_position="high")
    high = dataclasses.replace(board_ntc, temperature=dataclasses.replace(board_ntc.temperature, front_end=fe))
    lim = build_interlock_limits(sipm_a, high)
    assert lim.adc_low_is_open is True
    # the NTC (10 k at 25 C, Beta 3435 K) above a 10 k resistor: code = 4096 x 10 k / (R + 10 k), ratiometric
    r = [10e3 * np.exp(3435.0 * (1 / (t + 273.15) - 1 / 298.15)) for t in (-45.0, 65.0)]
    codes = [4096 * 10e3 / (x + 10e3) for x in r]
    assert (lim.adc_fault_lo, lim.adc_fault_hi) == (int(codes[0]), int(codes[1])) == (116, 3261)


def test_a_fault_band_beyond_the_sensor_model_reaches_the_rail(sipm_a, board_ntc):
    # -25 C less 248 K is -273 C, where the Beta model's reading is not finite: an NTC below its resistor reads
    # full scale when cold, so the band reaches the top rail less one; the hot end by the Beta model at 293 C.
    lim = build_interlock_limits(sipm_a, board_ntc, fault_margin_k=248.0)
    r_hot = 10e3 * np.exp(3435.0 * (1 / (293.0 + 273.15) - 1 / 298.15))
    assert (lim.adc_fault_lo, lim.adc_fault_hi) == (int(4096 * r_hot / (r_hot + 10e3)), 4094) == (17, 4094)


def test_over_current_and_slew_options(sipm_a, board_ntc):
    for bad in (0.0, -1.0, float("nan")):
        with pytest.raises(ModelError) as info:
            build_interlock_limits(sipm_a, board_ntc, over_current_a=bad)
        assert info.value.key == "over_current_a" and info.value.reason == f"must be a positive current, got {bad!r}"
    assert build_interlock_limits(sipm_a, board_ntc, over_current_a=1.5e-6).over_current_na == 1500
    assert build_interlock_limits(sipm_a, board_ntc, over_current_a=5.0).over_current_na == INT32_MAX
    # far below one level per tick the slew is still one level a tick
    assert build_interlock_limits(sipm_a, board_ntc, slew_v_per_s=1e-6).slew_levels_per_tick == 1


def test_a_high_side_sensor_beyond_its_model_reaches_the_low_rail(sipm_a, board_ntc):
    import warnings

    fe = dataclasses.replace(board_ntc.temperature.front_end, sensor_position="high")
    high = dataclasses.replace(board_ntc, temperature=dataclasses.replace(board_ntc.temperature, front_end=fe))
    with warnings.catch_warnings():
        warnings.simplefilter("error")          # the non-finite reading at -273 C raises no numpy warning
        lim = build_interlock_limits(sipm_a, high, fault_margin_k=248.0)
    # cold, the NTC above its resistor reads 0: the band starts at code 1; hot (293 C) by the Beta model
    r_hot = 10e3 * np.exp(3435.0 * (1 / (293.0 + 273.15) - 1 / 298.15))
    assert (lim.adc_fault_lo, lim.adc_fault_hi) == (1, int(4096 * 10e3 / (r_hot + 10e3))) == (1, 4078)


@pytest.mark.parametrize("rate_hz, tick_ms, step_mdegc, slew, ticks", [
    # 1 kHz: 2 K/s x 1 ms = 2 mK; 2 V/s x 1 ms / 152.6 uV = 13.1 levels; 5 x (1 ms + 10 k x 100 nF) / 1 ms + 1 = 11
    (1000.0, 1, 2, 13, 11),
    # 1 Hz: 1000 ms, 2000 mK, 13107.2 levels, 5 x 2 ms / 1 s -> 1 + 1 = 2, at least 3
    (1.0, 1000, 2000, 13107, 3),
])
def test_the_control_rate_by_hand(sipm_a, board_ntc, rate_hz, tick_ms, step_mdegc, slew, ticks):
    lim = build_interlock_limits(sipm_a, dataclasses.replace(board_ntc, control_rate_hz=rate_hz))
    assert (lim.tick_ms, lim.max_step_mdegc, lim.slew_levels_per_tick, lim.supply_fault_ticks) == (
        tick_ms, step_mdegc, slew, ticks)


def test_readback_codes_of_a_supply_from_zero_volts(sipm_b, board_pt1000, board_ntc):
    # a direct supply from 0 V (14 x 2.5 V = 35 V at full scale) read through hut-board-ntc's read-back channel
    supply = dataclasses.replace(board_pt1000.supply, offset_v=0.0, min_output_v=0.0)
    board = dataclasses.replace(board_pt1000, supply=supply, bias_readback=board_ntc.bias_readback, max_bias_v=35.0)
    lim = build_interlock_limits(sipm_b, board)
    lsb = 3.3 / 4096 / 0.08
    assert (lim.readback_min_code, lim.readback_max_code) == (0, round(14 * 2.5 * 65535 / 65536 / lsb)) == (0, 3475)
    assert lim.readback_at_level0_q == 0


def test_a_curved_breakdown_puts_the_line_below_the_whole_parabola(sipm_c, board_pt1000):
    # hut-sipm-c: Vbd = 53.5 V + 55 mV/K (T - 25) + 0.05 mV/K^2 (T - 25)^2, at most 10 V over it; from -45 to 65 C
    # (L = 110 K) the chord of a parabola lies above it by at most c (L/2)^2 = 0.05e-3 x 55^2 = 0.15125 V, at the
    # middle: the line is the chord shifted down by that. hut-board-pt1000: direct, 30 V + code x 14 x 2.5 V / 65536.
    top_at_lo_v = 53.5 + 0.055 * (-70) + 0.05e-3 * 70 ** 2 + 10.0
    level = (top_at_lo_v - 0.05e-3 * 55 ** 2 - 30.0) / (14 * 2.5 / 65536)
    assert level == pytest.approx(55693.897, abs=1e-3)
    lim = build_interlock_limits(sipm_c, board_pt1000)
    assert lim.ov_limit_level_at_ref == int(np.floor(level)) - 1 == 55692
