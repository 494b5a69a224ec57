"""The interlocks' integer limits derived from the profiles (pure).

:func:`build_interlock_limits` turns a SiPM, a board and optionally a cooler
profile into the :class:`~compensator.firmware.interlocks.InterlockLimits`
that the Python reference and the generated C both run on;
:func:`supply_fault_tolerance_v` states the supply-fault rule. The reference
itself, its records and constants are in :mod:`compensator.firmware.interlocks`.
"""

from __future__ import annotations

import numpy as np

from compensator.errors import ModelError
from compensator.firmware.faults import open_sensor_code, sensor_fault_band
from compensator.firmware.interlocks import (
    DEFAULT_FAULT_MARGIN_K,
    DEFAULT_HEARTBEAT_TIMEOUT_S,
    DEFAULT_MAX_RATE_K_PER_S,
    DEFAULT_SLEW_V_PER_S,
    INT32_MAX,
    MIN_SUPPLY_FAULT_TICKS,
    OV_LIMIT_SHIFT,
    READBACK_SHIFT,
    InterlockLimits,
)
from compensator.physics.sipm import breakdown_v

__all__ = ["build_interlock_limits", "supply_fault_tolerance_v"]


def _level_of_v(supply, volts, full: int, rises: bool) -> float:
    code = (volts - supply.intercept_v) / supply.volts_per_code
    return code if rises else full - code


def supply_fault_tolerance_v(board, *, slew_step_v: float = 0.0) -> float:
    """Largest disagreement between the bias read-back and the set bias that a healthy board can show, volt.

    The rule (a worst case, every term at its limit with the same sign, so
    that a board within its tolerances never trips):

    - the supply's set-point error: the largest deviation of its output from
      the nominal at either end of the DAC range with every tolerance and
      drift of the DAC, the resistors and the feedback reference at its worst
      corner over the electronics' temperature range
      (:func:`compensator.law.safety.highest_output_v`, taken as symmetric);
    - the read-back's gain error at the supply's highest output (divider and
      ADC reference tolerances) and its offset;
    - one read-back code (the reading's and the expected value's rounding);
    - one slew step, for a reading taken while the output moves.

    Parameters
    ----------
    board : BoardProfile
        With a ``bias_readback`` channel.
    slew_step_v : float
        Largest change of the set bias in one tick, volt.

    Returns
    -------
    float

    Raises
    ------
    ModelError
        The board has no read-back channel.
    """
    from types import SimpleNamespace

    from compensator.law.safety import highest_output_v

    readback = getattr(board, "bias_readback", None)
    if readback is None:
        raise ModelError("the board has no bias read-back channel: a supply fault cannot be detected",
                         key="bias_readback")
    supply = board.supply
    span = SimpleNamespace(supply=supply, min_temp_c=board.min_temp_c, max_temp_c=board.max_temp_c)
    ends = (0, supply.dac.full_scale_code)
    setpoint_v = max(highest_output_v(span, board, code) - float(supply.output_v(code)) for code in ends)
    top_v = float(supply.output_range_v()[1])
    gain_v = top_v * 1e-2 * (readback.divider_tolerance_pct + readback.reference_tolerance_pct)
    return float(max(setpoint_v, 0.0) + gain_v + readback.offset_v + readback.lsb_v + slew_step_v)


def _readback_limits(board, volts_per_level: float, v_at_level0: float, slew_levels: int, tick_s: float) -> dict:
    """The integer read-back constants of :class:`InterlockLimits` (empty without a read-back channel)."""
    readback = getattr(board, "bias_readback", None)
    if readback is None:
        return {}
    lsb_v = readback.lsb_v
    lo_v, hi_v = board.supply.output_range_v()
    tol_v = supply_fault_tolerance_v(board, slew_step_v=slew_levels * volts_per_level)
    # settling after a jump to the safe state: five time constants of the read-back filter and the bias filter
    tau_s = readback.filter_time_constant_s + (getattr(board.supply, "series_resistor_ohm", 0.0)
                                               * (getattr(board.supply, "filter_capacitance_f", 0.0) or 0.0))
    full = readback.full_scale_code
    return dict(
        readback_at_level0_q=int(round(v_at_level0 / lsb_v * (1 << READBACK_SHIFT))),
        readback_per_level_q=int(round(volts_per_level / lsb_v * (1 << READBACK_SHIFT))),
        readback_min_code=max(0, min(full, int(round(lo_v / lsb_v)))),
        readback_max_code=max(0, min(full, int(round(hi_v / lsb_v)))),
        supply_fault_codes=int(np.ceil(tol_v / lsb_v)),
        supply_fault_ticks=max(MIN_SUPPLY_FAULT_TICKS, 1 + int(np.ceil(5.0 * tau_s / tick_s))),
    )


def build_interlock_limits(sipm, board, thermal=None, *, slew_v_per_s: float = DEFAULT_SLEW_V_PER_S,
                           max_rate_k_per_s: float | None = None,
                           fault_margin_k: float = DEFAULT_FAULT_MARGIN_K,
                           heartbeat_timeout_s: float = DEFAULT_HEARTBEAT_TIMEOUT_S,
                           over_current_a: float | None = None) -> InterlockLimits:
    """Integer interlock limits for a sensor on a board (and its cooler, if any).

    Parameters
    ----------
    sipm : SipmProfile or Sipm
        The sensor (its breakdown curve, ``max_overvoltage_v`` and ``max_current_a``).
    board : BoardProfile
        Supply, temperature channel, operating range, ``max_bias_v``, ``safe_dac_code``, control rate and
        the bias read-back channel, if any (it enables the supply-fault check:
        :func:`supply_fault_tolerance_v` gives the limit, the count of ticks
        is five time constants of the read-back and bias filters, at least
        :data:`MIN_SUPPLY_FAULT_TICKS`).
    thermal : ThermalProfile or CoolerParams, optional
        The cooler (``max_hot_temp_c`` and ``dew_margin_k``); ``None`` for a board without one.
    slew_v_per_s : float
        Bias slew limit, volt per second.
    max_rate_k_per_s : float, optional
        Largest plausible rate of change of the temperature reading, kelvin
        per second. Default: :data:`DEFAULT_MAX_RATE_K_PER_S` without a
        cooler; with one, twice the fastest the cold plate can move (all the
        heat the module can pump or dissipate at full current, Peltier plus
        Joule at the hottest allowed hot side, into the plate's heat
        capacity), if that is more.
    fault_margin_k : float
        Readings this far outside the operating range are sensor faults, kelvin.
    heartbeat_timeout_s : float
        Host silence that trips the safe state, second (0: no watchdog).
    over_current_a : float, optional
        SiPM current trip level, ampere (default the sensor's ``max_current_a``).

    Returns
    -------
    InterlockLimits

    Raises
    ------
    ModelError
        A limit is not physical.
    """
    device = getattr(sipm, "device", sipm)
    cooler = getattr(thermal, "cooler", thermal)
    if max_rate_k_per_s is None:
        max_rate_k_per_s = DEFAULT_MAX_RATE_K_PER_S
        if cooler is not None:
            i_a = cooler.max_current_a
            heat_w = (cooler.seebeck_v_per_k * i_a * (cooler.max_hot_temp_c + 273.15)
                      + cooler.resistance_ohm * i_a ** 2)
            max_rate_k_per_s = max(max_rate_k_per_s, 2.0 * heat_w / cooler.cold_heat_capacity_j_per_k)
    for key, value, low in (("slew_v_per_s", slew_v_per_s, 0.0), ("max_rate_k_per_s", max_rate_k_per_s, 0.0),
                            ("fault_margin_k", fault_margin_k, -1e-300),
                            ("heartbeat_timeout_s", heartbeat_timeout_s, -1e-300)):
        if not np.isfinite(value) or value <= low:
            raise ModelError(f"must be a {'positive' if low == 0 else 'non-negative'} number, got {value!r}", key=key)
    supply = board.supply
    full = supply.dac.full_scale_code
    rises = supply.volts_per_code > 0
    tick_s = 1.0 / board.control_rate_hz
    volts_per_level = supply.lsb_v
    lo_v, hi_v = supply.output_range_v()
    top_v = min(board.max_bias_v, hi_v)
    bias_limit_level = int(np.floor(_level_of_v(supply, top_v, full, rises) + 1e-9))
    bias_limit_level = max(0, min(full, bias_limit_level))

    t_lo, t_hi = board.min_temp_c - fault_margin_k, board.max_temp_c + fault_margin_k
    temps = np.linspace(t_lo, t_hi, 701)
    limit_v = breakdown_v(device, temps) + device.max_overvoltage_v
    slope_v_per_k = (limit_v[-1] - limit_v[0]) / (t_hi - t_lo)
    line_v = limit_v[0] + slope_v_per_k * (temps - t_lo)
    line_at_lo_v = limit_v[0] - max(0.0, float(np.max(line_v - limit_v)))
    ref_mdegc = int(np.floor(t_lo * 1000.0))
    level_at_ref = int(np.floor(_level_of_v(supply, line_at_lo_v - slope_v_per_k * (t_lo - ref_mdegc / 1000.0),
                                            full, rises))) - 1
    slope_q = int(np.floor(slope_v_per_k / 1000.0 / volts_per_level * (1 << OV_LIMIT_SHIFT)))

    safe = int(board.safe_dac_code)
    safe_margin_v = float(np.min(breakdown_v(device, temps))) - float(supply.output_v(safe))

    channel = board.temperature
    adc_full = channel.front_end.full_scale_code
    # A code below the band reads as a temperature beyond one end: open if an infinite resistance lands there.
    adc_low_is_open = open_sensor_code(channel) < adc_full / 2
    fault_lo, fault_hi = sensor_fault_band(channel, [t_lo, t_hi])

    over_a = device.max_current_a if over_current_a is None else over_current_a
    if not np.isfinite(over_a) or over_a <= 0:
        raise ModelError(f"must be a positive current, got {over_a!r}", key="over_current_a")
    slew_levels = max(1, int(np.floor(slew_v_per_s * tick_s / volts_per_level)))
    v_at_level0 = float(supply.intercept_v + (0.0 if rises else supply.volts_per_code * full))
    return InterlockLimits(
        tick_ms=max(1, int(round(1000.0 * tick_s))),
        dac_full_scale=full, bias_rises_with_code=bool(rises), safe_dac_code=safe,
        bias_limit_level=bias_limit_level, ov_limit_ref_mdegc=ref_mdegc, ov_limit_level_at_ref=level_at_ref,
        ov_limit_slope_q=slope_q,
        slew_levels_per_tick=slew_levels,
        adc_fault_lo=fault_lo, adc_fault_hi=fault_hi, adc_low_is_open=bool(adc_low_is_open),
        max_step_mdegc=int(np.ceil(max_rate_k_per_s * tick_s * 1000.0)),
        over_current_na=min(INT32_MAX, int(np.floor(over_a * 1e9))),
        hot_side_max_mdegc=INT32_MAX if cooler is None else int(np.floor(cooler.max_hot_temp_c * 1000.0)),
        dew_margin_mdegc=0 if cooler is None else int(np.ceil(cooler.dew_margin_k * 1000.0)),
        heartbeat_timeout_ms=int(round(heartbeat_timeout_s * 1000.0)),
        **_readback_limits(board, float(volts_per_level), v_at_level0, slew_levels, tick_s),
        bias_v_at_level0=v_at_level0,
        volts_per_level=float(volts_per_level),
        safe_margin_v=safe_margin_v,
    )
