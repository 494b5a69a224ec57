"""Integer lookup tables: raw temperature ADC code -> bias DAC code.

This module holds the *one* definition of the firmware's integer path; the C
generator (:mod:`compensator.firmware.table_c`) renders exactly these
operations, and :meth:`LookupTable.lookup` is the bit-exact Python reference
(the record and its integer path are in :mod:`compensator.firmware.lookup_table`; this module builds,
compares and sweeps tables and re-exports those names).

The integer path, for an ADC code ``n``:

1. ``n < fault_lo`` or ``n > fault_hi``: the sensor is open, shorted or
   reads a temperature more than ``fault_margin_k`` outside the operating
   range. Return ``safe_dac_code`` (see :mod:`compensator.firmware.safe_state`:
   below breakdown at the coldest temperature when the supply can reach that),
   status ``SENSOR_FAULT``. Rail codes (0 and full scale) are always faults.
2. ``n < code_lo`` or ``n > code_hi`` (a plausible reading just outside the
   operating range): return the table's own value at the nearer end of the
   range (never an extrapolated bias), status ``COLDER_THAN_RANGE`` or
   ``HOTTER_THAN_RANGE``: which side of the codes is cold depends on the
   sensor and its wiring (with an NTC on the low side of the divider a code
   above the range is a temperature *below* it), and the table records it.
3. Otherwise interpolate by the table's layout (status ``OK``); the layouts
   and their integer arithmetic are in :mod:`compensator.firmware.layouts`
   (``uniform``, ``segmented``, ``optimised``, ``polynomial``).
4. Clamp to ``[dac_min, dac_max]``: the DAC codes whose output lies within
   the supply's limits and the board's ``max_bias_v``.

With the *measured* drop correction a second entry point also adds the drop
of the measured SiPM current (:mod:`compensator.firmware.current`).

Node values are the law's exact DAC codes rounded to nearest. The error is
measured at the centre of each ADC code against the law evaluated there; a
change of ``dV`` in the supply output is taken as a gain error ``dV / Vov(T)``,
which slightly overstates the error at the SiPM (the series resistor returns a
fraction ``R dI/dV`` of it). Every table is checked at every ADC code of the
range with the integer arithmetic before it is returned.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.errors import ModelError
from compensator.findings import Finding, Severity
from compensator.firmware.current import CURRENT_FACTOR_SLACK_BITS, CurrentCorrection, build_current_correction
from compensator.firmware.faults import sensor_fault_band
from compensator.firmware.fixed_point import floor_shift, uint_bits
from compensator.firmware.layout_sizing import (
    size_optimised,
    size_polynomial,
    size_segmented,
    size_uniform,
    uniform_candidate,
)
from compensator.firmware.layouts import LAYOUT_CHOICES, LAYOUTS, UNIFORM_NODE_FRAC_BITS, LayoutFit, Target, TableError
from compensator.firmware.lookup_table import (
    DEFAULT_FAULT_MARGIN_K,
    STATUS_NAMES,
    STATUS_OK,
    STATUS_SENSOR_FAULT,
    LookupTable,
    TableStatus,
    _interpolate,
)
from compensator.firmware.safe_state import safe_state
from compensator.law.laws import CompensationLaw, check_law_in_range
from compensator.physics.sipm import breakdown_v

__all__ = [
    "LAYOUTS", "LAYOUT_CHOICES", "TableStatus", "STATUS_OK", "STATUS_SENSOR_FAULT", "STATUS_NAMES",
    "DEFAULT_FAULT_MARGIN_K", "CURRENT_FACTOR_SLACK_BITS", "CurrentCorrection", "build_current_correction",
    "TableError", "floor_shift", "LookupTable", "TableSweep", "LayoutCandidate", "LayoutReport", "ideal_dac_code",
    "adc_quantisation_gain_pct", "build_table", "compare_layouts", "sweep_table", "UNIFORM_NODE_FRAC_BITS",
]


@dataclass(frozen=True, eq=False, kw_only=True)
class TableSweep:
    """A table checked at every ADC code of the operating range.

    Attributes
    ----------
    adc_code : ndarray of int64
        Every code of the range.
    temp_c : ndarray
        Temperature read at the centre of each code, degree Celsius.
    ideal_bias_v : ndarray
        The law's supply output there, volt.
    ideal_dac_code : ndarray
        Exact (fractional) DAC code for it.
    table_dac_code : ndarray of int64
        What the table gives.
    table_bias_v : ndarray
        Supply output at the table's DAC code, volt.
    gain_error_pct : ndarray
        ``100 (table_bias_v - ideal_bias_v) / Vov(T)``.
    max_gain_error_pct : float
        Largest absolute gain error over every code of the range, percent.
    max_error_dac_lsb : float
        Largest absolute difference from the exact DAC code over every code, LSB.
    worst_adc_code : int
        Where the largest absolute gain error sits.
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


@dataclass(frozen=True, kw_only=True)
class LayoutCandidate:
    """One layout built for the bound and checked at every code.

    Attributes
    ----------
    layout : str
        The layout's name.
    table_bytes : int or None
        Bytes of const data (None when the layout cannot meet the bound).
    entries : int or None
        Nodes, breakpoints or coefficients.
    max_gain_error_pct : float or None
        Largest absolute gain error over every ADC code of the range, percent.
    within_bound : bool
        Whether every code meets the bound.
    reason : str
        Why the layout failed (empty when it was built).
    """

    layout: str
    table_bytes: int | None
    entries: int | None
    max_gain_error_pct: float | None
    within_bound: bool
    reason: str = ""


@dataclass(frozen=True, eq=False, kw_only=True)
class LayoutReport:
    """Every layout built for one bound, and the one chosen.

    Attributes
    ----------
    table : LookupTable
        The chosen table (the smallest that meets the bound).
    tables : dict of str to LookupTable
        Every layout that was built and met the bound.
    candidates : tuple of LayoutCandidate
        Every layout tried, in :data:`LAYOUTS` order.
    uniform_bytes : int
        Bytes of the smallest uniform table, the baseline.
    findings : tuple of Finding
        An ``info`` finding when the chosen table is not at most half the
        uniform baseline, explaining with numbers why.
    """

    table: LookupTable
    tables: dict
    candidates: tuple
    uniform_bytes: int
    findings: tuple = ()

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
    # What the law holds (gain, or gain x PDE x crosstalk x light yield) moves by error_pct_per_v per volt.
    return law.supply.lsb_v * law.error_pct_per_v(temp_c)


def _target(law, board, max_gain_error_pct) -> Target:
    channel = board.temperature
    code_lo, code_hi = channel.code_range(law.min_temp_c, law.max_temp_c)
    codes = np.arange(code_lo, code_hi + 1, dtype=np.int64)
    temps = channel.temp_at(codes + 0.5)
    if not np.all(np.isfinite(temps)):
        raise ModelError(f"{board.name}: some ADC codes of the operating range do not map to a temperature")
    exact = ideal_dac_code(law, temps)
    per_lsb = _gain_pct_per_lsb(law, temps)
    bound = max_gain_error_pct / per_lsb
    ext = []
    for end in (code_lo, code_hi):  # DAC codes per ADC code across the end code, from its two neighbours' centres
        v2 = law.unclamped_output_v(channel.temp_at(np.array([end - 0.5, end + 1.5])))
        ext.append(float((v2[1] - v2[0]) / (2.0 * law.supply.volts_per_code)))
    return Target(codes=codes, temp_c=temps, exact=exact, bound_lsb=bound, gain_pct_per_lsb=per_lsb, ext_lo=ext[0],
                  ext_hi=ext[1], dac_full=law.supply.dac.full_scale_code)


def _check_feasible(law, board, target: Target, max_gain_error_pct: float) -> None:
    """Refuse a law the supply clamps, or a bound finer than half a DAC LSB or half an ADC code allows."""
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
        ``|dV/dT| (K per code) / 2`` times the law's sensitivity
        (:meth:`~compensator.law.CompensationLaw.error_pct_per_v`: ``100 / Vov(T)``
        for the gain laws), percent.
    """
    t = np.asarray(temp_c, dtype=float)
    return np.abs(law.slope_v_per_k(t)) * 0.5 * channel.temp_per_code_k(t) * law.error_pct_per_v(t)


def _fault_band(law, board, fault_margin_k: float) -> tuple[int, int]:
    if not np.isfinite(fault_margin_k) or fault_margin_k < 0:
        raise ModelError(f"fault_margin_k must be a non-negative number, got {fault_margin_k!r}", key="fault_margin_k")
    try:
        return sensor_fault_band(board.temperature, [law.min_temp_c - fault_margin_k, law.max_temp_c + fault_margin_k])
    except ModelError as exc:
        raise ModelError(f"fault_margin_k: {fault_margin_k:g} K takes the range outside the sensor model: {exc}",
                         key="fault_margin_k") from None


def _check_margin_overvoltage(law, fault_margin_k: float) -> None:
    """Readings in the clamped band keep the end value; the die may be up to the margin colder."""
    t_lo = law.min_temp_c
    extra_v = float(breakdown_v(law.sipm, t_lo) - breakdown_v(law.sipm, t_lo - fault_margin_k))
    ov = float(law.output_v(t_lo) - breakdown_v(law.sipm, t_lo)) + extra_v
    if ov > law.sipm.max_overvoltage_v:
        raise ModelError(f"fault_margin_k: a reading {fault_margin_k:g} K below the range would hold "
                         f"{ov:.3f} V overvoltage, above max_overvoltage_v {law.sipm.max_overvoltage_v:g} V; "
                         f"use a smaller margin", key="fault_margin_k")


def _dac_clamp(law) -> tuple[int, int]:
    s = law.supply
    lo_v, hi_v = s.output_range_v()
    top_v = min(hi_v, law.max_bias_v)
    exact = (np.array([lo_v, top_v]) - s.intercept_v) / s.volts_per_code
    # Codes whose output stays within [lo_v, top_v]: round inwards.
    a, b = sorted(exact)
    lo = max(0, int(np.ceil(a - 1e-9)))
    hi = min(s.dac.full_scale_code, int(np.floor(b + 1e-9)))
    return lo, hi



def _temperature_direction(board, code_lo: int, code_hi: int) -> tuple[TableStatus, TableStatus]:
    """Statuses of codes below and above the range: colder or hotter, by the sensor's slope."""
    t = board.temperature.temp_at(np.array([code_lo + 0.5, code_hi + 0.5]))
    if t[1] >= t[0]:
        return TableStatus.COLDER_THAN_RANGE, TableStatus.HOTTER_THAN_RANGE
    return TableStatus.HOTTER_THAN_RANGE, TableStatus.COLDER_THAN_RANGE


def _fit_layout(layout: str, target: Target, code_bits: int, value_bits: int) -> LayoutFit:
    if layout == "uniform":
        return size_uniform(target, value_bits)
    if layout == "segmented":
        return size_segmented(target, value_bits)
    if layout == "optimised":
        return size_optimised(target, code_bits, value_bits)
    return size_polynomial(target, value_bits)


class _Frame:
    """Everything a table needs besides its layout (computed once per law, board and bound)."""

    def __init__(self, law, board, max_gain_error_pct: float, fault_margin_k: float):
        max_gain_error_pct = float(max_gain_error_pct)
        if not np.isfinite(max_gain_error_pct) or max_gain_error_pct <= 0:
            raise ModelError(f"max_gain_error_pct must be a positive number, got {max_gain_error_pct!r}",
                             key="max_gain_error_pct")
        self.bound_pct = max_gain_error_pct
        self.target = _target(law, board, max_gain_error_pct)
        _check_feasible(law, board, self.target, max_gain_error_pct)
        self.fault_lo, self.fault_hi = _fault_band(law, board, fault_margin_k)
        _check_margin_overvoltage(law, fault_margin_k)
        self.dac_min, self.dac_max = _dac_clamp(law)
        self.adc_bits = board.temperature.front_end.adc_bits
        self.dac_bits = law.supply.dac.bits
        self.code_bits = max(16, uint_bits((1 << self.adc_bits) - 1))
        self.value_bits = max(16, uint_bits((1 << self.dac_bits) - 1))
        self.code_lo, self.code_hi = int(self.target.codes[0]), int(self.target.codes[-1])
        self.below_status, self.above_status = _temperature_direction(board, self.code_lo, self.code_hi)
        self.current = build_current_correction(law, fault_margin_k) if law.drop_correction == "measured" else None
        self.safe = safe_state(law, board)

    def table(self, fit: LayoutFit) -> LookupTable:
        """The complete table of a layout fit, computed fully before construction."""
        ends = np.clip(_interpolate(fit, self.code_lo, [self.code_lo, self.code_hi]), self.dac_min, self.dac_max)
        return LookupTable(
            layout=fit.layout, adc_bits=self.adc_bits, dac_bits=self.dac_bits, code_lo=self.code_lo,
            code_hi=self.code_hi, fault_lo=self.fault_lo, fault_hi=self.fault_hi, dac_min=self.dac_min,
            dac_max=self.dac_max, safe_dac_code=self.safe.dac_code, below_dac_code=int(ends[0]),
            above_dac_code=int(ends[1]), below_status=self.below_status, above_status=self.above_status,
            shift=fit.shift, slope_frac_bits=fit.slope_frac_bits, x=fit.x, y=fit.y, slope=fit.slope,
            segment_shift=fit.segment_shift, center_code=fit.center_code, coeff_shift=fit.coeff_shift,
            coeff_type_bits=tuple(fit.coeff_type_bits), code_type_bits=self.code_bits,
            value_type_bits=self.value_bits, slope_type_bits=fit.slope_type_bits, acc_type_bits=fit.acc_type_bits,
            max_gain_error_pct=self.bound_pct, node_frac_bits=fit.node_frac_bits,
            node_type_bits=fit.node_type_bits, current=self.current, safe_state=self.safe)

    def verify(self, table: LookupTable) -> tuple[float, bool]:
        """Largest absolute gain error over every code of the range (percent) and whether it meets the bound."""
        dac, _ = table.lookup(self.target.codes)
        gain_pct = np.abs(dac - self.target.exact) * self.target.gain_pct_per_lsb
        worst = float(gain_pct.max())
        return worst, bool(np.all(np.abs(dac - self.target.exact) <= self.target.bound_lsb))

    def build(self, layout: str) -> LookupTable:
        table = self.table(_fit_layout(layout, self.target, self.code_bits, self.value_bits))
        _, ok = self.verify(table)
        if not ok:  # every sizing routine checks every code; this would be a bug
            raise RuntimeError(f"{layout} table misses its bound")
        return table


def build_table(law: CompensationLaw, board, max_gain_error_pct: float, layout: str = "smallest", *,
                fault_margin_k: float = DEFAULT_FAULT_MARGIN_K) -> LookupTable:
    """Build the smallest table of a layout (or of every layout) that meets a gain-error bound.

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
    layout : {"smallest", "uniform", "segmented", "optimised", "polynomial"}
        One layout (:mod:`compensator.firmware.layouts`), or ``"smallest"``:
        build each, check each at every ADC code and keep the one with the
        fewest bytes (:func:`compare_layouts` also reports the others).
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

    Examples
    --------
    >>> from compensator.profiles import load_sipm, load_board
    >>> from compensator.law import build_law
    >>> sipm = load_sipm("hardware_profiles/hut-sipm-b.yaml")
    >>> board = load_board("hardware_profiles/hut-board-pt1000.yaml")
    >>> table = build_table(build_law(sipm, board, 4.0), board, 0.05, "uniform")
    >>> table.layout, table.entries, table.table_bytes
    ('uniform', 13, 26)
    """
    if layout not in LAYOUT_CHOICES:
        raise ModelError(f"layout must be one of {', '.join(LAYOUT_CHOICES)}, got {layout!r}", key="layout")
    if layout == "smallest":
        return compare_layouts(law, board, max_gain_error_pct, fault_margin_k=fault_margin_k).table
    return _Frame(law, board, max_gain_error_pct, fault_margin_k).build(layout)


def compare_layouts(law: CompensationLaw, board, max_gain_error_pct: float, *,
                    fault_margin_k: float = DEFAULT_FAULT_MARGIN_K) -> LayoutReport:
    """Build every layout for a bound, check each at every ADC code, and choose the smallest.

    Parameters
    ----------
    law : CompensationLaw
        As for :func:`build_table`.
    board : BoardProfile
        As for :func:`build_table`.
    max_gain_error_pct : float
        Bound on the gain error at every ADC code of the range, percent.
    fault_margin_k : float
        Readings further than this outside the operating range are sensor faults, kelvin.

    Returns
    -------
    LayoutReport
        The chosen table, every candidate with its bytes and largest error,
        and a finding when the choice is not at most half the uniform baseline.
        Ties go to the simpler layout (the order of :data:`LAYOUTS`).

    Raises
    ------
    TableError
        No layout meets the bound.
    """
    frame = _Frame(law, board, max_gain_error_pct, fault_margin_k)
    tables, candidates, errors = {}, [], []
    for layout in LAYOUTS:
        try:
            table = frame.build(layout)
        except TableError as exc:
            errors.append(exc)
            candidates.append(LayoutCandidate(layout=layout, table_bytes=None, entries=None, max_gain_error_pct=None,
                                              within_bound=False, reason=exc.reason))
            continue
        worst, ok = frame.verify(table)
        tables[layout] = table
        candidates.append(LayoutCandidate(layout=layout, table_bytes=table.table_bytes, entries=table.entries,
                                          max_gain_error_pct=worst, within_bound=ok))
    if not tables:
        raise errors[0]
    chosen = min(tables.values(), key=lambda t: (t.table_bytes, LAYOUTS.index(t.layout)))
    uniform_bytes = tables["uniform"].table_bytes if "uniform" in tables else 0
    findings = []
    if uniform_bytes and 2 * chosen.table_bytes > uniform_bytes:
        sizes = ", ".join(f"{c.layout} {c.table_bytes} B" if c.table_bytes is not None else f"{c.layout}: {c.reason}"
                          for c in candidates)
        findings.append(Finding(code="table_not_half_of_uniform", severity=Severity.INFO, message=(
            f"the smallest table ({chosen.layout}, {chosen.table_bytes} B) is more than half of the smallest uniform "
            f"table ({uniform_bytes} B): {sizes}. A uniform table needs at least two nodes and a polynomial at "
            f"least two coefficients, so no layout stores the law in fewer bytes at this bound")))
    return LayoutReport(table=chosen, tables=tables, candidates=tuple(candidates), uniform_bytes=uniform_bytes,
                        findings=tuple(findings))


def sweep_table(table: LookupTable, law: CompensationLaw, board) -> TableSweep:
    """Check a table at every ADC code of the operating range against the law.

    Parameters
    ----------
    table : LookupTable
        The table to check.
    law : CompensationLaw
        The law it was built from.
    board : BoardProfile
        The board it was built for.

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
    gain_pct = (table_v - ideal_v) * law.error_pct_per_v(temps)
    err_lsb = np.abs(dac - exact)
    worst = int(np.argmax(np.abs(gain_pct)))
    max_gain = float(np.abs(gain_pct).max())
    return TableSweep(adc_code=codes, temp_c=temps, ideal_bias_v=ideal_v, ideal_dac_code=exact, table_dac_code=dac,
                      table_bias_v=table_v, gain_error_pct=gain_pct, max_gain_error_pct=max_gain,
                      max_error_dac_lsb=float(err_lsb.max()), worst_adc_code=int(codes[worst]),
                      within_bound=bool(max_gain <= table.max_gain_error_pct * (1 + 1e-9)))


# Old private names the tests of the sizing rules use.
_Target = Target
_uniform_candidate = uniform_candidate
