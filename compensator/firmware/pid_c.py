"""C99 emission of the fixed-point PID: a header and a source file.

The generated code does exactly what :class:`compensator.firmware.pid.FixedPid`
does, bit for bit: the same Q formats, the same round-half-up right shift and
the same saturation. It is written so that every operation is well defined in
C99: products are formed in ``int64_t`` and stay below 2^63 by construction
(inputs saturated to +-2^24, mantissas at most 2^30, state int32), a negative
value is never right-shifted (the rounding helper shifts a non-negative
magnitude and restores the floor), and no signed value is left-shifted.

Only the branch of the selected anti-windup mode and, when set, the rate
limit are emitted, so the code has no dead paths. Output is deterministic:
the same coefficients, name, profiles and settings give the same text.
"""

from __future__ import annotations

import re

from compensator.errors import ModelError
from compensator.firmware.c_names import check_function_name
from compensator.firmware.fixed_point import c_floor_shift_function, c_int_literal
from compensator.provenance import c_banner
from compensator.firmware.pid_coefficients import MANTISSA_LIMIT_32, MAX_SHIFT_32, STATE_LIMIT_32
from compensator.firmware.pid import (
    MANTISSA_LIMIT,
    MAX_SHIFT,
    MAX_STATE_FRAC_BITS,
    FixedPidCoefficients,
)

__all__ = ["render_pid_c"]

_NAME_RE = re.compile(r"^[a-z][a-z0-9_]{0,30}$")


def _check_name(name: str) -> None:
    if not isinstance(name, str) or not _NAME_RE.match(name):
        raise ModelError(f"name {name!r}: must be a C identifier of at most 31 lower-case letters, "
                         f"digits and underscores, starting with a letter", key="name")
    check_function_name(name)


def _i32(value: int) -> str:
    return c_int_literal(value, 32)


def _g(value: float) -> str:
    return format(value, ".9g")


_ARITHMETIC_64 = (
    " * Products: a 30-bit mantissa times a value formed in int64_t, then a right",
    " * shift rounding half up (ties toward +infinity); shifts never apply to",
    " * negative values. These 64-bit intermediates are library calls on a core",
    " * without a 64-bit multiply (the 32-bit variant avoids them when the Q",
    " * formats allow it).",
)

_ARITHMETIC_32 = (
    " * Arithmetic: 32-bit operations only, no 64-bit multiply or shift. Each",
    " * product of a 15-bit mantissa and a value is split into 16-bit halves and",
    " * rounded half up (ties toward +infinity) exactly as the one-product",
    " * definition; P, D and the integrator stay within +-2^28 by construction.",
)


def _header(c: FixedPidCoefficients, name: str, banner: str) -> str:
    up = name.upper()
    f = c.state_frac_bits
    rep = c.represented()
    period_us = round(c.sample_time_s * 1e6)
    exact = abs(period_us - c.sample_time_s * 1e6) < 1e-6
    mode_text = {"back_calculation": "back-calculation (tracking)", "clamping": "clamping (conditional integration)",
                 "none": "none"}[c.anti_windup]
    lines = [
        banner.rstrip("\n"),
        f"#ifndef {up}_H",
        f"#define {up}_H",
        "",
        "#include <stdint.h>",
        "",
        "/*",
        " * Fixed-point PID, one call per sample period:",
        " *   P = kp (b r - y); D = ad D - bd (y - y_prev); v = P + I + D;",
        " *   u = clip(v, limits) (manual: the target); u = clip(u, u_prev +- rate step);",
        f" *   anti-windup: {mode_text}; manual mode: I = u - P - D (bumpless return).",
        " * Call it exactly once every SAMPLE_PERIOD_US: the coefficients hold the period.",
        " * Inputs: int32 counts saturated to +-INPUT_LIMIT_COUNT.",
        f" * State: int32 in Q{31 - f}.{f} output counts (STATE_FRAC_BITS fraction bits).",
        *(_ARITHMETIC_64 if c.word_bits == 64 else _ARITHMETIC_32),
        f" * Sample period {_g(c.sample_time_s)} s; input {_g(c.input_per_count)} unit/count;"
        f" output {_g(c.output_per_count)} unit/count.",
        (f" * Integrator dead band: errors below {_g(c.integrator_deadband_count)} input counts do not integrate."
         if c.ki_mant else " * No integral action: the integrator holds the reset value set by bumpless transfer."),
        " *",
        " * Caution: this code drives a bias supply or a cooler. Keep independent",
        " * hardware limits (current, voltage, temperature, dew point) that do not",
        " * rely on it, and follow local codes and licensed practice for bias",
        " * voltages of tens of volts.",
        " */",
        f"#define {up}_SAMPLE_PERIOD_US {period_us}u /* {_g(c.sample_time_s)} s{'' if exact else ', rounded'} */",
        f"#define {up}_STATE_FRAC_BITS {f}u",
        f"#define {up}_WORD_BITS {c.word_bits}u /* widest integer operation used */",
        f"#define {up}_INPUT_LIMIT_COUNT {_i32(c.input_limit_count)}",
        *([f"#define {up}_INTEGRATOR_LIMIT_Q {_i32(c.integrator_limit_q)} /* integrator saturates here */"]
          if c.word_bits == 32 else []),
        f"#define {up}_OUT_MIN_COUNT {_i32(c.out_min_count)}",
        f"#define {up}_OUT_MAX_COUNT {_i32(c.out_max_count)}",
        f"#define {up}_ANTI_WINDUP {c.anti_windup_code}u /* 0 back-calculation, 1 clamping, 2 none */",
        "",
        "/* Pre-multiplied coefficients: value = MANT * 2^-(SHIFT [+ STATE_FRAC_BITS for count gains]). */",
        f"#define {up}_KP_MANT {_i32(c.kp_mant)} /* kp = {_g(rep['kp_count'])} out/in count */",
        f"#define {up}_KPB_MANT {_i32(c.kpb_mant)} /* kp b = {_g(rep['kpb_count'])} out/in count */",
        f"#define {up}_P_SHIFT {c.p_shift}u",
        f"#define {up}_KI_MANT {_i32(c.ki_mant)} /* ki h = {_g(rep['ki_count'])} out/in count per step */",
        f"#define {up}_KI_SHIFT {c.ki_shift}u",
        f"#define {up}_AD_MANT {_i32(c.ad_mant)} /* ad = {_g(rep['ad'])} */",
        f"#define {up}_AD_SHIFT {c.ad_shift}u",
        f"#define {up}_BD_MANT {_i32(c.bd_mant)} /* bd = {_g(rep['bd_count'])} out/in count */",
        f"#define {up}_BD_SHIFT {c.bd_shift}u",
        f"#define {up}_TRACK_MANT {_i32(c.track_mant)} /* ao = h/Tt = {_g(rep['track'])} */",
        f"#define {up}_TRACK_SHIFT {c.track_shift}u",
        f"#define {up}_RATE_STEP_Q {_i32(c.rate_step_q)} /* "
        + (f"{_g(rep['rate_step_count'])} count per step */" if c.rate_step_q else "0: no rate limit */"),
        "",
        "#ifdef __cplusplus",
        'extern "C" {',
        "#endif",
        "",
        "/* Controller state; initialise with " + f"{name}_init() or {name}_init_at(). */",
        "typedef struct {",
        "    int32_t integrator_q;           /* I, Q.F output counts */",
        "    int32_t derivative_q;           /* filtered D, Q.F output counts */",
        "    int32_t output_q;               /* last output u, Q.F output counts */",
        "    int32_t manual_target_q;        /* manual target, Q.F output counts */",
        "    int32_t last_measurement_count; /* y_prev, input counts */",
        "    uint8_t manual;                 /* 1 in manual mode */",
        "    uint8_t primed;                 /* 1 after the first step */",
        "    uint8_t have_output;            /* 1 once an output exists (rate limit applies) */",
        f"}} {name}_state_t;",
        "",
        "/* Clear the state, automatic mode; the first step is not rate-limited. */",
        f"void {name}_init({name}_state_t *state);",
        "/* Clear the state, automatic mode; the first step outputs output_count (bumpless start). */",
        f"void {name}_init_at({name}_state_t *state, int32_t output_count);",
        "/* One sample period: returns the output count, within the limits. */",
        f"int32_t {name}_step({name}_state_t *state, int32_t setpoint_count, int32_t measurement_count);",
        "/* Manual mode with a target (clipped to the limits, approached at the rate limit). */",
        f"void {name}_set_manual({name}_state_t *state, int32_t output_count);",
        "/* Automatic mode (bumpless: the integrator tracked the manual output). */",
        f"void {name}_set_auto({name}_state_t *state);",
        "/* The last output in counts (pass it to set_manual for a bumpless switch). */",
        f"int32_t {name}_output_count(const {name}_state_t *state);",
        "",
        "#ifdef __cplusplus",
        "}",
        "#endif",
        "",
        f"#endif /* {up}_H */",
        "",
    ]
    return "\n".join(lines)


def _common_functions(n: str, up: str, output_count: str) -> list:
    """init, init_at, set_manual, set_auto and output_count: the same in both word widths."""
    return [
        "",
        f"void {n}_init({n}_state_t *state)",
        "{",
        "    state->integrator_q = 0;",
        "    state->derivative_q = 0;",
        "    state->output_q = 0;",
        "    state->manual_target_q = 0;",
        "    state->last_measurement_count = 0;",
        "    state->manual = 0u;",
        "    state->primed = 0u;",
        "    state->have_output = 0u;",
        "}",
        "",
        f"void {n}_init_at({n}_state_t *state, int32_t output_count)",
        "{",
        f"    {n}_init(state);",
        f"    state->output_q = {n}_limit_q(output_count);",
        "    state->have_output = 1u;",
        "}",
        "",
        f"void {n}_set_manual({n}_state_t *state, int32_t output_count)",
        "{",
        f"    state->manual_target_q = {n}_limit_q(output_count);",
        "    state->manual = 1u;",
        "}",
        "",
        f"void {n}_set_auto({n}_state_t *state)",
        "{",
        "    state->manual = 0u;",
        "}",
        "",
        f"int32_t {n}_output_count(const {n}_state_t *state)",
        "{",
        f"    return {output_count};",
        "}",
    ]


def _source(c: FixedPidCoefficients, name: str, banner: str) -> str:
    up = name.upper()
    n = name
    assert_lines = _static_checks(c, n, up, MANTISSA_LIMIT, MAX_SHIFT, [("int64_width", "sizeof(int64_t) == 8")])

    if c.anti_windup == "back_calculation":
        integrate = [
            f"        int64_t track = {n}_rshift_round((int64_t){up}_TRACK_MANT * (u - v), {up}_TRACK_SHIFT);",
            f"        state->integrator_q = {n}_sat32((int64_t)state->integrator_q + inc + track);",
        ]
    elif c.anti_windup == "clamping":
        integrate = [
            "        /* conditional integration: hold while limited and the error drives further */",
            "        if (!((v > u && inc > 0) || (v < u && inc < 0))) {",
            f"            state->integrator_q = {n}_sat32((int64_t)state->integrator_q + inc);",
            "        }",
        ]
    else:
        integrate = [f"        state->integrator_q = {n}_sat32((int64_t)state->integrator_q + inc);"]
    if c.rate_step_q:
        rate = [
            "    if (state->have_output) {",
            "        int64_t prev = (int64_t)state->output_q;",
            f"        u = {n}_clamp64(u, prev - (int64_t){up}_RATE_STEP_Q, prev + (int64_t){up}_RATE_STEP_Q);",
            "    }",
        ]
    else:
        rate = ["    /* no rate limit */"]

    body = [
        banner.rstrip("\n"),
        f'#include "{n}.h"',
        "",
        *assert_lines,
        "",
        *c_floor_shift_function(f"{n}_floor_shift", "int64_t").rstrip("\n").split("\n"),
        "",
        "/* floor((x + 2^(shift-1)) / 2^shift): round half up; |x| < 2^62 by construction. */",
        f"static int64_t {n}_rshift_round(int64_t x, unsigned int shift)",
        "{",
        "    if (shift == 0u) {",
        "        return x;",
        "    }",
        f"    return {n}_floor_shift(x + ((int64_t)1 << (shift - 1u)), shift);",
        "}",
        "",
        f"static int32_t {n}_sat32(int64_t x)",
        "{",
        "    if (x > (int64_t)INT32_MAX) {",
        "        return INT32_MAX;",
        "    }",
        "    if (x < (int64_t)INT32_MIN) {",
        "        return INT32_MIN;",
        "    }",
        "    return (int32_t)x;",
        "}",
        "",
        f"static int64_t {n}_clamp64(int64_t x, int64_t lo, int64_t hi)",
        "{",
        "    return x < lo ? lo : (x > hi ? hi : x);",
        "}",
        "",
        "/* A count clipped to the output limits, in Q.F (exact: the limits leave head room). */",
        f"static int32_t {n}_limit_q(int32_t count)",
        "{",
        f"    int64_t clipped = {n}_clamp64((int64_t)count, (int64_t){up}_OUT_MIN_COUNT, (int64_t){up}_OUT_MAX_COUNT);",
        f"    return (int32_t)(clipped * ((int64_t)1 << {up}_STATE_FRAC_BITS));",
        "}",
        "",
        *_common_functions(n, up, f"(int32_t){n}_rshift_round((int64_t)state->output_q, {up}_STATE_FRAC_BITS)"),
        "",
        f"int32_t {n}_step({n}_state_t *state, int32_t setpoint_count, int32_t measurement_count)",
        "{",
        f"    const int64_t lo_q = (int64_t){up}_OUT_MIN_COUNT * ((int64_t)1 << {up}_STATE_FRAC_BITS);",
        f"    const int64_t hi_q = (int64_t){up}_OUT_MAX_COUNT * ((int64_t)1 << {up}_STATE_FRAC_BITS);",
        f"    int64_t r = {n}_clamp64((int64_t)setpoint_count, -(int64_t){up}_INPUT_LIMIT_COUNT,"
        f" (int64_t){up}_INPUT_LIMIT_COUNT);",
        f"    int64_t y = {n}_clamp64((int64_t)measurement_count, -(int64_t){up}_INPUT_LIMIT_COUNT,"
        f" (int64_t){up}_INPUT_LIMIT_COUNT);",
        "    int64_t p;",
        "    int64_t d;",
        "    int64_t v;",
        "    int64_t u;",
        "",
        "    if (!state->primed) {",
        "        state->last_measurement_count = (int32_t)y;",
        "    }",
        f"    p = {n}_rshift_round((int64_t){up}_KPB_MANT * r - (int64_t){up}_KP_MANT * y, {up}_P_SHIFT);",
        f"    d = (int64_t){n}_sat32({n}_rshift_round((int64_t){up}_AD_MANT * (int64_t)state->derivative_q,"
        f" {up}_AD_SHIFT)",
        f"                          - {n}_rshift_round((int64_t){up}_BD_MANT * (y - (int64_t)state->last_measurement_count),"
        f" {up}_BD_SHIFT));",
        "    if (!state->primed && state->have_output && !state->manual) {",
        "        /* bumpless start from init_at(): the first output is the given one */",
        f"        state->integrator_q = {n}_sat32((int64_t)state->output_q - p - d);",
        "    }",
        f"    v = (int64_t){n}_sat32(p + (int64_t)state->integrator_q + d);",
        "    if (state->manual) {",
        "        u = (int64_t)state->manual_target_q;",
        "    } else {",
        f"        u = {n}_clamp64(v, lo_q, hi_q);",
        "    }",
        *rate,
        "    if (state->manual) {",
        "        /* tracking for a bumpless return to automatic */",
        f"        state->integrator_q = {n}_sat32(u - p - d);",
        "    } else {",
        f"        int64_t inc = {n}_rshift_round((int64_t){up}_KI_MANT * (r - y), {up}_KI_SHIFT);",
        *integrate,
        "    }",
        "    state->derivative_q = (int32_t)d;",
        "    state->output_q = (int32_t)u;",
        "    state->last_measurement_count = (int32_t)y;",
        "    state->primed = 1u;",
        "    state->have_output = 1u;",
        f"    return (int32_t){n}_rshift_round(u, {up}_STATE_FRAC_BITS);",
        "}",
        "",
    ]
    return "\n".join(body)


def _static_checks(c: FixedPidCoefficients, n: str, up: str, mant_limit: int, max_shift: int, extra) -> list:
    checks = [
        ("frac_bits", f"{up}_STATE_FRAC_BITS <= {MAX_STATE_FRAC_BITS}u"),
        ("limits_order", f"{up}_OUT_MIN_COUNT <= {up}_OUT_MAX_COUNT"),
        ("limits_range", f"{up}_OUT_MAX_COUNT <= (INT32_MAX >> {up}_STATE_FRAC_BITS) && "
                         f"{up}_OUT_MIN_COUNT >= -(INT32_MAX >> {up}_STATE_FRAC_BITS)"),
    ]
    for key in ("KP", "KPB", "KI", "AD", "BD", "TRACK"):
        checks.append((f"{key.lower()}_mant", f"{up}_{key}_MANT <= {mant_limit} && "
                                              f"{up}_{key}_MANT >= -{mant_limit}"))
    for key in ("P", "KI", "AD", "BD", "TRACK"):
        checks.append((f"{key.lower()}_shift", f"{up}_{key}_SHIFT <= {max_shift}u"))
    checks.append(("rate_step", f"{up}_RATE_STEP_Q >= 0"))
    checks += extra
    lines = [
        "/* Compile-time checks: C11 _Static_assert, or a negative array size in C99. */",
        "#if defined(__STDC_VERSION__) && __STDC_VERSION__ >= 201112L",
    ]
    lines += [f'_Static_assert({expr}, "{n}: {tag}");' for tag, expr in checks]
    lines.append("#else")
    lines += [f"typedef char {n}_check_{tag}[({expr}) ? 1 : -1];" for tag, expr in checks]
    lines.append("#endif")
    return lines


def _source_32(c: FixedPidCoefficients, name: str, banner: str) -> str:
    """The 32-bit-only variant: the same algorithm as :func:`_source` with exact split products."""
    up, n = name.upper(), name
    lim = f"{up}_INTEGRATOR_LIMIT_Q"
    checks = _static_checks(c, n, up, MANTISSA_LIMIT_32, MAX_SHIFT_32, [
        ("limits_q", f"{up}_OUT_MAX_COUNT <= (INT32_C(1) << (27 - {up}_STATE_FRAC_BITS)) && "
                     f"{up}_OUT_MIN_COUNT >= -(INT32_C(1) << (27 - {up}_STATE_FRAC_BITS))"),
        ("integrator_limit", f"{lim} <= INT32_C({STATE_LIMIT_32})"),
        ("rate_step_32", f"{up}_RATE_STEP_Q <= INT32_C({STATE_LIMIT_32})"),
        ("input_limit", f"{up}_INPUT_LIMIT_COUNT <= INT32_C({1 << 24})"),
        ("kp_signs", f"({up}_KP_MANT >= 0) == ({up}_KPB_MANT >= 0) || {up}_KP_MANT == 0 || {up}_KPB_MANT == 0"),
    ])
    if c.anti_windup == "back_calculation":
        integrate = [
            f"        const int32_t track = {n}_mul_shift({up}_TRACK_MANT, u - v, 0, 0, {up}_TRACK_SHIFT);",
            f"        state->integrator_q = {n}_clamp(state->integrator_q + inc + track, -{lim}, {lim});",
        ]
    elif c.anti_windup == "clamping":
        integrate = [
            "        /* conditional integration: hold while limited and the error drives further */",
            "        if (!((v > u && inc > 0) || (v < u && inc < 0))) {",
            f"            state->integrator_q = {n}_clamp(state->integrator_q + inc, -{lim}, {lim});",
            "        }",
        ]
    else:
        integrate = [f"        state->integrator_q = {n}_clamp(state->integrator_q + inc, -{lim}, {lim});"]
    rate = ([
        "    if (state->have_output) {",
        "        const int32_t prev = state->output_q;",
        f"        u = {n}_clamp(u, prev - {up}_RATE_STEP_Q, prev + {up}_RATE_STEP_Q);",
        "    }",
    ] if c.rate_step_q else ["    /* no rate limit */"])
    body = [
        banner.rstrip("\n"),
        f'#include "{n}.h"',
        "",
        *checks,
        "",
        *c_floor_shift_function(f"{n}_floor_shift", "int32_t").rstrip("\n").split("\n"),
        "",
        f"static int32_t {n}_clamp(int32_t x, int32_t lo, int32_t hi)",
        "{",
        "    return x < lo ? lo : (x > hi ? hi : x);",
        "}",
        "",
        "/*",
        " * floor((a x + b y + 2^(s-1)) / 2^s) with 32-bit operations only, exact: |a|, |b| < 2^15 and of",
        " * opposite signs (or zero), |x|, |y| < 2^31, and the result within +-2^30. Each value is split",
        " * into a high part and a low part of min(s, 16) bits; the low products fit 32 bits and carry",
        " * into the high products through a floor, which is exact (nested floors of integer divisions).",
        " */",
        f"static int32_t {n}_mul_shift(int32_t a, int32_t x, int32_t b, int32_t y, unsigned s)",
        "{",
        "    if (s <= 16u) {",
        "        const uint32_t mask = ((uint32_t)1 << s) - 1u;",
        f"        const int32_t xh = {n}_floor_shift(x, s);",
        f"        const int32_t yh = {n}_floor_shift(y, s);",
        "        const int32_t xl = (int32_t)((uint32_t)x & mask);",
        "        const int32_t yl = (int32_t)((uint32_t)y & mask);",
        "        const int32_t h = (int32_t)(((uint32_t)1 << s) >> 1);",
        f"        return a * xh + b * yh + {n}_floor_shift(a * xl + b * yl + h, s);",
        "    } else {",
        f"        const int32_t xh = {n}_floor_shift(x, 16u);",
        f"        const int32_t yh = {n}_floor_shift(y, 16u);",
        "        const int32_t xl = (int32_t)((uint32_t)x & 0xFFFFu);",
        "        const int32_t yl = (int32_t)((uint32_t)y & 0xFFFFu);",
        f"        return {n}_floor_shift(a * xh + b * yh + ((int32_t)1 << (s - 17u))",
        f"                                + {n}_floor_shift(a * xl + b * yl, 16u), s - 16u);",
        "    }",
        "}",
        "",
        "/* A count clipped to the output limits, in Q.F (exact: the limits are within 2^27 in Q.F). */",
        f"static int32_t {n}_limit_q(int32_t count)",
        "{",
        f"    return {n}_clamp(count, {up}_OUT_MIN_COUNT, {up}_OUT_MAX_COUNT) * ((int32_t)1 << {up}_STATE_FRAC_BITS);",
        "}",
        *_common_functions(n, up, f"{n}_floor_shift(state->output_q + "
                                  f"(int32_t)(((uint32_t)1 << {up}_STATE_FRAC_BITS) >> 1), {up}_STATE_FRAC_BITS)"),
        "",
        f"int32_t {n}_step({n}_state_t *state, int32_t setpoint_count, int32_t measurement_count)",
        "{",
        f"    const int32_t lo_q = {up}_OUT_MIN_COUNT * ((int32_t)1 << {up}_STATE_FRAC_BITS);",
        f"    const int32_t hi_q = {up}_OUT_MAX_COUNT * ((int32_t)1 << {up}_STATE_FRAC_BITS);",
        f"    const int32_t r = {n}_clamp(setpoint_count, -{up}_INPUT_LIMIT_COUNT, {up}_INPUT_LIMIT_COUNT);",
        f"    const int32_t y = {n}_clamp(measurement_count, -{up}_INPUT_LIMIT_COUNT, {up}_INPUT_LIMIT_COUNT);",
        "    int32_t p;",
        "    int32_t d;",
        "    int32_t v;",
        "    int32_t u;",
        "",
        "    if (!state->primed) {",
        "        state->last_measurement_count = y;",
        "    }",
        f"    p = {n}_mul_shift({up}_KPB_MANT, r, -{up}_KP_MANT, y, {up}_P_SHIFT);",
        f"    d = {n}_mul_shift({up}_AD_MANT, state->derivative_q, 0, 0, {up}_AD_SHIFT)",
        f"        - {n}_mul_shift({up}_BD_MANT, y - state->last_measurement_count, 0, 0, {up}_BD_SHIFT);",
        "    if (!state->primed && state->have_output && !state->manual) {",
        "        /* bumpless start from init_at(): the first output is the given one */",
        f"        state->integrator_q = {n}_clamp(state->output_q - p - d, -{lim}, {lim});",
        "    }",
        "    v = p + state->integrator_q + d;",
        "    if (state->manual) {",
        "        u = state->manual_target_q;",
        "    } else {",
        f"        u = {n}_clamp(v, lo_q, hi_q);",
        "    }",
        *rate,
        "    if (state->manual) {",
        "        /* tracking for a bumpless return to automatic */",
        f"        state->integrator_q = {n}_clamp(u - p - d, -{lim}, {lim});",
        "    } else {",
        f"        const int32_t inc = {n}_mul_shift({up}_KI_MANT, r - y, 0, 0, {up}_KI_SHIFT);",
        *integrate,
        "    }",
        "    state->derivative_q = d;",
        "    state->output_q = u;",
        "    state->last_measurement_count = y;",
        "    state->primed = 1u;",
        "    state->have_output = 1u;",
        f"    return {n}_floor_shift(u + (int32_t)(((uint32_t)1 << {up}_STATE_FRAC_BITS) >> 1), {up}_STATE_FRAC_BITS);",
        "}",
        "",
    ]
    return "\n".join(body)


def render_pid_c(coeffs: FixedPidCoefficients, *, name: str, profiles=(), settings: dict | None = None
                 ) -> dict[str, str]:
    """Render the fixed-point PID as a C99 header and source.

    Parameters
    ----------
    coeffs : FixedPidCoefficients
        From :func:`compensator.firmware.pid.quantise_pid`.
    name : str
        Prefix of every C symbol and the file stem (lower-case C identifier,
        at most 31 characters), e.g. ``"cooler_pid"``.
    profiles : sequence of profile objects
        Named with their hashes in the banner.
    settings : dict, optional
        Options that shaped the coefficients (written in the banner).

    Returns
    -------
    dict of str to str
        ``{"<name>.h": text, "<name>.c": text}``; deterministic.

    Raises
    ------
    ModelError
        ``name`` is not a valid identifier or ``coeffs`` has the wrong type.
    """
    _check_name(name)
    if not isinstance(coeffs, FixedPidCoefficients):
        raise ModelError(f"coeffs: need FixedPidCoefficients, got {type(coeffs).__name__}")
    profiles = tuple(profiles)
    h_banner = c_banner(f"fixed-point PID {name}: declarations and coefficients", profiles, settings)
    c_banner_text = c_banner(f"fixed-point PID {name}: step function", profiles, settings)
    source = _source if coeffs.word_bits == 64 else _source_32
    return {
        f"{name}.h": _header(coeffs, name, h_banner),
        f"{name}.c": source(coeffs, name, c_banner_text),
    }
