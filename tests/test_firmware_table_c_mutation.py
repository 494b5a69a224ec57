"""The C emitter's text and the sweep file on hand-made inputs (no compiler: each test takes milliseconds).

The compiled C is compared bit for bit with the Python reference in ``test_firmware_table_c.py``; these tests pin
what that comparison cannot see: the sweep file's rows and formats, the summary's blocks, the default sweep mode,
the prototypes and the refusals, each written out by hand.
"""

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware.table_c import (
    c_current_function_signature,
    c_function_signature,
    default_sweep_mode,
    render_sweep_csv,
    render_table_c,
)
from compensator.firmware.tables import LookupTable, TableSweep


def hand_sweep(codes, temp_c, dac, gain_pct):
    """A sweep over the given codes; ideal 30 + code/1000 V, table output 30 + dac/1000 V (hand-made values)."""
    codes = np.asarray(codes, dtype=np.int64)
    dac = np.asarray(dac, dtype=np.int64)
    gain = np.asarray(gain_pct, dtype=float)
    return TableSweep(adc_code=codes, temp_c=np.asarray(temp_c, dtype=float), ideal_bias_v=30 + codes / 1000,
                      ideal_dac_code=codes.astype(float), table_dac_code=dac, table_bias_v=30 + dac / 1000,
                      gain_error_pct=gain, max_gain_error_pct=float(np.abs(gain).max()),
                      max_error_dac_lsb=0.0, worst_adc_code=int(codes[np.argmax(np.abs(gain))]), within_bound=True)


def test_full_sweep_rows_by_hand():
    sweep = hand_sweep([7, 8, 9], [-25.0, -24.98766, 45.123456], [7, 9, 8], [0.0, -0.0123456789, 0.0004])
    assert render_sweep_csv(sweep) == render_sweep_csv(sweep, mode="full") == (
        "adc_code,temp_c,ideal_bias_v,table_dac_code,table_bias_v,gain_error_pct\n"
        "7,-25.0000,30.007000,7,30.007000,0.000000\n"
        "8,-24.9877,30.008000,9,30.009000,-0.012346\n"
        "9,45.1235,30.009000,8,30.008000,0.000400\n")


def test_summary_blocks_by_hand():
    # 2050 codes: blocks of 2^1 give 1025 rows, one too many, so blocks of 4 codes: 512 full blocks and a last
    # block of the two codes 2048, 2049 (513 rows). Gain errors |e| = code / 10000 except a spike of -0.9 at offset
    # 5 (block 1, the second row) and 0.5 at offset 2049 (the last row).
    n = 2050
    codes = np.arange(100, 100 + n)
    gain = np.arange(n) / 10000.0
    gain[5], gain[2049] = -0.9, 0.5
    temps = -25.0 + np.arange(n) * 0.01
    text = render_sweep_csv(hand_sweep(codes, temps, np.arange(n) + 3, gain), mode="summary")
    lines = text.splitlines()
    assert text.endswith("\n") and len(lines) == 1 + 513
    assert lines[0] == ("adc_code_first,adc_code_last,temp_c_first,temp_c_last,table_dac_code_first,"
                        "table_dac_code_last,max_abs_gain_error_pct,worst_adc_code")
    assert lines[1] == "100,103,-25.0000,-24.9700,3,6,0.000300,103"
    assert lines[2] == "104,107,-24.9600,-24.9300,7,10,0.900000,105"
    assert lines[-2] == "2144,2147,-4.5600,-4.5300,2047,2050,0.204700,2147"
    assert lines[-1] == "2148,2149,-4.5200,-4.5100,2051,2052,0.500000,2149"


def test_summary_of_exactly_1024_codes_is_one_row_per_code():
    codes = np.arange(1024)
    text = render_sweep_csv(hand_sweep(codes, np.zeros(1024), codes, np.zeros(1024)), mode="summary")
    lines = text.splitlines()
    assert len(lines) == 1025 and lines[1] == "0,0,0.0000,0.0000,0,0,0.000000,0"
    more = render_sweep_csv(hand_sweep(np.arange(1025), np.zeros(1025), np.arange(1025), np.zeros(1025)),
                            mode="summary").splitlines()
    assert len(more) == 1 + 513 and more[1].startswith("0,1,") and more[-1].startswith("1024,1024,")


def test_sweep_mode_refusal_and_default():
    sweep = hand_sweep([1], [0.0], [1], [0.0])
    with pytest.raises(ModelError) as exc:
        render_sweep_csv(sweep, mode="none")
    assert (exc.value.key, exc.value.reason) == ("sweep", "sweep mode must be 'full' or 'summary' to render, "
                                                          "got 'none'")
    # Full up to a 16-bit ADC (65536 rows at most), a summary above.
    assert [default_sweep_mode(b) for b in (8, 12, 16, 17, 24)] == ["full", "full", "full", "summary", "summary"]


def hand_table(**kw):
    base = dict(layout="uniform", adc_bits=12, dac_bits=12, code_lo=100, code_hi=108, fault_lo=90, fault_hi=120,
                dac_min=0, dac_max=4095, safe_dac_code=7, below_dac_code=5, above_dac_code=500, shift=3,
                y=np.array([10, 90, 170], dtype=np.int64))
    base.update(kw)
    return LookupTable(**base)


def test_prototypes_by_hand():
    table = hand_table(code_type_bits=32, value_type_bits=16)
    assert c_function_signature(table, "bias") == "uint16_t bias(uint32_t adc_code)"
    assert c_function_signature(table, "bias", prefix="hut_") == "uint16_t hut_bias(uint32_t adc_code)"
    with pytest.raises(ModelError) as exc:
        c_current_function_signature(table, "bias")
    assert exc.value.reason == "the table has no measured drop correction"


def test_symbol_too_long_names_the_prefix():
    with pytest.raises(ModelError) as exc:
        render_table_c(hand_table(), [], "x" * 30, prefix="y" * 11)
    assert exc.value.key == "prefix"
    assert exc.value.reason == f"prefix and name {'y' * 11 + 'x' * 30!r} together exceed 40 characters"
    files = render_table_c(hand_table(), [], "x" * 30, prefix="y" * 10)  # exactly 40 is fine
    assert set(files) == {"y" * 10 + "x" * 30 + ".h", "y" * 10 + "x" * 30 + ".c"}


def test_hand_made_uniform_table_text():
    # Nodes 10, 90, 170 every 2^3 codes (hand_table): the data, the in-range arithmetic and the checks, written out.
    files = render_table_c(hand_table(), [], "t")
    c, h = files["t.c"], files["t.h"]
    assert "static const uint16_t t_y[3] T_ROM = {\n    10, 90, 170\n};\n" in c
    assert "        const uint32_t i = d >> 3;\n" in c and "(t_acc_t)(d & 7u);\n" in c
    assert "y = y0 + t_floor_shift(delta * r + 4, 3u);\n" in c
    assert "return (uint16_t)5u; /* value at the low-code end of the range */" in c
    assert "return (uint16_t)500u; /* value at the high-code end of the range */" in c
    assert 'T_STATIC_ASSERT(((t_acc_t)T_ENTRIES - 1) << 3 > (t_acc_t)(T_ADC_CODE_HI - T_ADC_CODE_LO), ' in c
    # Names padded to the longest, T_SAFE_STATE_NEEDS_SHUTDOWN_LINE (32 characters).
    assert "#define T_ENTRIES                        3u /* table rows (nodes) */\n" in h
    assert "#define T_TABLE_BYTES                    6u /* bytes of const table data */\n" in h
    assert "#define T_SAFE_DAC_CODE                  7u /* DAC code for a sensor fault */\n" in h
    assert "#define T_SAFE_STATE_NEEDS_SHUTDOWN_LINE 0u /* 1: no DAC code holds the SiPM below breakdown */\n" in h
    assert "#ifndef T_ROM_READ_U16\n#define T_ROM_READ_U16(address) (*(address))\n#endif\n" in h
    assert " *   codes 90..99 (colder than the range) and 109..120 (hotter) are\n" in h


def test_rounding_constants_beyond_int_get_a_64_bit_literal():
    # A rounding term 2^(k-1) of a 64-bit accumulator is a plain decimal while it fits a 32-bit int (C99: an
    # unsuffixed decimal constant takes the first of int, long, long long that holds it, and int may be 16 or
    # 32 bits wide on the targets; ISO C99 6.4.4.1); from 2^31 on it is spelled INT64_C(...).
    from compensator.firmware.table_c import _lit

    assert _lit(2 ** 30, 64) == "1073741824" and _lit(2 ** 31 - 1, 64) == "2147483647"
    assert _lit(2 ** 31, 64) == "INT64_C(2147483648)" and _lit(-(2 ** 31), 64) == "INT64_C(-2147483648)"
    assert _lit(2 ** 40, 64) == "INT64_C(1099511627776)"
    assert _lit(2 ** 31, 32) == "2147483648"  # a 32-bit accumulator never holds it: no suffix asked for


@pytest.mark.parametrize("layout, extra, line", [
    ("optimised", dict(slope_frac_bits=32, x=np.array([100]), y=np.array([10]), slope=np.array([0])),
     "+ INT64_C(2147483648), 32u);"),
    ("uniform", dict(node_frac_bits=32, node_type_bits=64),
     "        y = t_floor_shift(y + INT64_C(2147483648), 32u); /* to whole DAC codes */\n"),
    ("polynomial", dict(node_frac_bits=32, y=np.array([5]), coeff_type_bits=(32,)),
     "        y = t_floor_shift(a + INT64_C(2147483648), 32u);\n"),
    ("uniform", dict(shift=32), "        y = y0 + t_floor_shift(delta * r + INT64_C(2147483648), 32u);\n"),
], ids=["optimised", "uniform-nodes", "polynomial", "uniform-shift"])
def test_rounding_terms_of_32_fractional_bits(layout, extra, line):
    # Hand-made tables with 32 fractional bits in a 64-bit accumulator: the rounding term 2^31 of each layout's
    # last shift is written as a 64-bit literal (an int may be 32 bits wide).
    files = render_table_c(hand_table(layout=layout, acc_type_bits=64, **extra), [], "t")
    assert "typedef int64_t t_acc_t;" in files["t.c"]
    assert line in files["t.c"]


def test_current_correction_text_by_hand(sipm_a, board_ntc):
    # The measured drop correction's entry point and factor: negative on the feedback-injection board (one current
    # code lowers the DAC code: test_firmware_table_current), and a positive factor written without a sign.
    from dataclasses import replace

    from compensator.firmware.tables import build_table
    from compensator.law import build_law

    law = build_law(sipm_a, board_ntc, 3.0, kind="constant_gain", drop_correction="measured")
    table = build_table(law, board_ntc, 0.05, "uniform")
    assert c_current_function_signature(table, "bias") == (
        "uint16_t bias_with_current(uint16_t adc_code, uint16_t current_code)")
    assert table.current.factor == -346030
    h = render_table_c(table, [], "t")["t.h"]
    assert "#define T_CURRENT_FACTOR                 (-INT32_C(346030)) /* DAC codes per current code" in h
    positive = replace(table, current=replace(table.current, factor=346030))
    h = render_table_c(positive, [], "t")["t.h"]
    assert "#define T_CURRENT_FACTOR                 (INT32_C(346030)) /* DAC codes per current code" in h
