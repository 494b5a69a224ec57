"""The lookup-table record and its bit-exact integer path: raw temperature ADC code -> bias DAC code.

:class:`LookupTable` holds a built table's constants, and :meth:`LookupTable.lookup` (with
:meth:`LookupTable.lookup_with_current`) is the Python reference the generated C matches bit for bit; the steps
of the path (fault band, clamped band, interpolation by layout, output clamp) are described in
:mod:`compensator.firmware.tables`, which builds the tables and re-exports these names.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import IntEnum

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.current import CurrentCorrection
from compensator.firmware.layouts import (
    LAYOUTS,
    layout_bytes,
    optimised_value,
    polynomial_value,
    segmented_value,
    uniform_value,
)
from compensator.firmware.safe_state import SafeState

__all__ = ["TableStatus", "STATUS_OK", "STATUS_SENSOR_FAULT", "STATUS_NAMES", "DEFAULT_FAULT_MARGIN_K", "LookupTable"]


class TableStatus(IntEnum):
    """What the table did with an ADC code (the values of ``NAME_status()`` in C)."""

    OK = 0
    COLDER_THAN_RANGE = 1
    HOTTER_THAN_RANGE = 2
    SENSOR_FAULT = 3


STATUS_OK = TableStatus.OK
STATUS_SENSOR_FAULT = TableStatus.SENSOR_FAULT
STATUS_NAMES = {s: s.name.lower() for s in TableStatus}

#: Default distance beyond the operating range at which a reading counts as a sensor fault, kelvin.
DEFAULT_FAULT_MARGIN_K = 20.0



def _empty() -> np.ndarray:
    return np.zeros(0, dtype=np.int64)


@dataclass(frozen=True, eq=False, kw_only=True)
class LookupTable:
    """An integer lookup table and the constants of its firmware path.

    Attributes
    ----------
    layout : {"uniform", "segmented", "optimised", "polynomial"}
        How the law is stored (:mod:`compensator.firmware.layouts`).
    adc_bits, dac_bits : int
        Resolutions of the temperature ADC and the bias DAC.
    code_lo, code_hi : int
        ADC codes of the operating range (inclusive).
    fault_lo, fault_hi : int
        Plausible ADC codes (inclusive); anything outside is a sensor fault.
    dac_min, dac_max : int
        Output clamp, DAC codes.
    safe_dac_code : int
        DAC code for a sensor fault.
    below_dac_code, above_dac_code : int
        DAC codes for readings just below and just above the range of codes.
    below_status, above_status : TableStatus
        ``COLDER_THAN_RANGE`` or ``HOTTER_THAN_RANGE``: what a code below
        (above) the range means for this sensor and wiring.
    shift : int
        Uniform: log2 of the node spacing in ADC codes (0 otherwise).
    slope_frac_bits : int
        Optimised: fractional bits ``F`` of the stored slopes (0 otherwise).
    x : ndarray of int64
        Optimised: breakpoints (ADC codes); empty otherwise.
    y : ndarray of int64
        Node values (uniform, segmented: times ``2^node_frac_bits``; optimised:
        DAC codes) or polynomial coefficients ``C_0 .. C_m``.
    slope : ndarray of int64
        Optimised: slopes scaled by ``2^F``; empty otherwise.
    segment_shift : ndarray of int64
        Segmented: log2 of each segment's width; empty otherwise.
    center_code : int
        Polynomial: the ADC code where ``x = 0``.
    coeff_shift : ndarray of int64
        Polynomial: the Horner shifts ``Q_(j+1) - Q_j``.
    coeff_type_bits : tuple of int
        Polynomial: C width of each coefficient (16 or 32).
    code_type_bits, value_type_bits, slope_type_bits, acc_type_bits : int
        Widths of the C types (unsigned code and value, signed slope and accumulator).
    node_type_bits : int
        Width of the stored nodes (unsigned; uniform and segmented).
    node_frac_bits : int
        Fractional bits ``G`` of the stored nodes (``Q_0`` for a polynomial).
    max_gain_error_pct : float
        The bound the table was sized for, percent.
    current : CurrentCorrection or None
        The run-time drop correction from the measured current, if any.
    safe_state : SafeState or None
        What ``safe_dac_code`` does to the SiPM.
    """

    layout: str
    adc_bits: int
    dac_bits: int
    code_lo: int
    code_hi: int
    fault_lo: int
    fault_hi: int
    dac_min: int
    dac_max: int
    safe_dac_code: int
    below_dac_code: int
    above_dac_code: int
    below_status: TableStatus = TableStatus.COLDER_THAN_RANGE
    above_status: TableStatus = TableStatus.HOTTER_THAN_RANGE
    shift: int = 0
    slope_frac_bits: int = 0
    x: np.ndarray = field(default_factory=_empty, repr=False)
    y: np.ndarray = field(default_factory=_empty, repr=False)
    slope: np.ndarray = field(default_factory=_empty, repr=False)
    segment_shift: np.ndarray = field(default_factory=_empty, repr=False)
    center_code: int = 0
    coeff_shift: np.ndarray = field(default_factory=_empty, repr=False)
    coeff_type_bits: tuple = ()
    code_type_bits: int = 16
    value_type_bits: int = 16
    slope_type_bits: int = 32
    acc_type_bits: int = 32
    max_gain_error_pct: float = 0.0
    node_frac_bits: int = 0
    node_type_bits: int = 16
    current: CurrentCorrection | None = None
    safe_state: SafeState | None = None

    def __post_init__(self):
        if self.layout not in LAYOUTS:
            raise ModelError(f"layout must be one of {', '.join(LAYOUTS)}, got {self.layout!r}")
        object.__setattr__(self, "below_status", TableStatus(self.below_status))
        object.__setattr__(self, "above_status", TableStatus(self.above_status))

    @property
    def entries(self) -> int:
        """Number of table rows (nodes, breakpoints or polynomial coefficients)."""
        return int(self.y.size)

    @property
    def entry_bytes(self) -> int:
        """Bytes per row in the generated const arrays (rounded down where rows differ)."""
        if self.layout == "uniform":
            return self.node_type_bits // 8
        if self.layout == "optimised":
            return (self.code_type_bits + self.value_type_bits + self.slope_type_bits) // 8
        return self.table_bytes // max(self.entries, 1)

    @property
    def table_bytes(self) -> int:
        """Bytes of const data in the generated arrays."""
        return layout_bytes(self, self.code_type_bits)

    @property
    def coeff(self) -> np.ndarray:
        """Polynomial coefficients ``C_0 .. C_m`` (the same array as ``y``)."""
        return self.y

    def interpolate(self, adc_code):
        """Interpolated DAC code for in-range ADC codes (before the output clamp).

        Parameters
        ----------
        adc_code : array_like of int
            Codes within ``code_lo .. code_hi``.

        Returns
        -------
        ndarray of int64
        """
        return _interpolate(self, self.code_lo, adc_code)

    def lookup(self, adc_code):
        """The firmware path for any ADC codes: DAC code and status (bit-exact reference).

        Parameters
        ----------
        adc_code : array_like of int
            Raw temperature ADC codes, ``0 .. 2^code_type_bits - 1`` (codes
            beyond the ADC's own range are faults, as in the C function).

        Returns
        -------
        dac_code : ndarray of int64
        status : ndarray of int64
            :class:`TableStatus` values.
        """
        n = np.asarray(adc_code, dtype=np.int64)
        if np.any((n < 0) | (n >= (1 << self.code_type_bits))):
            raise ModelError(f"adc_code outside the range of the {self.code_type_bits}-bit argument")
        inside = (n >= self.code_lo) & (n <= self.code_hi)
        y = np.zeros(n.shape, dtype=np.int64)
        if np.any(inside):
            y[inside] = np.clip(self.interpolate(n[inside]), self.dac_min, self.dac_max)
        status = np.full(n.shape, int(TableStatus.OK), dtype=np.int64)
        below, above = n < self.code_lo, n > self.code_hi
        fault = (n < self.fault_lo) | (n > self.fault_hi)
        y[below], status[below] = self.below_dac_code, int(self.below_status)
        y[above], status[above] = self.above_dac_code, int(self.above_status)
        y[fault], status[fault] = self.safe_dac_code, int(TableStatus.SENSOR_FAULT)
        return y, status

    def lookup_with_current(self, adc_code, current_code):
        """The firmware path with the measured drop correction (bit-exact reference).

        Parameters
        ----------
        adc_code : array_like of int
            Raw temperature ADC codes (as in :meth:`lookup`).
        current_code : array_like of int
            Raw SiPM current ADC codes, ``0 .. 2^current_type_bits - 1``;
            broadcast against ``adc_code``.

        Returns
        -------
        dac_code : ndarray of int64
            The table's value plus the correction, clamped to ``[dac_min,
            dac_max]``; ``safe_dac_code`` (uncorrected) for a sensor fault.
        status : ndarray of int64
            The temperature status, as in :meth:`lookup`.

        Raises
        ------
        ModelError
            The table has no current correction, or a code is out of its argument's range.
        """
        if self.current is None:
            raise ModelError("this table has no measured drop correction (build it from a law with "
                             "drop_correction='measured')")
        n, c = np.broadcast_arrays(np.asarray(adc_code, dtype=np.int64), np.asarray(current_code, dtype=np.int64))
        if np.any((c < 0) | (c >= (1 << self.current.current_type_bits))):
            raise ModelError(f"current_code outside the range of the {self.current.current_type_bits}-bit argument")
        y, status = self.lookup(n)
        out = np.clip(y + self.current.delta(c), self.dac_min, self.dac_max)
        return np.where(status == TableStatus.SENSOR_FAULT, self.safe_dac_code, out), status


def _interpolate(f, code_lo: int, adc_code):
    """The in-range value of a layout (``f``: a :class:`LookupTable` or a :class:`LayoutFit`)."""
    n = np.asarray(adc_code, dtype=np.int64)
    if f.layout == "uniform":
        d = n - code_lo
        return uniform_value(f.y, d >> f.shift, d & ((1 << f.shift) - 1), f.shift, f.node_frac_bits)
    if f.layout == "segmented":
        return segmented_value(f.y, f.segment_shift, n - code_lo, f.node_frac_bits)
    if f.layout == "optimised":
        return optimised_value(f.x, f.y, f.slope, n, f.slope_frac_bits)
    return polynomial_value(f.y, f.coeff_shift, n - f.center_code, f.node_frac_bits)
