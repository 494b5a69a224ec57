"""The frame of a table (code range, fault band, output clamp, C types, target, sweep) checked by hand.

Uniform and optimised tables only (milliseconds each). Every expected value is computed here from the supply and
sensor formulas directly (a set of DAC codes by their network output, a fault band by the code that holds a
temperature), not from the helpers of :mod:`compensator.firmware.tables`.
"""

from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware import tables as T
from compensator.firmware.tables import build_table, sweep_table
from compensator.law import build_law


def codes_within(supply, lo_v, hi_v):
    """Every DAC code whose network output lies in [lo_v, hi_v] (to 1e-9 of a code), as (first, last)."""
    codes = np.arange(supply.dac.full_scale_code + 1)
    v = supply.network_output_v(codes)
    eps = 1e-9 * supply.lsb_v
    inside = codes[(v >= lo_v - eps) & (v <= hi_v + eps)]
    assert np.all(np.diff(inside) == 1)  # one run of codes
    return int(inside[0]), int(inside[-1])


@pytest.mark.parametrize("pair", [("sipm_a", "board_ntc", 3.0), ("sipm_b", "board_pt1000", 4.0)])
def test_output_clamp_is_every_code_inside_the_supply_limits(pair, request):
    sipm, board = request.getfixturevalue(pair[0]), request.getfixturevalue(pair[1])
    s = board.supply
    for max_bias_v in (board.max_bias_v, 44.0):
        b = replace(board, max_bias_v=max_bias_v)
        law = build_law(sipm, b, pair[2])
        table = build_table(law, b, 0.05, "uniform")
        # The regulator's own limits and the board's max_bias_v (feedback injection: the code runs downwards).
        lo_v = max(s.min_output_v, float(s.network_output_v([0, s.dac.full_scale_code]).min()))
        hi_v = min(s.max_output_v, float(s.network_output_v([0, s.dac.full_scale_code]).max()), max_bias_v)
        assert (table.dac_min, table.dac_max) == codes_within(s, lo_v, hi_v)


def test_fault_band_holds_the_margin_on_either_slope(sipm_a, sipm_b, board_ntc, board_pt1000):
    for sipm, board, ov in ((sipm_a, board_ntc, 3.0), (sipm_b, board_pt1000, 4.0)):
        law = build_law(sipm, board, ov)
        channel = board.temperature
        for margin in (0.0, 7.5):
            table = build_table(law, board, 0.05, "uniform", fault_margin_k=margin)
            # The plausible band is every code whose interval meets [min - margin, max + margin]: its end codes
            # hold the two temperatures (the code n covers the positions [n, n + 1)).
            ends = sorted([law.min_temp_c - margin, law.max_temp_c + margin], key=lambda t: channel.continuous_code(t))
            for code, temp in zip((table.fault_lo, table.fault_hi), ends):
                seen = channel.temp_at(np.array([code, code + 1.0]))
                assert min(seen) <= temp <= max(seen), (board.name, margin, code, temp, seen)
            if margin == 0.0:  # no margin: the band is the operating range itself
                assert (table.fault_lo, table.fault_hi) == (table.code_lo, table.code_hi)


def test_fault_band_never_takes_a_rail(sipm_a, board_ntc):
    # 80 K below the NTC's range (-105 C) the divider reads beyond the top rail of the 12-bit ADC: code 4095 (an
    # open or shorted sensor) is always a fault, so the band stops at 4094.
    law = build_law(sipm_a, board_ntc, 3.0)
    channel = board_ntc.temperature
    x = channel.continuous_code(np.array([-25.0 - 80.0, 45.0 + 80.0]))
    assert x.max() >= 4095 and x.min() < 400  # the cold end is beyond the top rail
    table = build_table(law, board_ntc, 0.05, "uniform", fault_margin_k=80.0)
    assert table.fault_hi == 4094 and table.fault_lo == int(np.floor(x.min())) >= 1
    assert table.lookup([4094])[1][0] == T.TableStatus.COLDER_THAN_RANGE
    assert table.lookup([4095])[1][0] == T.TableStatus.SENSOR_FAULT


def test_fault_band_end_beyond_the_sensor_model_reads_as_an_open_sensor(sipm_a, board_ntc):
    # -25 C less 248 K is -273 C, where the Beta model's reading is not finite. The NTC sits below its 10 kohm
    # resistor, so an open (cold) sensor reads full scale: the band reaches the top rail less one, and its low
    # end is the hot end by the Beta model (B = 3435 K, 10 kohm at 25 C) at 45 + 248 = 293 C.
    law = build_law(sipm_a, board_ntc, 3.0)
    r_hot = 10e3 * np.exp(3435.0 * (1 / (293.0 + 273.15) - 1 / 298.15))
    assert T._fault_band(law, board_ntc, 248.0) == (int(4096 * r_hot / (r_hot + 10e3)), 4094) == (17, 4094)


def test_margin_outside_the_sensor_model_is_refused(sipm_b, board_pt1000):
    # The Pt1000 model (IEC 60751) stops at -200 C: a margin of 190 K below -25 C leaves it.
    law = build_law(sipm_b, board_pt1000, 4.0)
    with pytest.raises(ModelError) as exc:
        build_table(law, board_pt1000, 0.05, "uniform", fault_margin_k=190.0)
    assert exc.value.key == "fault_margin_k"
    assert exc.value.reason.startswith("fault_margin_k: 190 K takes the range outside the sensor model: ")


def board_with(board, *, adc_bits=None, dac_bits=None):
    if adc_bits is not None:
        ch = board.temperature
        board = replace(board, temperature=replace(ch, front_end=replace(ch.front_end, adc_bits=adc_bits)))
    if dac_bits is not None:
        board = replace(board, supply=replace(board.supply, dac=replace(board.supply.dac, bits=dac_bits)))
    return board


def test_c_types_follow_the_converters(sipm_b, board_pt1000):
    # Unsigned C types of at least 16 bits that hold every code: 16 bits up to 16-bit converters, 32 above.
    for adc_bits, dac_bits, code_t, value_t in ((16, 16, 16, 16), (17, 16, 32, 16), (16, 17, 16, 32),
                                                 (10, 16, 16, 16)):
        board = board_with(board_pt1000, adc_bits=adc_bits, dac_bits=dac_bits)
        table = build_table(build_law(sipm_b, board, 4.0), board, 0.5, "uniform")
        assert (table.adc_bits, table.dac_bits) == (adc_bits, dac_bits)
        assert (table.code_type_bits, table.value_type_bits) == (code_t, value_t), (adc_bits, dac_bits)


def test_target_by_hand(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    target = T._target(law, board_ntc, 0.05)
    channel, s = board_ntc.temperature, board_ntc.supply
    # The range: every code whose centre lies in -25 .. 45 C, plus the codes that hold the two ends.
    t_all = channel.temp_at(np.arange(1, 4095) + 0.5)
    inside = np.arange(1, 4095)[(t_all >= -25.0) & (t_all <= 45.0)]
    assert target.codes[0] <= inside[0] <= inside[0] - 1 + 2 and target.codes[-1] in (inside[-1], inside[-1] + 1)
    assert np.array_equal(target.codes, np.arange(target.codes[0], target.codes[-1] + 1))
    assert np.allclose(target.temp_c, channel.temp_at(target.codes + 0.5), rtol=0, atol=0)
    # The exact DAC code puts the law's output on the supply line: intercept + code x volts per code.
    assert np.allclose(s.network_output_v(target.exact), law.output_v(target.temp_c), rtol=0, atol=1e-9)
    # One DAC LSB is 100 x LSB / Vov percent of gain (constant overvoltage law, Vov = 3 V); the bound in LSB
    # is the bound over that.
    per_lsb = 100 * s.lsb_v / 3.0
    assert np.allclose(target.gain_pct_per_lsb, per_lsb, rtol=1e-12)
    assert np.allclose(target.bound_lsb, 0.05 / per_lsb, rtol=1e-12)
    assert target.dac_full == 65535


def test_sweep_by_hand(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    table = build_table(law, board_ntc, 0.05, "optimised")
    sweep = sweep_table(table, law, board_ntc)
    codes = np.arange(table.code_lo, table.code_hi + 1)
    t = board_ntc.temperature.temp_at(codes + 0.5)
    s = board_ntc.supply
    dac, _ = table.lookup(codes)
    ideal_v = law.output_v(t)
    gain = 100 * (s.output_v(dac) - ideal_v) / 3.0  # gain error of the output difference at 3 V overvoltage
    exact = (ideal_v - s.intercept_v) / s.volts_per_code
    assert np.array_equal(sweep.adc_code, codes) and np.array_equal(sweep.table_dac_code, dac)
    assert np.allclose(sweep.temp_c, t, rtol=0, atol=0)
    assert np.allclose(sweep.ideal_bias_v, ideal_v, rtol=0, atol=0)
    assert np.allclose(sweep.ideal_dac_code, exact, rtol=1e-12)
    assert np.allclose(sweep.table_bias_v, s.output_v(dac), rtol=0, atol=0)
    assert np.allclose(sweep.gain_error_pct, gain, rtol=1e-9, atol=1e-15)
    assert sweep.max_gain_error_pct == pytest.approx(np.abs(gain).max(), rel=1e-9)
    assert sweep.worst_adc_code == int(codes[np.argmax(np.abs(gain))])
    assert sweep.max_error_dac_lsb == pytest.approx(np.abs(dac - exact).max(), rel=1e-9)
    assert sweep.within_bound is True
    # Within the bound means at most the bound (to a relative 1e-9 of floating-point slack).
    assert sweep_table(replace(table, max_gain_error_pct=sweep.max_gain_error_pct), law, board_ntc).within_bound
    assert not sweep_table(replace(table, max_gain_error_pct=0.999 * sweep.max_gain_error_pct), law,
                           board_ntc).within_bound


def test_ideal_dac_code_by_hand(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0)
    s = board_pt1000.supply
    temps = np.array([-25.0, 0.0, 45.0])
    # Direct supply: output = offset + gain x code x DAC LSB.
    v = law.output_v(temps)
    assert T.ideal_dac_code(law, temps) == pytest.approx((v - s.offset_v) / (s.gain_v_per_v * s.dac.lsb_v), rel=1e-12)


def test_within_bound_allows_one_part_in_a_billion(sipm_a, board_ntc):
    # A table exactly at its bound meets it; the comparison allows a relative 1e-9 of floating-point slack and
    # no more: a bound b with b (1 + 1e-9) equal to the largest error in floating point meets it, the next
    # smaller double does not.
    law = build_law(sipm_a, board_ntc, 3.0)
    table = build_table(law, board_ntc, 0.05, "optimised")
    worst = sweep_table(table, law, board_ntc).max_gain_error_pct
    b = worst / (1 + 1e-9)
    assert b * (1 + 1e-9) == worst  # holds for this table's figure (checked here, not assumed)
    assert sweep_table(replace(table, max_gain_error_pct=b), law, board_ntc).within_bound
    below = float(np.nextafter(b, 0.0))
    assert not sweep_table(replace(table, max_gain_error_pct=below), law, board_ntc).within_bound


def test_sweep_of_a_law_whose_sensitivity_varies(sipm_b, board_pt1000):
    # hut-sipm-b's capacitance tempco (150 ppm/K) makes the constant-gain law's sensitivity (percent of gain per
    # volt) change over the range: the sweep takes it at each code's own temperature.
    law = build_law(sipm_b, board_pt1000, 4.0, kind="constant_gain")
    table = build_table(law, board_pt1000, 0.05, "uniform")
    sweep = sweep_table(table, law, board_pt1000)
    per_v = law.error_pct_per_v(sweep.temp_c)
    assert np.ptp(per_v) > 0.01 * per_v.mean()
    expected = (board_pt1000.supply.output_v(sweep.table_dac_code) - law.output_v(sweep.temp_c)) * per_v
    assert np.allclose(sweep.gain_error_pct, expected, rtol=1e-12, atol=1e-15)


def test_smallest_is_the_default_layout(sipm_b, board_pt1000, monkeypatch):
    # With the polynomial refused (it takes seconds), the default "smallest" keeps the uniform table (26 B, ties
    # and all other layouts larger: test_firmware_tables' layout bytes); a fixed layout never falls back to it.
    from compensator.firmware.tables import TableError

    def refuse(*args, **kwargs):
        raise TableError("DAC quantisation", "no polynomial table here")

    monkeypatch.setattr(T, "size_polynomial", refuse)
    law = build_law(sipm_b, board_pt1000, 4.0)
    table = build_table(law, board_pt1000, 0.05)
    assert (table.layout, table.table_bytes) == ("uniform", 26)
    with pytest.raises(TableError, match="no polynomial table here"):
        build_table(law, board_pt1000, 0.05, "polynomial")


def hand_uniform(**kw):
    """Nodes 10, 90, 170 every 8 codes from code 100 (test_firmware_tables' hand-made table)."""
    base = dict(layout="uniform", adc_bits=12, dac_bits=12, code_lo=100, code_hi=108, fault_lo=90, fault_hi=120,
                dac_min=0, dac_max=4095, safe_dac_code=7, below_dac_code=5, above_dac_code=500, shift=3,
                y=np.array([10, 90, 170], dtype=np.int64))
    base.update(kw)
    return T.LookupTable(**base)


def test_lookup_record_checks_and_clamps_by_hand():
    with pytest.raises(ModelError) as exc:
        hand_uniform(layout="zigzag")
    assert exc.value.reason == "layout must be one of uniform, segmented, optimised, polynomial, got 'zigzag'"
    # Statuses given as plain integers become TableStatus members.
    table = hand_uniform(below_status=2, above_status=1)
    assert table.below_status is T.TableStatus.HOTTER_THAN_RANGE and table.above_status is T.TableStatus.COLDER_THAN_RANGE
    # Codes of the 16-bit argument only: 0 .. 65535 (beyond a 12-bit ADC they are faults).
    for bad in (-1, 65536):
        with pytest.raises(ModelError) as exc:
            table.lookup([100, bad])
        assert exc.value.reason == "adc_code outside the range of the 16-bit argument"
    dac, status = table.lookup([0, 65535])
    assert dac.tolist() == [7, 7] and status.tolist() == [3, 3]
    assert dac.dtype == np.int64 and status.dtype == np.int64
    # In range the interpolated value 10 .. 170 is held within the clamp 20 .. 80: 10 + floor((80 d + 4) / 8).
    clamped = hand_uniform(dac_min=20, dac_max=80)
    assert clamped.lookup(np.arange(100, 109))[0].tolist() == [20, 20, 30, 40, 50, 60, 70, 80, 80]


def test_fields_a_layout_does_not_use_are_zero_or_empty():
    # LookupTable's documented values for the fields of other layouts: 0, or an empty int64 array, or ().
    from compensator.firmware import layout_sizing as S
    from compensator.firmware.layouts import Target

    exact = np.array([200 + d * d / 16 for d in range(64)])
    t = Target(codes=np.arange(100, 164, dtype=np.int64), temp_c=np.zeros(64), exact=exact, bound_lsb=np.full(64, 1.0),
               gain_pct_per_lsb=np.ones(64), ext_lo=float(exact[1] - exact[0]), ext_hi=float(exact[-1] - exact[-2]),
               dac_full=4095)
    fits = {"uniform": S.size_uniform(t, 16), "segmented": S.size_segmented(t, 16),
            "optimised": S.size_optimised(t, 16, 16), "polynomial": S.size_polynomial(t, 16)}
    uses = {"x": {"optimised"}, "slope": {"optimised"}, "segment_shift": {"segmented"}, "coeff_shift": {"polynomial"},
            "shift": {"uniform"}, "slope_frac_bits": {"optimised"}, "center_code": {"polynomial"},
            "coeff_type_bits": {"polynomial"}, "slope_type_bits": {"optimised"}}
    for layout, fit in fits.items():
        assert fit.layout == layout
        for name, users in uses.items():
            if layout in users:
                continue
            value = getattr(fit, name)
            if isinstance(value, np.ndarray):
                assert value.size == 0 and value.dtype == np.int64, (layout, name)
            else:
                assert value in (0, ()), (layout, name, value)
        if layout == "optimised":
            assert fit.node_frac_bits == 0  # breakpoint values are whole DAC codes
    # The defaults of a bare record: 16-bit nodes, a 32-bit accumulator, no slopes.
    from compensator.firmware.layouts import _fit

    bare = _fit("uniform")
    assert (bare.node_type_bits, bare.acc_type_bits, bare.slope_type_bits, bare.node_frac_bits) == (16, 32, 0, 0)
    assert bare.y.size == 0 and bare.y.dtype == np.int64 and bare.coeff_type_bits == ()
