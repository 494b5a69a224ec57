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

from compensator._lazy import lazy_exports
from compensator.errors import ModelError
from compensator.findings import Finding, Severity
from compensator.firmware.faults import TRIP_FLAGS, FaultFlag

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


# The limits built from the profiles live in their own module (which imports this one); their names stay
# importable from here, loaded on first use so that either module may be imported first.
__getattr__ = lazy_exports(globals(), {
    "build_interlock_limits": "compensator.firmware.interlock_limits",
    "supply_fault_tolerance_v": "compensator.firmware.interlock_limits",
})
