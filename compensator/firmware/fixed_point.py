"""Integer primitives shared by the firmware references and their C renderers.

One definition each of the operations that the lookup tables and the
fixed-point PID both use, in Python (the bit-exact references) and as C99
text (the renderers):

* ``floor_shift(p, k)``: ``floor(p / 2^k)`` for signed ``p``; with a half
  added first it is the round-half-up shift (ties toward plus infinity);
* ``rshift_round(x, k)``: ``floor((x + 2^(k-1)) / 2^k)`` on Python integers;
* saturation to a signed width (``saturate``);
* the C integer type widths that hold a value (``uint_bits``, ``int_bits``).

Python's ``>>`` on integers and numpy's on ``int64`` are arithmetic shifts,
so they floor. In C the right shift of a negative value is
implementation-defined, so the rendered helpers never shift a negative value:
they shift the magnitude and restore the floor.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "INT32_MIN", "INT32_MAX", "floor_shift", "rshift_round", "half", "saturate", "uint_bits", "int_bits", "acc_bits",
    "c_floor_shift_function", "c_int_literal",
]

INT32_MIN = -(1 << 31)
INT32_MAX = (1 << 31) - 1


def floor_shift(p, k: int):
    """``floor(p / 2^k)`` for signed integers (numpy ``>>`` is arithmetic, so it floors).

    Parameters
    ----------
    p : array_like of int
        Signed values (int64 range).
    k : int
        Shift, bits (0 .. 63).

    Returns
    -------
    ndarray of int64
    """
    return np.asarray(p, dtype=np.int64) >> np.int64(k)


def half(k: int) -> int:
    """``2^(k-1)`` for ``k > 0`` and 0 for ``k == 0``: the rounding term of a shift by ``k``.

    Parameters
    ----------
    k : int
        Shift, bits.
    """
    return (1 << k) >> 1


def rshift_round(x: int, shift: int) -> int:
    """``floor((x + 2^(shift-1)) / 2^shift)``: a right shift rounding half up (toward +infinity).

    Parameters
    ----------
    x : int
        Signed value.
    shift : int
        Non-negative shift; 0 returns ``x``.
    """
    return (x + half(shift)) >> shift


def saturate(x: int, bits: int = 32) -> int:
    """Clamp a Python integer to the range of a signed ``bits``-wide integer.

    Parameters
    ----------
    x : int
    bits : int
        Width of the signed type.
    """
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    return lo if x < lo else hi if x > hi else x


def uint_bits(max_value: int) -> int:
    """Narrowest unsigned C type width (8, 16, 32, 64) that holds ``0 .. max_value``.

    Parameters
    ----------
    max_value : int
    """
    for bits in (8, 16, 32):
        if max_value < (1 << bits):
            return bits
    return 64


def int_bits(max_abs: int) -> int:
    """Narrowest signed C type width (16, 32, 64) that holds ``-max_abs .. max_abs``.

    Parameters
    ----------
    max_abs : int
    """
    for bits in (16, 32):
        if max_abs < (1 << (bits - 1)):
            return bits
    return 64


def acc_bits(max_abs: int) -> int:
    """Width of a signed accumulator, 32 or 64 bits, that holds ``-max_abs .. max_abs`` (never narrower than 32).

    Parameters
    ----------
    max_abs : int
    """
    return max(32, int_bits(max_abs))


def c_floor_shift_function(name: str, ctype: str) -> str:
    """C99 text of ``static ctype name(ctype p, unsigned k)`` returning ``floor(p / 2^k)``.

    Never right-shifts a negative value (whose result C leaves to the
    implementation): a negative ``p`` is floored through its magnitude.

    Parameters
    ----------
    name : str
        Function name.
    ctype : str
        Signed C type of the value, e.g. ``"int32_t"``.
    """
    return (
        f"/* floor(p / 2^k), without relying on how >> treats negative values. */\n"
        f"static {ctype} {name}({ctype} p, unsigned k)\n"
        "{\n"
        "    if (p >= 0) {\n"
        "        return p >> k;\n"
        "    }\n"
        f"    return -((-p + ((({ctype})1 << k) - 1)) >> k);\n"
        "}\n")


def c_int_literal(value: int, bits: int) -> str:
    """A signed C literal of width ``bits`` (``INT32_C(..)``, ``INT64_C(..)``; the minimum spelled safely).

    Parameters
    ----------
    value : int
    bits : int
        32 or 64 (16 is written as a plain literal).
    """
    value = int(value)
    if bits <= 16:
        return str(value)
    if value == -(1 << (bits - 1)):
        return f"INT{bits}_MIN"
    return f"INT{bits}_C({value})"
