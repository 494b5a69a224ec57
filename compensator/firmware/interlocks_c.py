"""C99 emission of the safety interlocks: a header and a source, bit-exact with :class:`~compensator.firmware.interlocks.Interlocks`.

Every operation is defined in C99: differences of temperatures and currents
are formed in ``int64_t``; the limit line's product is bounded by clamping the
temperature difference to +-2^30 (as the reference does); a negative value is
never right-shifted (the floor is restored from the magnitude); ``now_ms`` is
``uint32_t`` and the host silence is an unsigned difference, so the clock may
wrap. No dynamic memory, no floating point.
"""

from __future__ import annotations

from compensator.errors import ModelError
from compensator.fileio import write_files_atomic
from compensator.firmware.faults import TRIP_FLAGS, FaultFlag
from compensator.firmware.interlocks import DT_CLAMP_MDEGC, OV_LIMIT_SHIFT, READBACK_SHIFT, InterlockLimits
from compensator.firmware.pid_c import _check_name
from compensator.provenance import c_banner

__all__ = ["render_interlocks_c", "write_interlocks_c"]


def _i64(value: int) -> str:
    return f"INT64_C({int(value)})"


def _header(lim: InterlockLimits, name: str, banner: str) -> str:
    up = name.upper()
    flags = "\n".join(f"#define {up}_FAULT_{f.name} UINT32_C(0x{int(f):04X})" for f in FaultFlag if f)
    no_readback = "" if lim.supply_fault_ticks else (
        "\n * This board has no bias read-back channel: a supply fault cannot be detected.")
    return f"""{banner}
#ifndef {up}_H
#define {up}_H

#include <stdint.h>

/*
 * Safety interlocks, called once per control tick ({lim.tick_ms} ms).
 * CAUTION: a second line of defence in firmware only. Keep current, voltage
 * and temperature limits in hardware that does not depend on software, and
 * follow local codes and licensed practice (above 60 V dc is hazardous live,
 * IEC 61010-1; an unsinked cooler hot side runs away). A supply fault means
 * the DAC no longer controls the bias: the board needs a hardware path (an
 * enable line on the regulator, a load switch) that removes the bias.{no_readback}
 */

/* input value for a channel the board does not have */
#define {up}_ABSENT INT32_MIN

{flags}
#define {up}_TRIP_FLAGS UINT32_C(0x{int(TRIP_FLAGS):04X})

#define {up}_STATE_RUN 0
#define {up}_STATE_OFF 1
#define {up}_STATE_TRIPPED 2

#define {up}_TICK_MS {lim.tick_ms}u
#define {up}_DAC_FULL_SCALE {lim.dac_full_scale}u
#define {up}_SAFE_DAC_CODE {lim.safe_dac_code}u

typedef struct {{
    uint32_t now_ms;            /* free-running millisecond clock (may wrap) */
    uint32_t adc_code;          /* raw temperature ADC code */
    int32_t temp_mdegc;         /* temperature derived from it, milli-degree C */
    uint32_t request_dac_code;  /* what the law or the fixed bias asks for */
    uint8_t outputs_enabled;    /* host enabled the outputs */
    uint32_t last_host_ms;      /* now_ms of the last valid host frame */
    int32_t sipm_current_na;    /* or {up}_ABSENT */
    int32_t hot_side_mdegc;     /* or {up}_ABSENT */
    int32_t cold_side_mdegc;    /* or {up}_ABSENT */
    int32_t dew_point_mdegc;    /* or {up}_ABSENT (humidity unknown) */
    int32_t cooler_request;     /* cooler drive the loop asks for (positive cools) */
    int32_t bias_readback_code; /* bias read-back ADC code, or {up}_ABSENT (no channel: no supply check) */
}} {name}_inputs;

typedef struct {{
    uint32_t dac_code;          /* apply this to the bias DAC */
    int32_t cooler_drive;       /* apply this to the cooler (0: off) */
    uint32_t faults_live;
    uint32_t faults_latched;
    uint8_t state;              /* {up}_STATE_* */
}} {name}_outputs;

typedef struct {{
    int64_t level;
    int32_t prev_temp_mdegc;
    uint8_t have_prev;
    uint16_t supply_count;      /* consecutive ticks the bias read-back disagreed */
    uint32_t live;
    uint32_t latched;
    uint32_t trip_ms[16];
    int32_t trip_value[16];
}} {name}_state;

void {name}_init({name}_state *s);
void {name}_step({name}_state *s, const {name}_inputs *in, {name}_outputs *out);
/* latch flags raised outside the tick (e.g. a refused request) */
void {name}_latch({name}_state *s, uint32_t flags, uint32_t now_ms, int64_t value);
/* clear latched bits in mask whose cause is gone; returns what stays latched */
uint32_t {name}_clear({name}_state *s, uint32_t mask);
/* highest DAC level (bias order) allowed at a temperature */
int64_t {name}_limit_level(int32_t temp_mdegc);
int64_t {name}_level_of_code(uint32_t dac_code);
uint32_t {name}_code_of_level(int64_t level);
/* bias read-back code expected at a level (nominal supply and read-back) */
int64_t {name}_expected_readback(int64_t level);

#endif /* {up}_H */
"""


def _supply_check(lim: InterlockLimits, name: str, up: str) -> str:
    """The supply-fault rule of the step (nothing without a read-back channel)."""
    if not lim.supply_fault_ticks:
        return "    /* no bias read-back channel: a supply fault cannot be detected */\n"
    bit = int(FaultFlag.SUPPLY_FAULT).bit_length() - 1
    return f"""    if (in->bias_readback_code != {up}_ABSENT) {{
        /* against the level applied over the last tick, which the supply has been told to hold */
        int64_t off = (int64_t)in->bias_readback_code - {name}_expected_readback(s->level);
        if (off > SUPPLY_FAULT_CODES || -off > SUPPLY_FAULT_CODES) {{
            if (s->supply_count < SUPPLY_FAULT_TICKS) s->supply_count++;
            if (s->supply_count >= SUPPLY_FAULT_TICKS) {{
                live |= {up}_FAULT_SUPPLY_FAULT;
                value[{bit}] = off;
            }}
        }} else {{
            s->supply_count = 0u;
        }}
    }}
"""


def _source(lim: InterlockLimits, name: str, banner: str) -> str:
    up = name.upper()
    rises = lim.bias_rises_with_code
    level_of = "(int64_t)dac_code" if rises else f"(int64_t){up}_DAC_FULL_SCALE - (int64_t)dac_code"
    code_of = "(uint32_t)level" if rises else f"(uint32_t)((int64_t){up}_DAC_FULL_SCALE - level)"
    f = FaultFlag
    sensor_low = f"{up}_FAULT_{'SENSOR_OPEN' if lim.adc_low_is_open else 'SENSOR_SHORT'}"
    sensor_high = f"{up}_FAULT_{'SENSOR_SHORT' if lim.adc_low_is_open else 'SENSOR_OPEN'}"
    return f"""{banner}
#include "{name}.h"

#define ADC_FAULT_LO {lim.adc_fault_lo}u
#define ADC_FAULT_HI {lim.adc_fault_hi}u
#define BIAS_LIMIT_LEVEL {_i64(lim.bias_limit_level)}
#define OV_REF_MDEGC {_i64(lim.ov_limit_ref_mdegc)}
#define OV_LEVEL_AT_REF {_i64(lim.ov_limit_level_at_ref)}
#define OV_SLOPE_Q {_i64(lim.ov_limit_slope_q)}
#define OV_SHIFT {OV_LIMIT_SHIFT}
#define DT_CLAMP {_i64(DT_CLAMP_MDEGC)}
#define SLEW_LEVELS {_i64(lim.slew_levels_per_tick)}
#define MAX_STEP_MDEGC {_i64(lim.max_step_mdegc)}
#define OVER_CURRENT_NA INT32_C({lim.over_current_na})
#define HOT_SIDE_MAX_MDEGC INT32_C({lim.hot_side_max_mdegc})
#define DEW_MARGIN_MDEGC {_i64(lim.dew_margin_mdegc)}
#define HEARTBEAT_TIMEOUT_MS UINT32_C({lim.heartbeat_timeout_ms})
#define RB_AT_LEVEL0_Q {_i64(lim.readback_at_level0_q)}
#define RB_PER_LEVEL_Q {_i64(lim.readback_per_level_q)}
#define RB_SHIFT {READBACK_SHIFT}
#define RB_MIN_CODE {_i64(lim.readback_min_code)}
#define RB_MAX_CODE {_i64(lim.readback_max_code)}
#define SUPPLY_FAULT_CODES {_i64(lim.supply_fault_codes)}
#define SUPPLY_FAULT_TICKS {lim.supply_fault_ticks}u

static int64_t floor_shift(int64_t p, int k)
{{
    /* floor(p / 2^k) without right-shifting a negative value */
    return p >= 0 ? (int64_t)((uint64_t)p >> k)
                  : -(int64_t)(((uint64_t)(-p) + ((UINT64_C(1) << k) - 1u)) >> k);
}}

static int32_t sat32(int64_t v)
{{
    return v > INT32_MAX ? INT32_MAX : (v < INT32_MIN ? INT32_MIN : (int32_t)v);
}}

int64_t {name}_expected_readback(int64_t level)
{{
    int64_t code = floor_shift(RB_AT_LEVEL0_Q + RB_PER_LEVEL_Q * level + (INT64_C(1) << (RB_SHIFT - 1)), RB_SHIFT);
    if (code < RB_MIN_CODE) code = RB_MIN_CODE;
    return code > RB_MAX_CODE ? RB_MAX_CODE : code;
}}

int64_t {name}_level_of_code(uint32_t dac_code)
{{
    return {level_of};
}}

uint32_t {name}_code_of_level(int64_t level)
{{
    return {code_of};
}}

int64_t {name}_limit_level(int32_t temp_mdegc)
{{
    int64_t dt = (int64_t)temp_mdegc - OV_REF_MDEGC;
    int64_t ov;
    if (dt > DT_CLAMP) dt = DT_CLAMP;
    if (dt < -DT_CLAMP) dt = -DT_CLAMP;
    ov = OV_LEVEL_AT_REF + floor_shift(OV_SLOPE_Q * dt, OV_SHIFT);
    if (ov > BIAS_LIMIT_LEVEL) ov = BIAS_LIMIT_LEVEL;
    return ov < 0 ? 0 : ov;
}}

void {name}_init({name}_state *s)
{{
    int b;
    s->level = {name}_level_of_code({up}_SAFE_DAC_CODE);
    s->prev_temp_mdegc = 0;
    s->have_prev = 0u;
    s->supply_count = 0u;
    s->live = 0u;
    s->latched = 0u;
    for (b = 0; b < 16; ++b) {{
        s->trip_ms[b] = 0u;
        s->trip_value[b] = 0;
    }}
}}

void {name}_latch({name}_state *s, uint32_t flags, uint32_t now_ms, int64_t value)
{{
    uint32_t fresh = flags & ~s->latched & UINT32_C(0xFFFF);
    int b;
    for (b = 0; b < 16; ++b) {{
        if ((fresh >> b) & 1u) {{
            s->trip_ms[b] = now_ms;
            s->trip_value[b] = sat32(value);
        }}
    }}
    s->latched |= flags;
}}

uint32_t {name}_clear({name}_state *s, uint32_t mask)
{{
    uint32_t cleared = mask & ~s->live & s->latched;
    int b;
    s->latched &= ~cleared;
    for (b = 0; b < 16; ++b) {{
        if ((cleared >> b) & 1u) {{
            s->trip_ms[b] = 0u;
            s->trip_value[b] = 0;
        }}
    }}
    return s->latched;
}}

void {name}_step({name}_state *s, const {name}_inputs *in, {name}_outputs *out)
{{
    uint32_t live = 0u;
    int64_t value[16];
    uint32_t silence;
    int dew;
    int b;
    uint8_t state;
    for (b = 0; b < 16; ++b) value[b] = 0;

    if (in->adc_code < ADC_FAULT_LO) {{
        live |= {sensor_low};
        value[{(int(f.SENSOR_OPEN) if lim.adc_low_is_open else int(f.SENSOR_SHORT)).bit_length() - 1}] = (int64_t)in->adc_code;
        s->have_prev = 0u;
    }} else if (in->adc_code > ADC_FAULT_HI) {{
        live |= {sensor_high};
        value[{(int(f.SENSOR_SHORT) if lim.adc_low_is_open else int(f.SENSOR_OPEN)).bit_length() - 1}] = (int64_t)in->adc_code;
        s->have_prev = 0u;
    }} else {{
        int64_t step = (int64_t)in->temp_mdegc - (int64_t)s->prev_temp_mdegc;
        if (s->have_prev && (step > MAX_STEP_MDEGC || -step > MAX_STEP_MDEGC)) {{
            live |= {up}_FAULT_SENSOR_RATE;
            value[{int(f.SENSOR_RATE).bit_length() - 1}] = step;
        }}
        s->prev_temp_mdegc = in->temp_mdegc;
        s->have_prev = 1u;
    }}
    if (in->sipm_current_na != {up}_ABSENT && in->sipm_current_na > OVER_CURRENT_NA) {{
        live |= {up}_FAULT_OVER_CURRENT;
        value[{int(f.OVER_CURRENT).bit_length() - 1}] = in->sipm_current_na;
    }}
    if (in->hot_side_mdegc != {up}_ABSENT && in->hot_side_mdegc > HOT_SIDE_MAX_MDEGC) {{
        live |= {up}_FAULT_HOT_SIDE_OVER_TEMP;
        value[{int(f.HOT_SIDE_OVER_TEMP).bit_length() - 1}] = in->hot_side_mdegc;
    }}
    silence = in->now_ms - in->last_host_ms;
    if (HEARTBEAT_TIMEOUT_MS != 0u && in->outputs_enabled && silence > HEARTBEAT_TIMEOUT_MS) {{
        live |= {up}_FAULT_HEARTBEAT_LOST;
        value[{int(f.HEARTBEAT_LOST).bit_length() - 1}] = (int64_t)silence;
    }}
{_supply_check(lim, name, up)}    dew = in->dew_point_mdegc != {up}_ABSENT && in->cold_side_mdegc != {up}_ABSENT
          && (int64_t)in->cold_side_mdegc < (int64_t)in->dew_point_mdegc + DEW_MARGIN_MDEGC;
    if (dew) {{
        live |= {up}_FAULT_DEW_POINT;
        value[{int(f.DEW_POINT).bit_length() - 1}] = (int64_t)in->cold_side_mdegc - (int64_t)in->dew_point_mdegc;
    }}

    if ((s->latched | live) & {up}_TRIP_FLAGS) {{
        state = {up}_STATE_TRIPPED;
        s->level = {name}_level_of_code({up}_SAFE_DAC_CODE);
    }} else {{
        int64_t target;
        if (in->outputs_enabled) {{
            int64_t top = {name}_limit_level(in->temp_mdegc);
            state = {up}_STATE_RUN;
            target = {name}_level_of_code(in->request_dac_code);
            if (target > top) {{
                live |= {up}_FAULT_BIAS_LIMIT;
                value[{int(f.BIAS_LIMIT).bit_length() - 1}] = target - top;
                target = top;
            }}
        }} else {{
            state = {up}_STATE_OFF;
            target = {name}_level_of_code({up}_SAFE_DAC_CODE);
        }}
        if (target > s->level + SLEW_LEVELS) {{
            s->level += SLEW_LEVELS;
        }} else if (target < s->level - SLEW_LEVELS) {{
            s->level -= SLEW_LEVELS;
        }} else {{
            s->level = target;
        }}
    }}
    /* near the dew point the cooler may heat (move away from condensation) but not cool */
    out->cooler_drive = (state == {up}_STATE_RUN && !(dew && in->cooler_request > 0)) ? in->cooler_request : 0;
    s->live = live;
    for (b = 0; b < 16; ++b) {{
        if ((live >> b) & 1u) {{
            {name}_latch(s, UINT32_C(1) << b, in->now_ms, value[b]);
        }}
    }}
    out->dac_code = {name}_code_of_level(s->level);
    out->faults_live = live;
    out->faults_latched = s->latched;
    out->state = state;
}}
"""


def render_interlocks_c(limits: InterlockLimits, *, name: str = "interlocks", profiles=(),
                        settings: dict | None = None) -> dict[str, str]:
    """Render the interlocks as a C99 header and source.

    Parameters
    ----------
    limits : InterlockLimits
        From :func:`compensator.firmware.interlocks.build_interlock_limits`.
    name : str
        Prefix of every C symbol and the file stem (lower-case C identifier).
    profiles : sequence of profile objects
        Named with their hashes in the banner.
    settings : dict, optional
        Options that shaped the limits (written in the banner).

    Returns
    -------
    dict of str to str
        ``{"<name>.h": text, "<name>.c": text}``; deterministic.

    Raises
    ------
    ModelError
        ``name`` is not a valid identifier or ``limits`` has the wrong type.
    """
    _check_name(name)
    if not isinstance(limits, InterlockLimits):
        raise ModelError(f"need InterlockLimits, got {type(limits).__name__}", key="limits")
    profiles = tuple(profiles)
    return {
        f"{name}.h": _header(limits, name, c_banner(f"safety interlocks {name}: declarations", profiles, settings)),
        f"{name}.c": _source(limits, name, c_banner(f"safety interlocks {name}: tick function", profiles, settings)),
    }


def write_interlocks_c(limits: InterlockLimits, directory, *, name: str = "interlocks", profiles=(),
                       settings: dict | None = None, overwrite: bool = False):
    """Render the interlock C files and write them into ``directory`` (all or nothing).

    Parameters
    ----------
    limits, name, profiles, settings
        As for :func:`render_interlocks_c`.
    directory : str or path-like
        Created when missing.
    overwrite : bool
        Replace existing files.

    Returns
    -------
    list of Path
    """
    return write_files_atomic(directory, render_interlocks_c(limits, name=name, profiles=profiles,
                                                             settings=settings), overwrite=overwrite,
                              what="C output")
