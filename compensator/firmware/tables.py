"""Integer lookup tables: raw temperature ADC code -> bias DAC code.

This module holds the *one* definition of the firmware's integer path; the C
generator (:mod:`compensator.firmware.table_c`) renders exactly these
operations, and :meth:`LookupTable.lookup` is the bit-exact Python reference.

The integer path, for an ADC code ``n``:

1. ``n < fault_lo`` or ``n > fault_hi``: the sensor is open, shorted or
   reads a temperature more than ``fault_margin_k`` outside the operating
   range. Return the board's ``safe_dac_code``, status ``STATUS_SENSOR_FAULT``.
   Rail codes (0 and full scale) are always faults.
2. ``n < code_lo`` or ``n > code_hi`` (a plausible reading just outside the
   operating range): return the table's own value at the nearer end of the
   range (never an extrapolated bias), status ``STATUS_BELOW_RANGE`` or
   ``STATUS_ABOVE_RANGE`` (in ADC-code terms; with an NTC on the low side a
   code above the range is a temperature *below* it).
3. Otherwise interpolate (status ``STATUS_OK``):

   * ``uniform``: nodes every ``2^shift`` codes from ``code_lo``, stored
     with ``G`` fractional bits (``G`` = 0: plain DAC codes);
     ``d = n - code_lo``, ``i = d >> shift``, ``r = d & (2^shift - 1)``,
     ``v = Y[i] + floor(((Y[i+1] - Y[i]) r + 2^(shift-1)) / 2^shift)``,
     ``y = floor((v + 2^(G-1)) / 2^G)`` (no half-terms when the shift is 0).
   * ``optimised``: breakpoints ``X[0] = code_lo < X[1] < ...``; a binary
     search finds the largest ``i`` with ``X[i] <= n``; ``d = n - X[i]``,
     ``y = Y[i] + floor((S[i] d + 2^(F-1)) / 2^F)`` with the stored slope
     ``S[i]`` in DAC codes per ADC code scaled by ``2^F``.

   The ``floor`` of a signed value divided by ``2^k`` is computed without
   relying on the sign behaviour of ``>>`` in C:
   ``p >= 0 ? p >> k : -((-p + 2^k - 1) >> k)``; Python's ``>>`` floors.
   So rounding is "half up" (towards plus infinity) in both.
4. Clamp ``y`` to ``[dac_min, dac_max]``: the DAC codes whose output lies
   within the supply's limits and the board's ``max_bias_v``.

With the *measured* series-resistor drop correction the table holds the law
for zero current and a second entry point also takes the raw code ``c`` of
the SiPM current ADC (:meth:`LookupTable.lookup_with_current`):

5. A sensor fault (step 1) returns ``safe_dac_code``, uncorrected.
6. ``c`` is limited to ``current_code_max`` (the smallest of the ADC's full
   scale, the code of the SiPM's ``max_current_a`` and the code whose drop
   would take the SiPM past ``max_overvoltage_v`` if the current were not
   really flowing), then
   ``delta = floor((K c + 2^(Q-1)) / 2^Q)``: ``K`` is the exact
   correction ``R (Vref_I / 2^bits_I) / sense_gain / (volts per DAC code)``
   in DAC codes per current code, scaled by ``2^Q`` and rounded, signed (it is
   negative for the feedback-injection supply, whose output falls as the code
   rises). ``Q`` is chosen so the rounding of ``K`` moves ``delta`` by at most
   1/64 LSB over the whole current range; no division at run time.
7. The result of steps 2-4 plus ``delta``, clamped again to ``[dac_min, dac_max]``.

Node values are the law's exact DAC codes rounded to nearest; uniform sizing
tries every power-of-two spacing and keeps the widest that meets the bound,
verified at every code; optimised placement is greedy: each segment is made
as long as it can be while every code in it still meets the bound (checked
with the integer arithmetic above), which equalises the error across
segments. The error is measured at the centre of each ADC code against the
law evaluated there; a change of ``dV`` in the supply output is taken as a
gain error ``dV / Vov(T)``, which slightly overstates the error at the SiPM
(the series resistor returns a fraction ``R dI/dV`` of it).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from compensator.errors import ModelError
from compensator.law.laws import CompensationLaw, check_law_in_range
from compensator.physics.sipm import breakdown_v

LAYOUTS = ("uniform", "optimised")

STATUS_OK = 0
STATUS_BELOW_RANGE = 1
STATUS_ABOVE_RANGE = 2
STATUS_SENSOR_FAULT = 3
STATUS_NAMES = {STATUS_OK: "ok", STATUS_BELOW_RANGE: "below_range", STATUS_ABOVE_RANGE: "above_range",
                STATUS_SENSOR_FAULT: "sensor_fault"}

#: Default distance beyond the operating range at which a reading counts as a sensor fault, kelvin.
DEFAULT_FAULT_MARGIN_K = 20.0


#: The rounding of the correction factor may move the correction by at most 1/2^CURRENT_FACTOR_SLACK_BITS DAC LSB.
CURRENT_FACTOR_SLACK_BITS = 6


@dataclass(frozen=True)
class CurrentCorrection:
    """The run-time series-resistor drop correction from the measured SiPM current.

    Attributes
    ----------
    current_bits : int
        Resolution of the current ADC, bits.
    current_type_bits : int
        Width of the unsigned C argument that carries the current code.
    current_code_max : int
        Larger current codes are limited to this.
    factor : int
        ``K``: DAC codes per current code, times ``2^shift`` (signed).
    shift : int
        ``Q``, bits.
    acc_type_bits : int
        Width of the signed accumulator of ``K c``.
    dac_codes_per_current_code : float
        The exact (unrounded) factor, DAC codes per current code.
    lsb_a : float
        SiPM current per current code, ampere.
    series_resistor_ohm : float
    limit_reason : str
        What sets ``current_code_max``.
    """

    current_bits: int
    current_type_bits: int
    current_code_max: int
    factor: int
    shift: int
    acc_type_bits: int
    dac_codes_per_current_code: float
    lsb_a: float
    series_resistor_ohm: float
    limit_reason: str = ""

    @property
    def max_correction_v(self) -> float:
        """Largest drop the correction adds, volt."""
        return self.series_resistor_ohm * self.current_code_max * self.lsb_a

    def delta(self, current_code):
        """Correction in DAC codes for raw current codes (the integer path, bit-exact reference).

        Parameters
        ----------
        current_code : array_like of int
            Raw current ADC codes, ``0 .. 2^current_type_bits - 1``.

        Returns
        -------
        ndarray of int64
            Signed DAC codes to add to the table's value.
        """
        c = np.minimum(np.asarray(current_code, dtype=np.int64), self.current_code_max)
        return floor_shift(self.factor * c + ((1 << self.shift) >> 1), self.shift)


def build_current_correction(law: CompensationLaw, fault_margin_k: float = 0.0) -> CurrentCorrection:
    """The integer drop correction of a law with ``drop_correction="measured"``.

    Parameters
    ----------
    law : CompensationLaw
        Must carry a ``current_sense`` channel.
    fault_margin_k : float
        The table's fault margin, kelvin: readings just below the range keep
        the end value while the die may be this much colder, which uses up
        overvoltage headroom.

    Returns
    -------
    CurrentCorrection

    Raises
    ------
    ModelError
        The law has no current channel, or no headroom is left for any correction.
    """
    sense = law.current_sense
    if sense is None:
        raise ModelError("the measured drop correction needs the board's current_sense channel")
    supply = law.supply
    r_ohm = float(supply.series_resistor_ohm)
    exact = r_ohm * sense.lsb_a / supply.volts_per_code
    limits = [(sense.full_scale_code, "current ADC full scale"),
              (int(sense.adc_code(law.sipm.max_current_a)), "sipm max_current_a")]
    if r_ohm > 0:
        temps = np.linspace(law.min_temp_c, law.max_temp_c, 141)
        ov0 = float(np.max(law.output_v(temps) - breakdown_v(law.sipm, temps)))
        t_lo = law.min_temp_c
        ov_margin = float(law.output_v(t_lo) - breakdown_v(law.sipm, t_lo - fault_margin_k))
        headroom_v = law.sipm.max_overvoltage_v - max(ov0, ov_margin)
        if headroom_v <= 0:
            raise ModelError(f"the law already reaches max_overvoltage_v {law.sipm.max_overvoltage_v:g} V: no "
                             "headroom is left for the measured drop correction; lower the overvoltage")
        limits.append((int(np.floor(headroom_v / (r_ohm * sense.lsb_a))), "sipm max_overvoltage_v headroom"))
    code_max, reason = min(limits, key=lambda p: p[0])
    code_max = max(int(code_max), 0)
    shift = max(0, int(np.ceil(np.log2(max(code_max, 1) * (1 << (CURRENT_FACTOR_SLACK_BITS - 1))))))
    factor = int(np.rint(exact * (1 << shift)))
    acc_max = abs(factor) * code_max + (1 << shift)
    current_type_bits = max(16, _uint_bits(sense.full_scale_code))
    return CurrentCorrection(sense.adc_bits, current_type_bits, code_max, factor, shift,
                             32 if _int_bits(acc_max) <= 32 else 64, float(exact), float(sense.lsb_a), r_ohm,
                             reason)


class TableError(ModelError):
    """The gain-error bound cannot be met; ``term`` names the budget term that prevents it."""

    def __init__(self, term: str, message: str):
        self.term = term
        super().__init__(f"{term}: {message}")


def _uint_bits(max_value: int) -> int:
    for bits in (8, 16, 32):
        if max_value < (1 << bits):
            return bits
    return 64


def _int_bits(max_abs: int) -> int:
    for bits in (16, 32):
        if max_abs < (1 << (bits - 1)):
            return bits
    return 64


def floor_shift(p, k: int):
    """``floor(p / 2^k)`` for signed integers (numpy ``>>`` is arithmetic, so it floors).

    Parameters
    ----------
    p : array_like of int
    k : int
        Shift, bits.

    Returns
    -------
    ndarray of int64
    """
    return np.asarray(p, dtype=np.int64) >> np.int64(k)


@dataclass(frozen=True, eq=False)
class LookupTable:
    """An integer lookup table and the constants of its firmware path.

    Attributes
    ----------
    layout : {"uniform", "optimised"}
    adc_bits, dac_bits : int
    code_lo, code_hi : int
        ADC codes of the operating range (inclusive).
    fault_lo, fault_hi : int
        Plausible ADC codes (inclusive); anything outside is a sensor fault.
    dac_min, dac_max : int
        Output clamp, DAC codes.
    safe_dac_code, below_dac_code, above_dac_code : int
        DAC codes for faults and for readings just outside the range.
    shift : int
        Uniform: log2 of the node spacing in ADC codes (0 for optimised).
    node_frac_bits : int
        Uniform: fractional bits ``G`` of the stored nodes (0 for optimised).
    slope_frac_bits : int
        Optimised: fractional bits ``F`` of the stored slopes (0 for uniform).
    x : ndarray of int64
        Optimised: breakpoints (ADC codes); uniform: empty.
    y : ndarray of int64
        Node values, DAC codes.
    slope : ndarray of int64
        Optimised: slopes scaled by ``2^F``; uniform: empty.
    code_type_bits, value_type_bits, slope_type_bits, acc_type_bits : int
        Widths of the C types (unsigned code and value, signed slope and accumulator).
    node_type_bits : int
        Width of the stored uniform nodes (unsigned).
    max_gain_error_pct : float
        The bound the table was sized for, percent.
    current : CurrentCorrection or None
        The run-time drop correction from the measured current, if any.
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
    shift: int
    slope_frac_bits: int
    x: np.ndarray = field(repr=False)
    y: np.ndarray = field(repr=False)
    slope: np.ndarray = field(repr=False)
    code_type_bits: int = 16
    value_type_bits: int = 16
    slope_type_bits: int = 32
    acc_type_bits: int = 32
    max_gain_error_pct: float = 0.0
    node_frac_bits: int = 0
    node_type_bits: int = 16
    current: CurrentCorrection | None = None

    @property
    def entries(self) -> int:
        """Number of table rows (nodes for uniform, breakpoints for optimised)."""
        return int(self.y.size)

    @property
    def entry_bytes(self) -> int:
        """Bytes per row in the generated const arrays."""
        if self.layout == "uniform":
            return self.node_type_bits // 8
        return (self.code_type_bits + self.value_type_bits + self.slope_type_bits) // 8

    @property
    def table_bytes(self) -> int:
        """Bytes of const data in the generated arrays."""
        return self.entries * self.entry_bytes

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
        n = np.asarray(adc_code, dtype=np.int64)
        if self.layout == "uniform":
            d = n - self.code_lo
            i = d >> self.shift
            r = d & ((1 << self.shift) - 1)
            return _uniform_value(self.y, i, r, self.shift, self.node_frac_bits)
        i = np.searchsorted(self.x, n, side="right") - 1
        d = n - self.x[i]
        half = (1 << self.slope_frac_bits) >> 1
        return self.y[i] + floor_shift(self.slope[i] * d + half, self.slope_frac_bits)

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
            ``STATUS_OK``, ``STATUS_BELOW_RANGE``, ``STATUS_ABOVE_RANGE`` or ``STATUS_SENSOR_FAULT``.
        """
        n = np.asarray(adc_code, dtype=np.int64)
        if np.any((n < 0) | (n >= (1 << self.code_type_bits))):
            raise ModelError(f"adc_code outside the range of the {self.code_type_bits}-bit argument")
        inside = (n >= self.code_lo) & (n <= self.code_hi)
        y = np.zeros(n.shape, dtype=np.int64)
        if np.any(inside):
            y[inside] = np.clip(self.interpolate(n[inside]), self.dac_min, self.dac_max)
        status = np.full(n.shape, STATUS_OK, dtype=np.int64)
        below, above = n < self.code_lo, n > self.code_hi
        fault = (n < self.fault_lo) | (n > self.fault_hi)
        y[below], status[below] = self.below_dac_code, STATUS_BELOW_RANGE
        y[above], status[above] = self.above_dac_code, STATUS_ABOVE_RANGE
        y[fault], status[fault] = self.safe_dac_code, STATUS_SENSOR_FAULT
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
        return np.where(status == STATUS_SENSOR_FAULT, self.safe_dac_code, out), status


@dataclass(frozen=True, eq=False)
class TableSweep:
    """A table checked at every ADC code of the operating range.

    Attributes
    ----------
    adc_code : ndarray of int64
    temp_c : ndarray
        Temperature read at the centre of each code, degree Celsius.
    ideal_bias_v : ndarray
        The law's supply output there, volt.
    ideal_dac_code : ndarray
        Exact (fractional) DAC code for it.
    table_dac_code : ndarray of int64
    table_bias_v : ndarray
        Supply output at the table's DAC code, volt.
    gain_error_pct : ndarray
        ``100 (table_bias_v - ideal_bias_v) / Vov(T)``.
    max_gain_error_pct : float
        Largest absolute gain error, percent.
    max_error_dac_lsb : float
        Largest absolute difference from the exact DAC code, LSB.
    worst_adc_code : int
    within_bound : bool
        Whether every code meets the table's bound.
    """

    adc_code: np.ndarray
    temp_c: np.ndarray
    ideal_bias_v: np.ndarray
    ideal_dac_code: np.ndarray
    table_dac_code: np.ndarray
    table_bias_v: np.ndarray
    gain_error_pct: np.ndarray
    max_gain_error_pct: float
    max_error_dac_lsb: float
    worst_adc_code: int
    within_bound: bool


@dataclass(frozen=True, eq=False)
class _Target:
    """The function to tabulate over the operating range, plus the bound per code."""

    codes: np.ndarray
    temp_c: np.ndarray
    exact: np.ndarray          # fractional DAC code at each in-range code
    bound_lsb: np.ndarray      # allowed |error| in DAC LSB at each code
    ext_lo: float              # slope for extrapolation below code_lo (DAC codes per ADC code)
    ext_hi: float              # and above code_hi
    dac_full: int

    def at(self, code):
        """Exact DAC code at integer codes, extrapolated linearly beyond the range."""
        c = np.asarray(code, dtype=np.int64)
        lo, hi = int(self.codes[0]), int(self.codes[-1])
        inner = np.clip(c, lo, hi)
        out = self.exact[inner - lo]
        out = np.where(c > hi, self.exact[-1] + (c - hi) * self.ext_hi, out)
        return np.where(c < lo, self.exact[0] + (c - lo) * self.ext_lo, out)


def ideal_dac_code(law: CompensationLaw, temp_c):
    """Exact (fractional) DAC code that gives the law's output at ``temp_c``.

    Parameters
    ----------
    law : CompensationLaw
    temp_c : array_like
        Degree Celsius.

    Returns
    -------
    ndarray
        Fractional DAC code (unclipped).
    """
    s = law.supply
    return (law.output_v(temp_c) - s.intercept_v) / s.volts_per_code


def _gain_pct_per_lsb(law: CompensationLaw, temp_c):
    return 100.0 * law.supply.lsb_v / law.target_overvoltage_v(temp_c)


def _target(law, board, max_gain_error_pct) -> _Target:
    channel = board.temperature
    code_lo, code_hi = channel.code_range(law.min_temp_c, law.max_temp_c)
    codes = np.arange(code_lo, code_hi + 1, dtype=np.int64)
    temps = channel.temp_at(codes + 0.5)
    if not np.all(np.isfinite(temps)):
        raise ModelError(f"{board.name}: some ADC codes of the operating range do not map to a temperature")
    exact = ideal_dac_code(law, temps)
    bound = max_gain_error_pct / _gain_pct_per_lsb(law, temps)
    ext = []
    for end in (code_lo, code_hi):
        t2 = channel.temp_at(np.array([end - 0.5, end + 1.5]))
        e2 = (law.unclamped_output_v(t2) - law.supply.intercept_v) / law.supply.volts_per_code
        ext.append(float((e2[1] - e2[0]) / 2.0))
    return _Target(codes, temps, exact, bound, ext[0], ext[1], law.supply.dac.full_scale_code)


def _check_feasible(law, board, target: _Target, max_gain_error_pct: float) -> None:
    if not np.isfinite(max_gain_error_pct) or max_gain_error_pct <= 0:
        raise ModelError(f"max_gain_error_pct must be a positive number, got {max_gain_error_pct!r}")
    try:
        check_law_in_range(law)
    except ModelError as exc:
        names = [n for n in law.limiting(target.temp_c) if n]
        raise TableError(f"output limit ({names[0] if names else 'supply'})", str(exc)) from None
    per_lsb = _gain_pct_per_lsb(law, target.temp_c)
    dac_pct = 0.5 * float(per_lsb.max())
    if dac_pct > max_gain_error_pct:
        raise TableError("DAC quantisation", (
            f"half an LSB of {board.name}'s DAC ({0.5e3 * law.supply.lsb_v:.4g} mV at the output) is already "
            f"{dac_pct:.4g} % gain at {float(law.target_overvoltage_v(target.temp_c).min()):g} V overvoltage, above "
            f"the bound {max_gain_error_pct:g} %; use a finer DAC, a higher overvoltage or a looser bound"))
    adc = adc_quantisation_gain_pct(law, board.temperature, target.temp_c)
    if float(adc.max()) > max_gain_error_pct:
        worst = float(target.temp_c[np.argmax(adc)])
        raise TableError("ADC quantisation", (
            f"half an ADC code of {board.name}'s temperature channel is {float(adc.max()):.4g} % gain at "
            f"{worst:.1f} C, above the bound {max_gain_error_pct:g} %; use a finer ADC or a looser bound"))


def adc_quantisation_gain_pct(law: CompensationLaw, channel, temp_c):
    """Gain error of half an ADC code of temperature, percent.

    Parameters
    ----------
    law : CompensationLaw
    channel : TemperatureChannel
    temp_c : array_like
        Degree Celsius.

    Returns
    -------
    ndarray
        ``100 |dV/dT| (K per code) / 2 / Vov(T)``, percent.
    """
    t = np.asarray(temp_c, dtype=float)
    return 100.0 * np.abs(law.slope_v_per_k(t)) * 0.5 * channel.temp_per_code_k(t) / law.target_overvoltage_v(t)


def _fault_band(law, board, fault_margin_k: float) -> tuple[int, int]:
    channel = board.temperature
    full = channel.front_end.full_scale_code
    if not np.isfinite(fault_margin_k) or fault_margin_k < 0:
        raise ModelError(f"fault_margin_k must be a non-negative number, got {fault_margin_k!r}")
    temps = np.array([law.min_temp_c - fault_margin_k, law.max_temp_c + fault_margin_k])
    with np.errstate(all="ignore"):
        try:
            x = channel.continuous_code(temps)
        except ModelError as exc:
            raise ModelError(f"fault_margin_k: {fault_margin_k:g} K takes the range outside the sensor model: {exc}") from None
    x = np.where(np.isfinite(x), x, np.where(np.arange(2) == 0, 1.0, float(full)))
    lo, hi = int(np.floor(x.min())), int(np.floor(x.max()))
    # Rails are always faults.
    return max(lo, 1), min(hi, full - 1)


def _check_margin_overvoltage(law, fault_margin_k: float) -> None:
    """Readings in the clamped band keep the end value; the die may be up to the margin colder."""
    t_lo = law.min_temp_c
    extra_v = float(breakdown_v(law.sipm, t_lo) - breakdown_v(law.sipm, t_lo - fault_margin_k))
    ov = float(law.output_v(t_lo) - breakdown_v(law.sipm, t_lo)) + extra_v
    if ov > law.sipm.max_overvoltage_v:
        raise ModelError(f"fault_margin_k: a reading {fault_margin_k:g} K below the range would hold "
                         f"{ov:.3f} V overvoltage, above max_overvoltage_v {law.sipm.max_overvoltage_v:g} V; "
                         f"use a smaller margin")


def _dac_clamp(law, board) -> tuple[int, int]:
    s = law.supply
    lo_v, hi_v = s.output_range_v()
    top_v = min(hi_v, law.max_bias_v)
    exact = (np.array([lo_v, top_v]) - s.intercept_v) / s.volts_per_code
    # Codes whose output stays within [lo_v, top_v]: round inwards.
    a, b = sorted(exact)
    lo = max(0, int(np.ceil(a - 1e-9)))
    hi = min(s.dac.full_scale_code, int(np.floor(b + 1e-9)))
    return lo, hi


def _round_nodes(values, dac_full):
    return np.clip(np.rint(values), 0, dac_full).astype(np.int64)


def _uniform_value(y, i, r, shift: int, node_frac_bits: int):
    """The uniform interpolation: nodes ``y`` (with ``node_frac_bits``), index ``i``, remainder ``r``."""
    v = y[i] + floor_shift((y[i + 1] - y[i]) * r + ((1 << shift) >> 1), shift)
    return floor_shift(v + ((1 << node_frac_bits) >> 1), node_frac_bits)


def _uniform_candidate(target: _Target, shift: int, node_frac_bits: int = 0) -> tuple[np.ndarray, bool, float]:
    code_lo, code_hi = int(target.codes[0]), int(target.codes[-1])
    span = code_hi - code_lo
    nodes = code_lo + (np.arange((span >> shift) + 2, dtype=np.int64) << shift)
    scale = 1 << node_frac_bits
    y = np.clip(np.rint(target.at(nodes) * scale), 0, target.dac_full * scale).astype(np.int64)
    d = target.codes - code_lo
    got = _uniform_value(y, d >> shift, d & ((1 << shift) - 1), shift, node_frac_bits)
    err = np.abs(got - target.exact)
    return y, bool(np.all(err <= target.bound_lsb)), float(err.max())


#: Fractional node bits tried for uniform tables: plain DAC codes, or 32-bit nodes with 8 extra bits.
UNIFORM_NODE_FRAC_BITS = (0, 8)


def _size_uniform(target: _Target, value_bits: int) -> tuple[int, int, int, np.ndarray]:
    """Widest power-of-two spacing for each node format; keep the one with fewer bytes.

    Returns (shift, node_frac_bits, node_type_bits, nodes).
    """
    span = int(target.codes[-1] - target.codes[0])
    top = max(1, int(span).bit_length())
    best = None
    for frac in UNIFORM_NODE_FRAC_BITS:
        node_bits = max(value_bits, _uint_bits(((target.dac_full + 1) << frac) - 1))
        for shift in range(top, -1, -1):
            y, ok, _ = _uniform_candidate(target, shift, frac)
            if ok:
                nbytes = y.size * node_bits // 8
                if best is None or nbytes < best[0]:
                    best = (nbytes, shift, frac, node_bits, y)
                break
    if best is None:
        raise TableError("DAC quantisation", "no uniform table meets the bound even with one node per ADC code")
    return best[1:]


def _segment_ok(target: _Target, start: int, end: int, last: bool, frac_bits: int, slope_max: int):
    """Whether one segment meets the bound; returns (ok, y0, slope).

    The segment covers indices ``start .. end - 1`` (``.. end`` when it is the
    last one). Its line is the best uniform (minimax) fit of a convex or
    concave stretch: the chord's slope, shifted by half the largest deviation
    so the error swings equally both ways; then it is rounded to the integer
    node and fixed-point slope and checked with the firmware's arithmetic.
    """
    stop = end + 1 if last else end
    f = target.exact[start:stop]
    d = np.arange(stop - start, dtype=np.int64)
    chord = (f[-1] - f[0]) / d[-1] if d[-1] > 0 else 0.0
    resid = f - (f[0] + chord * d)
    y0 = int(_round_nodes(f[0] + 0.5 * (resid.max() + resid.min()), target.dac_full))
    s = int(np.rint(chord * (1 << frac_bits)))
    if abs(s) > slope_max:
        return False, y0, s
    got = y0 + floor_shift(s * d + ((1 << frac_bits) >> 1), frac_bits)
    return bool(np.all(np.abs(got - f) <= target.bound_lsb[start:stop])), y0, s


def _place_optimised(target: _Target, frac_bits: int, slope_max: int):
    """Greedy breakpoints: every segment as long as the bound allows (indices into target.codes)."""
    n = target.codes.size
    xs, ys, ss = [], [], []
    start = 0
    while True:
        if start == n - 1:  # a single code left: a flat segment
            y0 = int(_round_nodes(target.exact[start], target.dac_full))
            if abs(y0 - target.exact[start]) > target.bound_lsb[start]:
                raise TableError("DAC quantisation", "a single code cannot meet the bound")
            xs.append(start), ys.append(y0), ss.append(0)
            break
        ok_last, y0, s = _segment_ok(target, start, n - 1, True, frac_bits, slope_max)
        if ok_last:
            xs.append(start), ys.append(y0), ss.append(s)
            break
        # Gallop, then bisect, for the furthest next node `end` with [start, end) feasible.
        good, step = start + 1, 1
        ok, y_good, s_good = _segment_ok(target, start, good, False, frac_bits, slope_max)
        if not ok:
            raise TableError("DAC quantisation", "a one-code segment cannot meet the bound")
        bad = None
        while True:
            step *= 2
            cand = start + step
            if cand >= n - 1:
                bad = n - 1
                break
            ok, y_c, s_c = _segment_ok(target, start, cand, False, frac_bits, slope_max)
            if not ok:
                bad = cand
                break
            good, y_good, s_good = cand, y_c, s_c
        while bad - good > 1:
            mid = (good + bad) // 2
            ok, y_c, s_c = _segment_ok(target, start, mid, False, frac_bits, slope_max)
            if ok:
                good, y_good, s_good = mid, y_c, s_c
            else:
                bad = mid
        xs.append(start), ys.append(y_good), ss.append(s_good)
        start = good
    codes = target.codes[np.asarray(xs, dtype=np.int64)]
    return codes, np.asarray(ys, dtype=np.int64), np.asarray(ss, dtype=np.int64)


def _optimised(target: _Target, code_bits: int, value_bits: int):
    """Try 16- and 32-bit slopes; keep the layout with fewer bytes."""
    span = int(target.codes[-1] - target.codes[0])
    max_slope = float(np.max(np.abs(np.diff(target.exact)))) if target.codes.size > 1 else 0.0
    best = None
    for slope_bits in (16, 32):
        slope_max = (1 << (slope_bits - 1)) - 1
        room = int(np.floor(np.log2(slope_max / (2.0 * max_slope + 1.0))))  # headroom for steeper chords
        frac_bits = min(room, max(span, 1).bit_length() + 2)
        if frac_bits < 1:
            continue
        try:
            x, y, s = _place_optimised(target, frac_bits, slope_max)
        except TableError:
            continue
        nbytes = x.size * (code_bits + value_bits + slope_bits) // 8
        if best is None or nbytes < best[0]:
            best = (nbytes, slope_bits, frac_bits, x, y, s)
    if best is None:
        raise TableError("DAC quantisation", "no breakpoint layout meets the bound")
    return best[1:]


def build_table(law: CompensationLaw, board, max_gain_error_pct: float, layout: str = "optimised",
                fault_margin_k: float = DEFAULT_FAULT_MARGIN_K) -> LookupTable:
    """Build the smallest table of a layout that meets a gain-error bound.

    Parameters
    ----------
    law : CompensationLaw
        The law to tabulate; it must not be clamped inside the operating range.
        With ``drop_correction="measured"`` the table holds the law for zero
        current and carries the run-time :class:`CurrentCorrection`.
    board : BoardProfile
        Temperature channel, supply and ``safe_dac_code``.
    max_gain_error_pct : float
        Bound on the gain error at every ADC code of the range, percent.
    layout : {"uniform", "optimised"}
        Power-of-two node spacing indexed by shift, or non-uniform breakpoints
        found by binary search with stored slopes.
    fault_margin_k : float
        Readings further than this outside the operating range are sensor faults, kelvin.

    Returns
    -------
    LookupTable

    Raises
    ------
    TableError
        The bound cannot be met; ``.term`` names the budget term at fault.
    ModelError
        Bad arguments.
    """
    if layout not in LAYOUTS:
        raise ModelError(f"layout must be one of {', '.join(LAYOUTS)}, got {layout!r}")
    max_gain_error_pct = float(max_gain_error_pct)
    if not np.isfinite(max_gain_error_pct) or max_gain_error_pct <= 0:
        raise ModelError(f"max_gain_error_pct must be a positive number, got {max_gain_error_pct!r}")
    target = _target(law, board, max_gain_error_pct)
    _check_feasible(law, board, target, max_gain_error_pct)
    fault_lo, fault_hi = _fault_band(law, board, fault_margin_k)
    _check_margin_overvoltage(law, fault_margin_k)
    dac_min, dac_max = _dac_clamp(law, board)
    adc_bits = board.temperature.front_end.adc_bits
    dac_bits = law.supply.dac.bits
    code_bits = max(16, _uint_bits((1 << adc_bits) - 1))
    value_bits = max(16, _uint_bits((1 << dac_bits) - 1))
    code_lo, code_hi = int(target.codes[0]), int(target.codes[-1])
    if layout == "uniform":
        shift, node_frac, node_bits, y = _size_uniform(target, value_bits)
        x = slope = np.zeros(0, dtype=np.int64)
        frac_bits, slope_bits = 0, 0
        max_delta = int(np.max(np.abs(np.diff(y)))) if y.size > 1 else 0
        acc_max = max(max_delta * ((1 << shift) - 1) + (1 << shift), int(y.max()) + (1 << node_frac))
    else:
        shift, node_frac, node_bits = 0, 0, value_bits
        slope_bits, frac_bits, x, y, slope = _optimised(target, code_bits, value_bits)
        lengths = np.diff(np.append(x, code_hi + 1))
        acc_max = int(np.max(np.abs(slope) * lengths)) + (1 << frac_bits)
    acc_bits = 32 if _int_bits(acc_max) <= 32 else 64
    current = build_current_correction(law, fault_margin_k) if law.drop_correction == "measured" else None
    # Values just outside the range: the table's own end values.
    table = LookupTable(layout, adc_bits, dac_bits, code_lo, code_hi, fault_lo, fault_hi, dac_min, dac_max,
                        int(board.safe_dac_code), 0, 0, shift, frac_bits, x, y, slope, code_bits, value_bits,
                        slope_bits, acc_bits, max_gain_error_pct, node_frac, node_bits, current)
    ends = np.clip(table.interpolate([code_lo, code_hi]), dac_min, dac_max)
    from dataclasses import replace
    return replace(table, below_dac_code=int(ends[0]), above_dac_code=int(ends[1]))


def sweep_table(table: LookupTable, law: CompensationLaw, board) -> TableSweep:
    """Check a table at every ADC code of the operating range against the law.

    Parameters
    ----------
    table : LookupTable
    law : CompensationLaw
    board : BoardProfile

    Returns
    -------
    TableSweep
    """
    codes = np.arange(table.code_lo, table.code_hi + 1, dtype=np.int64)
    temps = board.temperature.temp_at(codes + 0.5)
    ideal_v = law.output_v(temps)
    exact = (ideal_v - law.supply.intercept_v) / law.supply.volts_per_code
    dac, _ = table.lookup(codes)
    table_v = law.supply.output_v(dac)
    gain_pct = 100.0 * (table_v - ideal_v) / law.target_overvoltage_v(temps)
    err_lsb = np.abs(dac - exact)
    worst = int(np.argmax(np.abs(gain_pct)))
    max_gain = float(np.abs(gain_pct).max())
    return TableSweep(codes, temps, ideal_v, exact, dac, table_v, gain_pct, max_gain, float(err_lsb.max()),
                      int(codes[worst]), bool(max_gain <= table.max_gain_error_pct * (1 + 1e-9)))
