"""The shared integer primitives against exact rational arithmetic (Python's fractions)."""

import math
from fractions import Fraction

import numpy as np
import pytest

from cbuild import PEDANTIC, build, needs_cc
from compensator.firmware import fixed_point as fp


def test_floor_shift_is_floor_division():
    p = np.arange(-300, 301)
    for k in range(0, 9):
        assert np.array_equal(fp.floor_shift(p, k), [math.floor(Fraction(int(v), 2 ** k)) for v in p])


def test_rshift_round_is_round_half_up():
    for x in range(-70, 71):
        for k in range(0, 6):
            exact = Fraction(x, 2 ** k)
            assert fp.rshift_round(x, k) == math.floor(exact + Fraction(1, 2))  # ties toward +infinity
    assert fp.rshift_round(-3, 1) == -1 and fp.rshift_round(3, 1) == 2 and fp.rshift_round(5, 0) == 5
    assert [fp.half(k) for k in range(4)] == [0, 1, 2, 4]


def test_saturate_to_signed_widths():
    assert fp.saturate(2 ** 31, 32) == 2 ** 31 - 1 and fp.saturate(-(2 ** 31) - 5, 32) == -(2 ** 31)
    assert fp.saturate(-(2 ** 31), 32) == -(2 ** 31) and fp.saturate(123) == 123
    assert fp.saturate(40000, 16) == 32767 and fp.saturate(-40000, 16) == -32768 and fp.saturate(-32768, 16) == -32768


@pytest.mark.parametrize("value, unsigned, signed", [
    (0, 8, 16), (255, 8, 16), (256, 16, 16), (32767, 16, 16), (32768, 16, 32), (65535, 16, 32), (65536, 32, 32),
    (2 ** 31 - 1, 32, 32), (2 ** 31, 32, 64), (2 ** 32 - 1, 32, 64), (2 ** 32, 64, 64)])
def test_type_widths(value, unsigned, signed):
    assert fp.uint_bits(value) == unsigned and fp.int_bits(value) == signed


def test_c_literals():
    assert fp.c_int_literal(-5, 16) == "-5" and fp.c_int_literal(7, 32) == "INT32_C(7)"
    assert fp.c_int_literal(-(2 ** 31), 32) == "INT32_MIN" and fp.c_int_literal(-(2 ** 63), 64) == "INT64_MIN"
    assert fp.c_int_literal(2 ** 40, 64) == "INT64_C(1099511627776)"
    text = fp.c_floor_shift_function("t_fs", "int32_t")
    assert "static int32_t t_fs(int32_t p, unsigned k)" in text and "-((-p + (((int32_t)1 << k) - 1)) >> k)" in text


def test_saturate_defaults_to_32_bits():
    # int32_t runs from -2^31 to 2^31 - 1 (C99 7.18.2.1).
    assert fp.saturate(2 ** 31) == 2 ** 31 - 1 and fp.saturate(2 ** 31 - 1) == 2 ** 31 - 1
    assert fp.saturate(-(2 ** 31) - 1) == -(2 ** 31)


@needs_cc
def test_c_floor_shift_compiles_and_floors(tmp_path):
    # The rendered helper, compiled with the real compiler, against floor division of exact rationals for
    # negative and positive values (C leaves >> of a negative value to the implementation; the helper must not).
    import subprocess

    text = fp.c_floor_shift_function("t_fs", "int32_t")
    main = ("#include <stdint.h>\n#include <stdio.h>\n" + text +
            "int main(void)\n{\n    for (int32_t p = -300; p <= 300; ++p) {\n"
            "        for (unsigned k = 0; k < 9; ++k) {\n            printf(\"%ld\\n\", (long)t_fs(p, k));\n"
            "        }\n    }\n    return 0;\n}\n")
    exe = build(tmp_path, {"fs.c": main}, PEDANTIC)
    got = [int(v) for v in subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout.split()]
    assert got == [math.floor(Fraction(p, 2 ** k)) for p in range(-300, 301) for k in range(9)]


@pytest.mark.parametrize("largest, bits", [(0, 32), ((1 << 31) - 1, 32), (1 << 31, 64), ((1 << 63) - 1, 64)])
def test_accumulator_type_at_the_int32_limit(largest, bits):
    # int32_t holds -2^31 + 1 .. 2^31 - 1 in magnitude (INT32_MAX, ISO C99 7.18.2.1); the accumulator is never
    # narrower than 32 bits.
    assert fp.acc_bits(largest) == bits
