"""Safety interlocks of the controller board: integer limits from the profiles and a bit-exact reference.

Once per control tick the firmware hands the interlocks what it measured and
what the law asks for; they return the DAC code to apply, whether the cooler
may run, and the live and latched fault words
(:class:`~compensator.firmware.faults.FaultFlag`). The C99 rendering
(:mod:`compensator.firmware.interlocks_c`) performs exactly the integer
operations of :meth:`Interlocks.step`.

Bias is handled as a *level*: the DAC code when the supply's output rises
with the code, ``full_scale - code`` when it falls (feedback injection), so
"a higher level is a higher bias" holds for both topologies.

The rules, in the order the step applies them:

1. **Sensor open or short**: an ADC code outside ``[adc_fault_lo,
   adc_fault_hi]`` (the operating range widened by the fault margin; the
   rails are always outside). Which end is "open" depends on the divider.
2. **Implausible rate**: the temperature moved more than
   ``max_step_mdegc`` since the previous tick with a plausible code.
3. **Over-current**: the SiPM current above ``over_current_na``.
4. **Hot side over temperature**: the cooler's hot side above ``hot_side_max_mdegc``.
5. **Heartbeat lost**: outputs enabled and no valid host frame for more than
   ``heartbeat_timeout_ms`` (0 disables the watchdog).
5a. **Supply fault** (only with a bias read-back channel): the read-back
   code differs from the code expected for the level applied over the last
   tick by more than ``supply_fault_codes`` for ``supply_fault_ticks``
   consecutive ticks (a supply that stopped following its DAC, failed high
   or lost its regulation). The limit is the worst case of what a healthy
   board can show (:func:`build_interlock_limits` states the rule); the
   count of ticks lets the output and the read-back filter settle after a
   jump to the safe state. Without a read-back channel this cannot be
   detected: the firmware sees only the code it wrote, so a supply that
   ignores it goes unnoticed, and only hardware (an independent
   over-voltage clamp, a load switch) can catch it.
6. **Dew point**: the cold side below the dew point plus ``dew_margin_mdegc``
   (only when the humidity, hence the dew point, is known): the cooler may
   not cool (a positive drive is held at zero; heating, which moves the
   plate away from condensation, is allowed) while it lasts; the bias is not
   touched.
7. Any latched *trip* (:data:`~compensator.firmware.faults.TRIP_FLAGS`,
   rules 1-5a) puts the outputs in the safe state at once: the bias at
   ``safe_dac_code`` (below breakdown at the coldest temperature of the
   range) and the cooler off, until the host clears the fault and its cause
   has gone.
8. Otherwise, with outputs disabled the bias ramps to ``safe_dac_code`` at
   the slew limit; with outputs enabled the requested level is clamped to
   the lower of the board's maximum bias and the maximum overvoltage at the
   measured temperature (``BIAS_LIMIT`` when it bites) and approached at no
   more than ``slew_levels_per_tick``.

The overvoltage limit is a straight line in temperature that lies below
``breakdown(T) + max_overvoltage_v`` over the whole plausible range
(the chord shifted down by its largest excess), rounded towards lower bias.

*Caution:* these interlocks are a second line of defence in firmware. Keep
current, voltage and temperature limits in hardware that does not depend on
software, and follow local codes and licensed practice for supplies of tens
of volts (above 60 V dc is hazardous live, IEC 61010-1) and for coolers. A
supply fault in particular means the firmware's DAC no longer controls the
bias: the safe state it commands may not reach the SiPM, so the board needs
a hardware path (an enable or shutdown line on the regulator, a load switch)
that removes the bias whatever the supply does.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from compensator.errors import ModelError
from compensator.findings import Finding, Severity
from compensator.firmware.faults import TRIP_FLAGS, FaultFlag
from compensator.physics.sipm import breakdown_v

__all__ = [
    "ABSENT", "InterlockLimits", "InterlockInputs", "InterlockOutputs", "Interlocks", "build_interlock_limits",
    "DEFAULT_SLEW_V_PER_S", "DEFAULT_MAX_RATE_K_PER_S", "DEFAULT_FAULT_MARGIN_K", "DEFAULT_HEARTBEAT_TIMEOUT_S",
    "OV_LIMIT_SHIFT", "READBACK_SHIFT", "MIN_SUPPLY_FAULT_TICKS", "STATE_RUN", "STATE_OFF", "STATE_TRIPPED",
    "floor_div_pow2", "supply_fault_tolerance_v",
]

#: Input value meaning "this board has no such channel" (INT32_MIN).
ABSENT = -(1 << 31)
INT32_MAX = (1 << 31) - 1
U32_MASK = (1 << 32) - 1
#: Default bias slew limit, volt per second (a design choice of ours: slow enough for any filter, fast enough to start).
DEFAULT_SLEW_V_PER_S = 2.0
#: Default largest plausible rate of change of the temperature reading, kelvin per second (design choice).
DEFAULT_MAX_RATE_K_PER_S = 2.0
#: Default distance beyond the operating range at which a reading counts as a sensor fault, kelvin.
DEFAULT_FAULT_MARGIN_K = 20.0
#: Default heartbeat timeout, second.
DEFAULT_HEARTBEAT_TIMEOUT_S = 10.0
#: Fractional bits of the overvoltage limit's slope (levels per milli-kelvin).
OV_LIMIT_SHIFT = 24

#: Fractional bits of the expected bias read-back code (read-back codes per bias level).
READBACK_SHIFT = 16
#: Fewest consecutive ticks of disagreement before a supply fault latches.
MIN_SUPPLY_FAULT_TICKS = 3

#: Temperature differences are limited to this in the limit line (keeps the 64-bit product exact), milli-kelvin.
DT_CLAMP_MDEGC = 1 << 30

#: Outputs follow the request.
STATE_RUN = 0
#: Outputs disabled: bias ramping to (or at) the safe code, cooler off.
STATE_OFF = 1
#: A latched trip holds the safe state.
STATE_TRIPPED = 2


def floor_div_pow2(value: int, shift: int) -> int:
    """``floor(value / 2^shift)`` for a signed integer (what the C renders without relying on ``>>`` of negatives).

    Parameters
    ----------
    value : int
    shift : int
        Bits, 0..62.
    """
    return value >> shift


@dataclass(frozen=True, kw_only=True)
class InterlockLimits:
    """The integer constants of the interlocks (all derived from the profiles by :func:`build_interlock_limits`).

    Attributes
    ----------
    tick_ms : int
        Control period, millisecond.
    dac_full_scale : int
        Largest DAC code.
    bias_rises_with_code : bool
        Whether the supply output rises with the DAC code.
    safe_dac_code : int
        DAC code of the safe state.
    bias_limit_level : int
        Highest level allowed by the board's maximum bias (and the supply's limits).
    ov_limit_ref_mdegc : int
        Reference temperature of the overvoltage limit line, milli-degree Celsius.
    ov_limit_level_at_ref : int
        Level of the overvoltage limit at the reference temperature.
    ov_limit_slope_q : int
        Its slope in levels per milli-kelvin, times ``2^OV_LIMIT_SHIFT``.
    slew_levels_per_tick : int
        Largest change of the bias level per tick (at least 1).
    adc_fault_lo, adc_fault_hi : int
        Plausible temperature ADC codes (inclusive).
    adc_low_is_open : bool
        A code below ``adc_fault_lo`` means an open sensor (else a short).
    max_step_mdegc : int
        Largest plausible temperature change per tick, milli-kelvin.
    over_current_na : int
        SiPM current trip level, nanoampere.
    hot_side_max_mdegc : int
        Cooler hot-side limit, milli-degree Celsius (``INT32_MAX`` without a cooler).
    dew_margin_mdegc : int
        Margin above the dew point for the cold side, milli-kelvin.
    heartbeat_timeout_ms : int
        Host silence that trips ``HEARTBEAT_LOST`` (0: no watchdog).
    readback_at_level0_q : int
        Bias read-back code expected at level 0, times ``2^READBACK_SHIFT``.
    readback_per_level_q : int
        Read-back codes per bias level, times ``2^READBACK_SHIFT`` (0: no read-back channel).
    readback_min_code, readback_max_code : int
        Read-back codes of the supply's lowest and highest output (the expected code is clamped to them).
    supply_fault_codes : int
        Largest disagreement a healthy board shows, read-back codes.
    supply_fault_ticks : int
        Consecutive ticks beyond it that latch ``SUPPLY_FAULT`` (0: no read-back channel, no check).
    bias_v_at_level0 : float
        Supply output at level 0 (information for people and the board model), volt.
    volts_per_level : float
        Output change per level (positive), volt.
    safe_margin_v : float
        How far the safe code's output lies below the breakdown voltage at
        the coldest plausible temperature, volt (negative: the safe state
        does not switch the SiPM off; see :attr:`safe_findings`).
    """

    tick_ms: int
    dac_full_scale: int
    bias_rises_with_code: bool
    safe_dac_code: int
    bias_limit_level: int
    ov_limit_ref_mdegc: int
    ov_limit_level_at_ref: int
    ov_limit_slope_q: int
    slew_levels_per_tick: int
    adc_fault_lo: int
    adc_fault_hi: int
    adc_low_is_open: bool
    max_step_mdegc: int
    over_current_na: int
    hot_side_max_mdegc: int = INT32_MAX
    dew_margin_mdegc: int = 0
    heartbeat_timeout_ms: int = 0
    readback_at_level0_q: int = 0
    readback_per_level_q: int = 0
    readback_min_code: int = 0
    readback_max_code: int = 0
    supply_fault_codes: int = 0
    supply_fault_ticks: int = 0
    bias_v_at_level0: float = 0.0
    volts_per_level: float = 1.0
    safe_margin_v: float = float("inf")

    @property
    def safe_findings(self) -> list:
        """Warnings about the safe state (a ``Finding`` when the safe code leaves the SiPM above breakdown)."""
        if self.safe_margin_v > 0:
            return []
        return [Finding(code="safe_state_above_breakdown", severity=Severity.DANGER,
                        message=f"the board's safe_dac_code {self.safe_dac_code} leaves the bias "
                                f"{-self.safe_margin_v:.3f} V above the breakdown voltage at the coldest plausible "
                                "temperature: the safe state does not switch the SiPM off")]

    def __post_init__(self):
        checks = {
            "tick_ms": 1 <= self.tick_ms <= 60_000,
            "dac_full_scale": 1 <= self.dac_full_scale <= U32_MASK >> 1,
            "safe_dac_code": 0 <= self.safe_dac_code <= self.dac_full_scale,
            "bias_limit_level": 0 <= self.bias_limit_level <= self.dac_full_scale,
            "slew_levels_per_tick": 1 <= self.slew_levels_per_tick <= self.dac_full_scale,
            "adc_fault_lo": 0 <= self.adc_fault_lo <= self.adc_fault_hi,
            "max_step_mdegc": 0 <= self.max_step_mdegc <= INT32_MAX,
            "over_current_na": 0 <= self.over_current_na <= INT32_MAX,
            "heartbeat_timeout_ms": 0 <= self.heartbeat_timeout_ms <= INT32_MAX,
            "ov_limit_slope_q": abs(self.ov_limit_slope_q) <= INT32_MAX,
            "ov_limit_level_at_ref": abs(self.ov_limit_level_at_ref) <= INT32_MAX,
            "dew_margin_mdegc": 0 <= self.dew_margin_mdegc <= 100_000,
            "readback_at_level0_q": abs(self.readback_at_level0_q) <= 1 << 50,
            "readback_per_level_q": 0 <= self.readback_per_level_q <= INT32_MAX,
            "readback_min_code": 0 <= self.readback_min_code <= self.readback_max_code <= INT32_MAX,
            "supply_fault_codes": 0 <= self.supply_fault_codes <= INT32_MAX,
            "supply_fault_ticks": 0 <= self.supply_fault_ticks <= 65_535,
        }
        for key, ok in checks.items():
            if not ok:
                raise ModelError(f"{getattr(self, key)!r} is out of range", key=key)

    def level(self, dac_code: int) -> int:
        """Bias level of a DAC code (higher is more bias).

        Parameters
        ----------
        dac_code : int
        """
        return dac_code if self.bias_rises_with_code else self.dac_full_scale - dac_code

    def code(self, level: int) -> int:
        """DAC code of a bias level (the inverse of :meth:`level`).

        Parameters
        ----------
        level : int
        """
        return level if self.bias_rises_with_code else self.dac_full_scale - level

    def limit_level(self, temp_mdegc: int) -> int:
        """Highest bias level allowed at a measured temperature (board maximum and overvoltage line).

        Parameters
        ----------
        temp_mdegc : int
            Measured temperature, milli-degree Celsius.
        """
        dt = max(-DT_CLAMP_MDEGC, min(DT_CLAMP_MDEGC, temp_mdegc - self.ov_limit_ref_mdegc))
        ov = self.ov_limit_level_at_ref + floor_div_pow2(self.ov_limit_slope_q * dt, OV_LIMIT_SHIFT)
        return max(0, min(self.bias_limit_level, ov))

    def expected_readback_code(self, level: int) -> int:
        """Bias read-back code expected at a level (nominal supply and read-back, clamped to the output range).

        Parameters
        ----------
        level : int
        """
        q = self.readback_at_level0_q + self.readback_per_level_q * level
        code = floor_div_pow2(q + (1 << (READBACK_SHIFT - 1)), READBACK_SHIFT)
        return max(self.readback_min_code, min(self.readback_max_code, code))

    def level_bias_v(self, level) -> float:
        """Nominal supply output at a level, volt.

        Parameters
        ----------
        level : int or array_like
        """
        return self.bias_v_at_level0 + self.volts_per_level * np.asarray(level, dtype=float)


class InterlockInputs(NamedTuple):
    """What the firmware measured in one tick (integers; :data:`ABSENT` for a missing channel)."""

    now_ms: int
    adc_code: int
    temp_mdegc: int
    request_dac_code: int
    outputs_enabled: int
    last_host_ms: int
    sipm_current_na: int = ABSENT
    hot_side_mdegc: int = ABSENT
    cold_side_mdegc: int = ABSENT
    dew_point_mdegc: int = ABSENT
    cooler_request: int = 0
    bias_readback_code: int = ABSENT


class InterlockOutputs(NamedTuple):
    """What the firmware applies after one tick."""

    dac_code: int
    cooler_drive: int
    faults_live: int
    faults_latched: int
    state: int


@dataclass
class _State:
    level: int
    prev_temp_mdegc: int = 0
    have_prev: bool = False
    supply_count: int = 0
    live: int = 0
    latched: int = 0
    trip_ms: list = field(default_factory=lambda: [0] * 16)
    trip_value: list = field(default_factory=lambda: [0] * 16)


def _sat32(value: int) -> int:
    return max(-(1 << 31), min(INT32_MAX, value))


class Interlocks:
    """The interlocks' bit-exact reference: call :meth:`step` once per tick.

    Parameters
    ----------
    limits : InterlockLimits
    """

    def __init__(self, limits: InterlockLimits):
        if not isinstance(limits, InterlockLimits):
            raise ModelError(f"need InterlockLimits, got {type(limits).__name__}", key="limits")
        self.limits = limits
        self._s = _State(level=limits.level(limits.safe_dac_code))

    @property
    def faults_live(self) -> int:
        """Fault bits that held at the last tick."""
        return self._s.live

    @property
    def faults_latched(self) -> int:
        """Fault bits latched since the last clear."""
        return self._s.latched

    @property
    def dac_code(self) -> int:
        """DAC code applied at the last tick."""
        return self.limits.code(self._s.level)

    def trip_record(self, bit: int) -> tuple[int, int]:
        """When fault bit ``bit`` latched (``now_ms``) and the value that tripped it (0, 0 when not latched).

        Parameters
        ----------
        bit : int
            0..15.
        """
        return self._s.trip_ms[bit], self._s.trip_value[bit]

    def latch(self, flags: int, now_ms: int, value: int = 0) -> None:
        """Latch ``flags`` raised outside the tick (e.g. ``REQUEST_REFUSED`` by the command handler).

        Parameters
        ----------
        flags : int
            Fault bits.
        now_ms : int
            Time, millisecond (kept modulo 2^32).
        value : int
            The value to record with each newly latched bit (saturated to int32).
        """
        s = self._s
        flags = int(flags)  # plain int: ``~`` of an IntFlag keeps only the named bits
        new = flags & ~s.latched & 0xFFFF
        for bit in range(16):
            if new >> bit & 1:
                s.trip_ms[bit] = now_ms & U32_MASK
                s.trip_value[bit] = _sat32(value)
        s.latched |= flags & U32_MASK

    def clear(self, mask: int) -> int:
        """Clear the latched bits in ``mask`` whose cause is gone; return what stays latched.

        Parameters
        ----------
        mask : int
            Bits to clear.
        """
        s = self._s
        cleared = int(mask) & ~s.live & s.latched
        s.latched &= ~cleared & U32_MASK
        for bit in range(16):
            if cleared >> bit & 1:
                s.trip_ms[bit] = 0
                s.trip_value[bit] = 0
        return s.latched

    def step(self, inputs: InterlockInputs) -> InterlockOutputs:
        """One control tick (the bit-exact reference of ``NAME_step`` in C).

        Parameters
        ----------
        inputs : InterlockInputs

        Returns
        -------
        InterlockOutputs
        """
        lim, s = self.limits, self._s
        i = inputs
        live = 0
        values = {}

        def raise_flag(flag, value):
            nonlocal live
            live |= int(flag)
            values[int(flag)] = _sat32(value)

        if i.adc_code < lim.adc_fault_lo:
            raise_flag(FaultFlag.SENSOR_OPEN if lim.adc_low_is_open else FaultFlag.SENSOR_SHORT, i.adc_code)
            s.have_prev = False
        elif i.adc_code > lim.adc_fault_hi:
            raise_flag(FaultFlag.SENSOR_SHORT if lim.adc_low_is_open else FaultFlag.SENSOR_OPEN, i.adc_code)
            s.have_prev = False
        else:
            step_mdegc = i.temp_mdegc - s.prev_temp_mdegc
            if s.have_prev and abs(step_mdegc) > lim.max_step_mdegc:
                raise_flag(FaultFlag.SENSOR_RATE, step_mdegc)
            s.prev_temp_mdegc = i.temp_mdegc
            s.have_prev = True
        if i.sipm_current_na != ABSENT and i.sipm_current_na > lim.over_current_na:
            raise_flag(FaultFlag.OVER_CURRENT, i.sipm_current_na)
        if i.hot_side_mdegc != ABSENT and i.hot_side_mdegc > lim.hot_side_max_mdegc:
            raise_flag(FaultFlag.HOT_SIDE_OVER_TEMP, i.hot_side_mdegc)
        silence_ms = (i.now_ms - i.last_host_ms) & U32_MASK
        if lim.heartbeat_timeout_ms and i.outputs_enabled and silence_ms > lim.heartbeat_timeout_ms:
            raise_flag(FaultFlag.HEARTBEAT_LOST, silence_ms)
        if lim.supply_fault_ticks and i.bias_readback_code != ABSENT:
            # against the level applied over the last tick, which the supply has been told to hold
            off = i.bias_readback_code - lim.expected_readback_code(s.level)
            if abs(off) > lim.supply_fault_codes:
                s.supply_count = min(s.supply_count + 1, lim.supply_fault_ticks)
                if s.supply_count >= lim.supply_fault_ticks:
                    raise_flag(FaultFlag.SUPPLY_FAULT, off)
            else:
                s.supply_count = 0
        dew = (i.dew_point_mdegc != ABSENT and i.cold_side_mdegc != ABSENT
               and i.cold_side_mdegc < i.dew_point_mdegc + lim.dew_margin_mdegc)
        if dew:
            raise_flag(FaultFlag.DEW_POINT, i.cold_side_mdegc - i.dew_point_mdegc)

        tripped = (s.latched | live) & TRIP_FLAGS
        if tripped:
            state = STATE_TRIPPED
            s.level = lim.level(lim.safe_dac_code)
        else:
            if i.outputs_enabled:
                state = STATE_RUN
                target = lim.level(i.request_dac_code)
                top = lim.limit_level(i.temp_mdegc)
                if target > top:
                    raise_flag(FaultFlag.BIAS_LIMIT, target - top)
                    target = top
            else:
                state = STATE_OFF
                target = lim.level(lim.safe_dac_code)
            slew = lim.slew_levels_per_tick
            if target > s.level + slew:
                s.level += slew
            elif target < s.level - slew:
                s.level -= slew
            else:
                s.level = target
        cooler = i.cooler_request if state == STATE_RUN and not (dew and i.cooler_request > 0) else 0
        s.live = live
        for flag in sorted(values):
            self.latch(flag, i.now_ms, values[flag])
        return InterlockOutputs(lim.code(s.level), cooler, live, s.latched, state)


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
    with np.errstate(all="ignore"):
        x = channel.continuous_code(np.array([t_lo, t_hi]))
    x = np.where(np.isfinite(x), x, np.array([1.0, float(adc_full)]))
    fault_lo, fault_hi = max(1, int(np.floor(x.min()))), min(adc_full - 1, int(np.floor(x.max())))
    # A code below the band reads as a temperature beyond one end: open if an infinite resistance lands there.
    r_low_code = float(channel.front_end.continuous_code(1e12))
    adc_low_is_open = r_low_code < adc_full / 2

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
