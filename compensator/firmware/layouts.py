"""Table layouts: how each stores the law and how each is sized against the bound.

Every layout maps an in-range ADC code ``n`` to a DAC code with integer
arithmetic only (no division at run time); :mod:`compensator.firmware.tables`
adds the faults, the clamps and the run-time current correction around it.
``floor_shift`` is :func:`compensator.firmware.fixed_point.floor_shift`
(``floor(p / 2^k)``, round half up when a half is added first).

``uniform`` (values only, one spacing)
    Nodes every ``2^shift`` codes from ``code_lo`` with ``G`` fractional bits;
    ``d = n - code_lo``, ``i = d >> shift``, ``r = d & (2^shift - 1)``,
    ``v = Y[i] + floor_shift((Y[i+1] - Y[i]) r + 2^(shift-1), shift)``,
    ``y = floor_shift(v + 2^(G-1), G)``.
``segmented`` (values only, power-of-two segment widths)
    Segment ``i`` is ``2^k_i`` codes wide; it starts where the previous one
    ends (the first at ``code_lo``), so no breakpoint and no slope is stored:
    only the node values ``Y`` and one byte ``k_i`` per segment. The segment
    holding ``d`` is found by subtracting widths from ``d``; then as uniform
    with ``shift = k_i``.
``optimised`` (breakpoints, values and slopes)
    Breakpoints ``X`` (binary search for the largest ``X[i] <= n``), values
    ``Y`` and slopes ``S`` scaled by ``2^F``:
    ``y = Y[i] + floor_shift(S[i] (n - X[i]) + 2^(F-1), F)``.
``polynomial`` (coefficients only, Horner's rule in integers)
    ``x = n - center`` (signed); coefficient ``C_j`` holds the polynomial's
    ``j``-th coefficient (DAC codes per code^j) times ``2^Q_j`` with
    ``Q_0 <= Q_1 <= ...``; ``acc = C_m``, then for ``j = m-1 .. 0``:
    ``acc = C_j + floor_shift(acc x, Q_(j+1) - Q_j)``; finally
    ``y = floor_shift(acc + 2^(Q_0 - 1), Q_0)``. Products are formed in 64
    bits and every intermediate is proven below 2^62 in magnitude when the
    table is built.

Sizing (each layout built for the bound, and checked with this integer
arithmetic at every ADC code of the range) is in
:mod:`compensator.firmware.layout_sizing`; this module re-exports its names
lazily, so either module can be imported first.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from compensator._lazy import lazy_exports
from compensator.errors import ModelError
from compensator.firmware.fixed_point import floor_shift, half

__all__ = [
    "LAYOUTS", "LAYOUT_CHOICES", "UNIFORM_NODE_FRAC_BITS", "MAX_POLYNOMIAL_DEGREE", "TableError",
    "uniform_value", "segmented_value", "optimised_value", "polynomial_value",
]

#: Layouts a table can have.
LAYOUTS = ("uniform", "segmented", "optimised", "polynomial")

#: What ``build_table`` accepts: a layout, or ``"smallest"`` (build each, keep the smallest that meets the bound).
LAYOUT_CHOICES = ("smallest",) + LAYOUTS

#: Fractional node bits tried for uniform and segmented tables: plain DAC codes, or 32-bit nodes with 8 extra bits.
UNIFORM_NODE_FRAC_BITS = (0, 8)

#: Highest polynomial degree tried.
MAX_POLYNOMIAL_DEGREE = 9


class TableError(ModelError):
    """The gain-error bound cannot be met; ``term`` names the budget term that prevents it."""

    def __init__(self, term: str, message: str):
        self.term = term
        super().__init__(f"{term}: {message}")


@dataclass(frozen=True, eq=False)
class Target:
    """The function to tabulate over the operating range, plus the bound per code.

    Attributes
    ----------
    codes : ndarray of int64
        Every ADC code of the operating range, ascending.
    temp_c : ndarray
        Temperature read at the centre of each code, degree Celsius.
    exact : ndarray
        Fractional DAC code of the law at each code.
    bound_lsb : ndarray
        Allowed absolute error at each code, DAC LSB.
    gain_pct_per_lsb : ndarray
        Gain error of one DAC LSB at each code, percent.
    ext_lo, ext_hi : float
        Slopes for linear extrapolation below and above the range (DAC codes per ADC code).
    dac_full : int
        Largest DAC code.
    """

    codes: np.ndarray
    temp_c: np.ndarray
    exact: np.ndarray
    bound_lsb: np.ndarray
    gain_pct_per_lsb: np.ndarray
    ext_lo: float
    ext_hi: float
    dac_full: int

    def at(self, code):
        """Exact DAC code at integer codes, extrapolated linearly beyond the range."""
        c = np.asarray(code, dtype=np.int64)
        lo, hi = int(self.codes[0]), int(self.codes[-1])
        inner = np.clip(c, lo, hi)
        out = self.exact[inner - lo]
        out = np.where(c > hi, self.exact[-1] + (c - hi) * self.ext_hi, out)
        return np.where(c < lo, self.exact[0] + (c - lo) * self.ext_lo, out)

    @property
    def span(self) -> int:
        """``code_hi - code_lo``."""
        return int(self.codes[-1] - self.codes[0])


class LayoutFit(NamedTuple):
    """What a sizing routine found: the layout's stored data and C type widths."""

    layout: str
    y: np.ndarray
    x: np.ndarray
    slope: np.ndarray
    segment_shift: np.ndarray
    shift: int
    node_frac_bits: int
    slope_frac_bits: int
    node_type_bits: int
    slope_type_bits: int
    acc_type_bits: int
    center_code: int
    coeff_shift: np.ndarray
    coeff_type_bits: tuple


_EMPTY = np.zeros(0, dtype=np.int64)


def _fit(layout: str, **kw) -> LayoutFit:
    base = dict(y=_EMPTY, x=_EMPTY, slope=_EMPTY, segment_shift=_EMPTY, shift=0, node_frac_bits=0,
                slope_frac_bits=0, node_type_bits=16, slope_type_bits=0, acc_type_bits=32, center_code=0,
                coeff_shift=_EMPTY, coeff_type_bits=())
    base.update(kw)
    return LayoutFit(layout=layout, **base)


# ---------------------------------------------------------------------------
# The integer evaluations (the bit-exact reference of each layout)
# ---------------------------------------------------------------------------


def uniform_value(y, i, r, shift: int, node_frac_bits: int):
    """The uniform interpolation: nodes ``y`` (with ``node_frac_bits``), index ``i``, remainder ``r``.

    Parameters
    ----------
    y : ndarray of int64
        Node values times ``2^node_frac_bits``.
    i, r : array_like of int
        Node index and remainder within the spacing.
    shift : int
        log2 of the spacing.
    node_frac_bits : int
        ``G``.

    Returns
    -------
    ndarray of int64
        DAC codes.
    """
    v = y[i] + floor_shift((y[i + 1] - y[i]) * r + half(shift), shift)
    return floor_shift(v + half(node_frac_bits), node_frac_bits)


def segmented_value(y, segment_shift, d, node_frac_bits: int):
    """The segmented interpolation at offsets ``d = n - code_lo``.

    Parameters
    ----------
    y : ndarray of int64
        Node values times ``2^node_frac_bits`` (one more than segments).
    segment_shift : ndarray of int64
        log2 of each segment's width.
    d : array_like of int
        Offsets from the first code of the range.
    node_frac_bits : int
        ``G``.

    Returns
    -------
    ndarray of int64
    """
    d = np.asarray(d, dtype=np.int64)
    widths = np.left_shift(np.int64(1), segment_shift.astype(np.int64))
    starts = np.concatenate(([0], np.cumsum(widths)[:-1]))
    i = np.searchsorted(starts, d, side="right") - 1
    k = segment_shift[i]
    r = d - starts[i]
    v = y[i] + (((y[i + 1] - y[i]) * r + ((np.int64(1) << k) >> 1)) >> k)
    return floor_shift(v + half(node_frac_bits), node_frac_bits)


def optimised_value(x, y, slope, n, slope_frac_bits: int):
    """The breakpoint interpolation at in-range codes ``n``.

    Parameters
    ----------
    x, y, slope : ndarray of int64
        Breakpoints, values, slopes times ``2^slope_frac_bits``.
    n : array_like of int
        ADC codes, at least ``x[0]``.
    slope_frac_bits : int
        ``F``.

    Returns
    -------
    ndarray of int64
    """
    n = np.asarray(n, dtype=np.int64)
    i = np.searchsorted(x, n, side="right") - 1
    return y[i] + floor_shift(slope[i] * (n - x[i]) + half(slope_frac_bits), slope_frac_bits)


def polynomial_value(coeff, coeff_shift, x, node_frac_bits: int):
    """Horner's rule in integers at signed offsets ``x = n - center_code``.

    Parameters
    ----------
    coeff : ndarray of int64
        ``C_0 .. C_m``.
    coeff_shift : ndarray of int64
        ``Q_(j+1) - Q_j`` for ``j = 0 .. m-1``.
    x : array_like of int
        Offsets from the centre code.
    node_frac_bits : int
        ``Q_0``.

    Returns
    -------
    ndarray of int64
    """
    x = np.asarray(x, dtype=np.int64)
    acc = np.full(x.shape, coeff[-1], dtype=np.int64)
    for j in range(coeff.size - 2, -1, -1):
        acc = coeff[j] + floor_shift(acc * x, int(coeff_shift[j]))
    return floor_shift(acc + half(node_frac_bits), node_frac_bits)


def layout_bytes(fit: LayoutFit, code_bits: int) -> int:
    """Bytes of const data a layout stores.

    Parameters
    ----------
    fit : LayoutFit
    code_bits : int
        Width of an ADC code in C (breakpoints).
    """
    if fit.layout == "uniform":
        return fit.y.size * fit.node_type_bits // 8
    if fit.layout == "segmented":
        return fit.y.size * fit.node_type_bits // 8 + fit.segment_shift.size
    if fit.layout == "optimised":
        return fit.x.size * (code_bits + fit.node_type_bits + fit.slope_type_bits) // 8
    if fit.layout == "polynomial":
        return sum(fit.coeff_type_bits) // 8
    raise ModelError(f"unknown layout {fit.layout!r}")


#: The sizing names (:mod:`compensator.firmware.layout_sizing`, which imports this module), loaded on first use.
_SIZING = ("uniform_candidate", "size_uniform", "size_segmented", "size_optimised", "size_polynomial", "_meets",
           "_scaled_nodes", "_node_bits", "_place_segmented", "_segment_ok", "_place_optimised", "_minimax",
           "_horner_bound", "_polynomial_try", "_FIT_POINTS", "_FIT_MARGIN_LSB", "_HORNER_LIMIT")

__getattr__ = lazy_exports(globals(), dict.fromkeys(_SIZING, "compensator.firmware.layout_sizing"))
