"""Safety interlocks: limits against independent computations, the rules one by one, and the C bit-exact with Python."""

from __future__ import annotations

import os
import random
import subprocess

import numpy as np
import pytest

from cbuild import build, needs_cc
from compensator.errors import ModelError
from compensator.firmware.faults import TRIP_FLAGS, FaultFlag
from compensator.firmware.interlocks import (
    ABSENT,
    STATE_OFF,
    STATE_RUN,
    STATE_TRIPPED,
    InterlockInputs,
    Interlocks,
    build_interlock_limits,
)
from compensator.firmware.interlocks_c import render_interlocks_c, write_interlocks_c
from compensator.physics.sipm import breakdown_v

STRICT = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-Wconversion", "-Wsign-conversion",
          "-Wshadow", "-Wstrict-prototypes", "-Wmissing-prototypes"]
# The limits are built once per module, except while mutmut collects its statistics: then each test builds its
# own, so that every test is mapped to the code that builds them (tools/mutation.md).
LIMITS_SCOPE = "function" if os.environ.get("MUTANT_UNDER_TEST") == "stats" else "module"


@pytest.fixture(scope=LIMITS_SCOPE)
def falling(sipm_a, board_ntc, cooler):
    """Feedback-injection supply: the bias falls as the code rises."""
    return build_interlock_limits(sipm_a, board_ntc, cooler, heartbeat_timeout_s=5.0)


@pytest.fixture(scope=LIMITS_SCOPE)
def rising(sipm_b, board_pt1000):
    """Direct supply: the bias rises with the code; no cooler; no bias read-back (no supply check)."""
    return build_interlock_limits(sipm_b, board_pt1000)


@pytest.fixture(scope=LIMITS_SCOPE)
def rising_readback(sipm_b, board_pt1000, board_ntc):
    """The direct supply with the other board's bias read-back channel fitted."""
    import dataclasses

    return build_interlock_limits(sipm_b, dataclasses.replace(board_pt1000, bias_readback=board_ntc.bias_readback))


@pytest.fixture(scope="module")
def board_high_side(board_ntc):
    """hut-board-ntc with its NTC above the resistor: a low code is an open sensor."""
    import dataclasses

    front_end = dataclasses.replace(board_ntc.temperature.front_end, sensor_position="high")
    return dataclasses.replace(board_ntc, temperature=dataclasses.replace(board_ntc.temperature, front_end=front_end))


@pytest.fixture(scope=LIMITS_SCOPE)
def high_side(sipm_a, board_high_side, cooler):
    return build_interlock_limits(sipm_a, board_high_side, cooler, heartbeat_timeout_s=5.0)


def _inputs(lim, board, temp_c, request_code, *, now_ms=0, enabled=1, last_host_ms=None, **extra):
    code = int(board.temperature.adc_code(temp_c))
    return InterlockInputs(now_ms=now_ms, adc_code=code, temp_mdegc=int(round(temp_c * 1000)),
                           request_dac_code=request_code, outputs_enabled=enabled,
                           last_host_ms=now_ms if last_host_ms is None else last_host_ms, **extra)


# ---------------------------------------------------------------- limits vs independent computations

@pytest.mark.parametrize("which", ["falling", "rising"])
def test_bias_limit_never_above_max_overvoltage(which, request, sipm_a, sipm_b, board_ntc, board_pt1000):
    lim = request.getfixturevalue(which)
    sipm, board = (sipm_a, board_ntc) if which == "falling" else (sipm_b, board_pt1000)
    temps = np.linspace(board.min_temp_c - 20, board.max_temp_c + 20, 300)
    for t in temps:
        level = lim.limit_level(int(np.floor(t * 1000)))
        bias = float(board.supply.output_v(lim.code(level)))     # the supply model, not the level arithmetic
        ceiling = min(float(breakdown_v(sipm.device, t)) + sipm.device.max_overvoltage_v, board.max_bias_v)
        assert bias <= ceiling + 1e-9
        # and not needlessly low: within the line's curvature allowance plus two LSB
        assert ceiling - bias < 0.07 + 2 * board.supply.lsb_v


def test_slew_and_timeouts_from_the_profile(falling, board_ntc):
    # 2 V/s at 10 Hz is 0.2 V per tick; one level is lsb_v
    assert falling.slew_levels_per_tick == int(0.2 / board_ntc.supply.lsb_v)
    assert falling.tick_ms == 100 and falling.heartbeat_timeout_ms == 5000
    # with the cooler: twice (S I T_hot + R I^2) / C = 2 (0.05*3*343.15 + 2*9) / 20 = 6.947 K/s, over 0.1 s
    assert falling.max_step_mdegc == 695
    assert falling.over_current_na == 200_000       # hut-sipm-a max_current_a 2e-4 A
    assert falling.hot_side_max_mdegc == 70_000 and falling.dew_margin_mdegc == 3000  # hut-cooler limits


def test_sensor_band_matches_the_channel(falling, board_ntc):
    ch = board_ntc.temperature
    lo, hi = sorted(ch.continuous_code(np.array([-45.0, 65.0])))
    assert falling.adc_fault_lo == int(np.floor(lo)) and falling.adc_fault_hi == int(np.floor(hi))
    # NTC on the low side of the divider: an open sensor reads high, a short reads 0
    assert not falling.adc_low_is_open


def test_bad_settings_are_named(sipm_a, board_ntc):
    with pytest.raises(ModelError) as info:
        build_interlock_limits(sipm_a, board_ntc, slew_v_per_s=float("nan"))
    assert info.value.key == "slew_v_per_s"
    with pytest.raises(ModelError) as info:
        build_interlock_limits(sipm_a, board_ntc, over_current_a=-1.0)
    assert info.value.key == "over_current_a"
    with pytest.raises(ModelError) as info:
        build_interlock_limits(sipm_a, board_ntc, max_rate_k_per_s=0.0)
    assert info.value.key == "max_rate_k_per_s" and "must be a positive number" in str(info.value)
    with pytest.raises(ModelError) as info:
        build_interlock_limits(sipm_a, board_ntc, heartbeat_timeout_s=-1.0)
    assert info.value.key == "heartbeat_timeout_s" and "must be a non-negative number" in str(info.value)
    # the plain device model and the cooler parameters work as well as the profiles
    assert build_interlock_limits(sipm_a.device, board_ntc) == build_interlock_limits(sipm_a, board_ntc)


def test_safe_state_finding(falling, rising, board_ntc):
    # hut-board-ntc's lowest output (about 25.2 V) is above hut-sipm-a's breakdown at -45 C (about 23.0 V)
    expected = float(board_ntc.supply.output_v(board_ntc.safe_dac_code)) - (24.5 + 0.0215 * (-45 - 25))
    assert falling.safe_margin_v == pytest.approx(-expected, abs=1e-9)
    assert [f.code for f in falling.safe_findings] == ["safe_state_above_breakdown"]
    assert rising.safe_findings == [] and rising.safe_margin_v > 0


# ---------------------------------------------------------------- the rules

def _run_to_steady(ilk, inputs, ticks=400):
    out = None
    for k in range(ticks):
        out = ilk.step(inputs._replace(now_ms=inputs.now_ms + k * 100, last_host_ms=inputs.now_ms + k * 100))
    return out


def test_ramps_at_the_slew_limit_up_and_down(falling, board_ntc):
    ilk = Interlocks(falling)
    request = int(board_ntc.supply.dac_code(30.0))
    levels = []
    for k in range(200):
        out = ilk.step(_inputs(falling, board_ntc, 20.0, request, now_ms=100 * k))
        levels.append(falling.level(out.dac_code))
    steps = np.diff([falling.level(falling.safe_dac_code)] + levels)
    assert steps.max() <= falling.slew_levels_per_tick and steps[0] == falling.slew_levels_per_tick
    assert ilk.dac_code == request and out.state == STATE_RUN
    down = []
    for k in range(200, 400):
        out = ilk.step(_inputs(falling, board_ntc, 20.0, request, now_ms=100 * k, enabled=0))
        down.append(falling.level(out.dac_code))
    assert np.diff(down).min() >= -falling.slew_levels_per_tick and out.state == STATE_OFF
    assert out.dac_code == falling.safe_dac_code and out.faults_latched == 0


def test_request_above_the_limit_is_clamped_not_tripped(falling, board_ntc, sipm_a):
    ilk = Interlocks(falling)
    too_high = int(board_ntc.supply.dac_code(40.0))  # beyond 36 V and beyond Vbd + 7 V
    out = _run_to_steady(ilk, _inputs(falling, board_ntc, 0.0, too_high))
    bias = float(board_ntc.supply.output_v(out.dac_code))
    assert bias <= float(breakdown_v(sipm_a.device, 0.0)) + 7.0
    assert out.faults_live == FaultFlag.BIAS_LIMIT and out.state == STATE_RUN
    assert ilk.clear(FaultFlag.BIAS_LIMIT) == FaultFlag.BIAS_LIMIT  # still live: stays latched


@pytest.mark.parametrize("change, flag", [
    (dict(adc_code=0), FaultFlag.SENSOR_SHORT),
    (dict(adc_code=4095), FaultFlag.SENSOR_OPEN),
    (dict(sipm_current_na=250_000), FaultFlag.OVER_CURRENT),
    (dict(hot_side_mdegc=70_001), FaultFlag.HOT_SIDE_OVER_TEMP),
])
def test_trips_go_to_the_safe_state_at_once_and_latch(falling, board_ntc, change, flag):
    ilk = Interlocks(falling)
    base = _inputs(falling, board_ntc, 20.0, int(board_ntc.supply.dac_code(29.0)), cooler_request=500)
    out = _run_to_steady(ilk, base)
    assert out.dac_code != falling.safe_dac_code and out.cooler_drive == 500
    out = ilk.step(base._replace(now_ms=50_000, last_host_ms=50_000, **change))
    assert out.dac_code == falling.safe_dac_code and out.cooler_drive == 0
    assert out.state == STATE_TRIPPED and out.faults_live & flag and out.faults_latched & flag
    assert ilk.trip_record(int(flag).bit_length() - 1)[0] == 50_000
    assert ilk.clear(0xFFFF) & flag                         # cause still present: stays latched
    out = ilk.step(base._replace(now_ms=50_100, last_host_ms=50_100))  # cause gone, still latched
    assert out.state == STATE_TRIPPED and out.faults_live == 0
    assert ilk.clear(flag) == 0 and ilk.trip_record(int(flag).bit_length() - 1) == (0, 0)
    out = ilk.step(base._replace(now_ms=50_200, last_host_ms=50_200))
    assert out.state == STATE_RUN
    assert falling.level(out.dac_code) - falling.level(falling.safe_dac_code) == falling.slew_levels_per_tick


def test_implausible_rate(rising, board_pt1000):
    falling, board_ntc = rising, board_pt1000    # no cooler: the default 2 K/s, 200 mK per 0.1 s tick
    assert falling.max_step_mdegc == 200
    ilk = Interlocks(falling)
    base = _inputs(falling, board_ntc, 20.0, falling.safe_dac_code)
    ilk.step(base)
    out = ilk.step(base._replace(temp_mdegc=20_200, now_ms=100, last_host_ms=100))
    assert out.faults_live == 0                              # 0.2 K per tick is allowed
    out = ilk.step(base._replace(temp_mdegc=20_401, now_ms=200, last_host_ms=200))
    assert out.faults_live == FaultFlag.SENSOR_RATE and ilk.trip_record(2) == (200, 201)


def test_heartbeat_loss_only_with_outputs_enabled(falling, board_ntc):
    ilk = Interlocks(falling)
    base = _inputs(falling, board_ntc, 20.0, falling.safe_dac_code, last_host_ms=0)
    assert ilk.step(base._replace(now_ms=5000)).faults_live == 0          # exactly the timeout
    out = ilk.step(base._replace(now_ms=5001))
    assert out.faults_live == FaultFlag.HEARTBEAT_LOST and out.state == STATE_TRIPPED
    assert ilk.trip_record(7) == (5001, 5001)
    quiet = Interlocks(falling)
    assert quiet.step(base._replace(now_ms=10**6, outputs_enabled=0)).faults_live == 0
    wrapped = Interlocks(falling)  # the millisecond clock wraps: 100 ms of silence, not 4e9
    assert wrapped.step(base._replace(now_ms=50, last_host_ms=(1 << 32) - 50)).faults_live == 0


def test_dew_point_stops_cooling_but_not_heating_nor_the_bias(falling, board_ntc):
    ilk = Interlocks(falling)
    base = _inputs(falling, board_ntc, 20.0, falling.safe_dac_code, cooler_request=800,
                   cold_side_mdegc=15_000, dew_point_mdegc=12_001)
    out = ilk.step(base)
    assert out.cooler_drive == 0 and out.faults_live == FaultFlag.DEW_POINT and out.state == STATE_RUN
    assert ilk.step(base._replace(cooler_request=-800)).cooler_drive == -800   # heating is allowed
    assert ilk.step(base._replace(dew_point_mdegc=12_000)).cooler_drive == 800
    assert ilk.step(base._replace(dew_point_mdegc=ABSENT)).cooler_drive == 800
    assert not FaultFlag.DEW_POINT & TRIP_FLAGS


# ---------------------------------------------------------------- C, bit-exact

HARNESS = r"""#include <stdio.h>
#include <stdint.h>
#include "ilk.h"

int main(void)
{
    ilk_state s;
    ilk_inputs in;
    ilk_outputs out;
    char op;
    long long a[12];
    int b;
    ilk_init(&s);
    while (scanf(" %c", &op) == 1) {
        if (op == 's') {
            for (b = 0; b < 12; ++b) if (scanf("%lld", &a[b]) != 1) return 1;
            in.now_ms = (uint32_t)a[0]; in.adc_code = (uint32_t)a[1]; in.temp_mdegc = (int32_t)a[2];
            in.request_dac_code = (uint32_t)a[3]; in.outputs_enabled = (uint8_t)a[4];
            in.last_host_ms = (uint32_t)a[5]; in.sipm_current_na = (int32_t)a[6];
            in.hot_side_mdegc = (int32_t)a[7]; in.cold_side_mdegc = (int32_t)a[8];
            in.dew_point_mdegc = (int32_t)a[9]; in.cooler_request = (int32_t)a[10];
            in.bias_readback_code = (int32_t)a[11];
            ilk_step(&s, &in, &out);
            printf("%lu %ld %lu %lu %u\n", (unsigned long)out.dac_code, (long)out.cooler_drive,
                   (unsigned long)out.faults_live, (unsigned long)out.faults_latched, (unsigned)out.state);
        } else if (op == 'c') {
            if (scanf("%lld", &a[0]) != 1) return 1;
            printf("%lu\n", (unsigned long)ilk_clear(&s, (uint32_t)a[0]));
        } else if (op == 'l') {
            if (scanf("%lld %lld %lld", &a[0], &a[1], &a[2]) != 3) return 1;
            ilk_latch(&s, (uint32_t)a[0], (uint32_t)a[1], a[2]);
            printf("%lu\n", (unsigned long)s.latched);
        } else if (op == 'r') {
            for (b = 0; b < 16; ++b) printf("%lu %ld ", (unsigned long)s.trip_ms[b], (long)s.trip_value[b]);
            printf("\n");
        } else if (op == 'm') {
            if (scanf("%lld", &a[0]) != 1) return 1;
            printf("%lld\n", (long long)ilk_limit_level((int32_t)a[0]));
        }
    }
    return 0;
}
"""


def _readback(rng, lim, level):
    """A bias read-back code near what the level should read (the supply-fault limit straddled), or far off."""
    if not lim.supply_fault_ticks or rng.random() < 0.05:
        return ABSENT
    if rng.random() < 0.02:
        return rng.choice([0, (1 << 31) - 1, -(1 << 31) + 1, rng.randint(0, 1 << 24)])
    expected = lim.expected_readback_code(level)
    spread = lim.supply_fault_codes + 2 if rng.random() < 0.7 else 4 * lim.supply_fault_codes
    return expected + rng.randint(-spread, spread)


def _random_script(lim, board, seed, n):
    """A long random walk with faults, clears, latches, wrapping clock and extreme values.

    A Python reference runs alongside only to know the level the bias read-back should show; the script is
    fixed input for both C and Python.
    """
    rng = random.Random(seed)
    shadow = Interlocks(lim)
    stuck = None
    temp = 20_000
    now = (1 << 32) - 20_000  # the clock wraps within the run
    last_host = now
    enabled = 1
    req = lim.safe_dac_code
    lines = []
    for k in range(n):
        now = (now + lim.tick_ms) & 0xFFFFFFFF
        r = rng.random()
        temp += rng.randint(-150, 150) if r > 0.02 else rng.randint(-5000, 5000)
        temp = max(-60_000, min(80_000, temp))
        if rng.random() < 0.9:
            last_host = now
        if rng.random() < 0.01:
            last_host = (now - rng.randint(0, 20_000)) & 0xFFFFFFFF
        if rng.random() < 0.02:
            enabled = 1 - enabled
        if rng.random() < 0.05:
            req = rng.randint(0, lim.dac_full_scale)
        code = int(board.temperature.adc_code(temp / 1000.0))
        if rng.random() < 0.01:
            code = rng.choice([0, board.temperature.front_end.full_scale_code, rng.randint(0, 65535)])
        temp_in = temp if rng.random() > 0.005 else rng.choice([-(1 << 31) + 1, (1 << 31) - 1])
        cur = rng.choice([ABSENT, rng.randint(0, 300_000), rng.randint(-(1 << 31) + 1, (1 << 31) - 1)]) \
            if rng.random() < 0.1 else rng.randint(0, 150_000)
        hot = rng.choice([ABSENT, rng.randint(20_000, 75_000)])
        cold = rng.choice([ABSENT, temp])
        dew = rng.choice([ABSENT, rng.randint(-10_000, 25_000)])
        cool = rng.randint(-(1 << 31), (1 << 31) - 1) if rng.random() < 0.01 else rng.randint(-3000, 3000)
        if rng.random() < 0.003:  # the supply stops following its DAC for a while, or follows it again
            stuck = None if stuck is not None else shadow.limits.level(shadow.dac_code)
        level = shadow.limits.level(shadow.dac_code) if stuck is None else stuck
        args = (now, code, temp_in, req, enabled, last_host, cur, hot, cold, dew, cool, _readback(rng, lim, level))
        lines.append(("s", args))
        shadow.step(InterlockInputs(*args))
        if rng.random() < 0.03:
            lines.append(("c", (rng.choice([0xFFFFFFFF, 1 << rng.randint(0, 9), rng.getrandbits(32)]),)))
            shadow.clear(lines[-1][1][0])
        if rng.random() < 0.005:
            lines.append(("l", (1 << rng.randint(0, 12), now, rng.randint(-(1 << 40), 1 << 40))))
            shadow.latch(*lines[-1][1])
        if rng.random() < 0.01:
            lines.append(("r", ()))
        if rng.random() < 0.01:
            lines.append(("m", (rng.randint(-(1 << 31), (1 << 31) - 1),)))
    return lines


def _python_answers(lim, script):
    ilk = Interlocks(lim)
    out = []
    for op, args in script:
        if op == "s":
            o = ilk.step(InterlockInputs(*args))
            out.append(f"{o.dac_code} {o.cooler_drive} {o.faults_live} {o.faults_latched} {o.state}")
        elif op == "c":
            out.append(str(ilk.clear(args[0])))
        elif op == "l":
            ilk.latch(*args)
            out.append(str(ilk.faults_latched))
        elif op == "r":
            out.append(" ".join(f"{a} {b}" for a, b in (ilk.trip_record(i) for i in range(16))) + " ")
        else:
            out.append(str(lim.limit_level(args[0])))
    return out


@needs_cc
@pytest.mark.parametrize("which", ["falling", "rising", "rising_readback", "high_side"])
def test_c_is_bit_exact_over_long_random_sequences(which, request, tmp_path, board_ntc, board_pt1000):
    lim = request.getfixturevalue(which)
    board = {"falling": board_ntc, "high_side": request.getfixturevalue("board_high_side")}.get(which, board_pt1000)
    assert lim.adc_low_is_open == (which == "high_side")
    files = render_interlocks_c(lim, name="ilk")
    exe = build(tmp_path, {**files, "main.c": HARNESS}, STRICT)
    script = _random_script(lim, board, seed={"falling": 3, "rising": 5, "rising_readback": 7, "high_side": 11}[which],
                            n=4_000 if which == "high_side" else 12_000)
    # and, at the end, one code below and one above the plausible band with their trip records read back
    last = next(args for op, args in reversed(script) if op == "s")
    for code in (lim.adc_fault_lo - 1, lim.adc_fault_hi + 1):
        script += [("c", (0xFFFFFFFF,)), ("s", (last[0], code, *last[2:])), ("r", ())]
    text = "\n".join(f"{op} {' '.join(str(a) for a in args)}" for op, args in script) + "\n"
    result = subprocess.run([str(exe)], input=text, capture_output=True, text=True, check=True)
    c_lines = result.stdout.splitlines()
    py_lines = _python_answers(lim, script)
    assert len(c_lines) == len(py_lines)
    mismatch = next((i for i, (a, b) in enumerate(zip(c_lines, py_lines)) if a != b), None)
    assert mismatch is None, (script[mismatch], c_lines[mismatch], py_lines[mismatch])
    # the walk visited every kind of outcome
    states = {int(line.split()[4]) for op_line, line in zip(script, py_lines) if op_line[0] == "s"}
    assert states == {STATE_RUN, STATE_OFF, STATE_TRIPPED}
    supply_trips = sum(int(line.split()[2]) & FaultFlag.SUPPLY_FAULT != 0
                       for op_line, line in zip(script, py_lines) if op_line[0] == "s")
    assert (supply_trips > 20) == (which != "rising"), supply_trips   # without a read-back channel: never


def test_render_is_deterministic_and_carries_the_caution(falling, sipm_a, board_ntc, tmp_path):
    a = render_interlocks_c(falling, name="ilk", profiles=[sipm_a, board_ntc])
    b = render_interlocks_c(falling, name="ilk", profiles=[sipm_a, board_ntc])
    assert a == b and "IEC 61010-1" in a["ilk.h"] and "hut-board-ntc" in a["ilk.h"]
    with pytest.raises(ModelError):
        render_interlocks_c(falling, name="Bad Name")
    paths = write_interlocks_c(falling, tmp_path / "out", name="ilk")
    assert sorted(p.name for p in paths) == ["ilk.c", "ilk.h"]


@pytest.mark.parametrize("key, bad", [
    ("tick_ms", 0), ("tick_ms", 60_001), ("dac_full_scale", 0), ("dac_full_scale", 1 << 31),
    ("safe_dac_code", -1), ("safe_dac_code", 65536), ("bias_limit_level", -1), ("bias_limit_level", 65536),
    ("slew_levels_per_tick", 0), ("slew_levels_per_tick", 65536), ("adc_fault_lo", -1), ("adc_fault_lo", 4000),
    ("max_step_mdegc", -1), ("max_step_mdegc", 1 << 31), ("over_current_na", -1), ("over_current_na", 1 << 31),
    ("heartbeat_timeout_ms", -1), ("heartbeat_timeout_ms", 1 << 31), ("ov_limit_slope_q", 1 << 31),
    ("ov_limit_slope_q", -(1 << 31)), ("ov_limit_level_at_ref", 1 << 31), ("dew_margin_mdegc", -1),
    ("dew_margin_mdegc", 100_001),
])
def test_limits_out_of_range_are_named(falling, key, bad):
    import dataclasses

    with pytest.raises(ModelError) as info:
        dataclasses.replace(falling, **{key: bad})
    assert info.value.key == key and repr(bad) in str(info.value)


@pytest.mark.parametrize("key, edge", [
    ("tick_ms", 1), ("tick_ms", 60_000), ("safe_dac_code", 0), ("safe_dac_code", 65535), ("bias_limit_level", 0),
    ("bias_limit_level", 65535), ("slew_levels_per_tick", 1), ("slew_levels_per_tick", 65535),
    ("adc_fault_lo", 0), ("max_step_mdegc", 0), ("over_current_na", 0), ("heartbeat_timeout_ms", 0),
    ("ov_limit_slope_q", (1 << 31) - 1), ("ov_limit_slope_q", -(1 << 31) + 1), ("dew_margin_mdegc", 0),
    ("dew_margin_mdegc", 100_000),
])
def test_limits_at_their_edges_are_accepted(falling, key, edge):
    import dataclasses

    assert getattr(dataclasses.replace(falling, **{key: edge}), key) == edge


def test_limit_constants_against_independent_computations(falling, rising, sipm_a, board_ntc, sipm_b, board_pt1000):
    # hut-board-ntc: feedback injection, output falls as the code rises; 36 V board maximum is above the
    # network's highest output (code 0, 35.185 V), so every level is allowed by the board's maximum
    s = board_ntc.supply
    assert not falling.bias_rises_with_code and falling.bias_limit_level == 65535
    assert falling.bias_v_at_level0 == pytest.approx(float(s.output_v(65535)), abs=1e-9)
    assert falling.volts_per_level == pytest.approx(s.lsb_v, rel=1e-12)
    # hut-board-pt1000: direct supply rising with the code; level of the 65 V board maximum
    s2 = board_pt1000.supply
    assert rising.bias_rises_with_code
    assert rising.bias_limit_level == int(np.floor((min(65.0, s2.output_range_v()[1]) - s2.intercept_v)
                                                   / s2.volts_per_code + 1e-9))
    # the reference of the limit line is the coldest plausible temperature, -25 C less the 20 K margin
    assert falling.ov_limit_ref_mdegc == -45_000 and rising.ov_limit_ref_mdegc == -45_000
    # its slope: the breakdown tempco (21.5 mV/K for hut-sipm-a, a straight line) in levels per milli-kelvin
    assert falling.ov_limit_slope_q == int(np.floor(0.0215 / 1000 / s.lsb_v * 2 ** 24))
    assert falling.over_current_na == 200_000 and rising.over_current_na == 100_000
    assert rising.hot_side_max_mdegc == 2**31 - 1 and rising.dew_margin_mdegc == 0


def test_boundaries_of_the_rules(falling, board_ntc):
    ilk = Interlocks(falling)
    base = _inputs(falling, board_ntc, 20.0, falling.safe_dac_code, cooler_request=1, cold_side_mdegc=15_000,
                   dew_point_mdegc=13_000)
    # the last plausible codes and exactly the trip current do not trip
    assert ilk.step(base._replace(adc_code=falling.adc_fault_hi)).faults_live & TRIP_FLAGS == 0
    assert Interlocks(falling).step(base._replace(adc_code=falling.adc_fault_lo)).faults_live & TRIP_FLAGS == 0
    assert ilk.step(base._replace(sipm_current_na=falling.over_current_na)).faults_live & TRIP_FLAGS == 0
    # near the dew point even the smallest cooling drive is held at zero
    out = ilk.step(base)
    assert out.faults_live == FaultFlag.DEW_POINT and out.cooler_drive == 0
    # a target exactly one slew step away is reached in that step
    ilk = Interlocks(falling)
    safe_level = falling.level(falling.safe_dac_code)
    target = falling.code(safe_level + falling.slew_levels_per_tick)
    out = ilk.step(base._replace(request_dac_code=target, dew_point_mdegc=ABSENT))
    assert out.dac_code == target
    with pytest.raises(ModelError) as info:
        Interlocks(None)
    assert info.value.key == "limits" and "need InterlockLimits" in str(info.value)


def test_bits_beyond_the_records_latch_and_clear(falling):
    ilk = Interlocks(falling)
    ilk.latch(1 << 16 | FaultFlag.REQUEST_REFUSED, 5, 7)
    assert ilk.faults_latched == 1 << 16 | FaultFlag.REQUEST_REFUSED
    assert ilk.trip_record(8) == (5, 7)
    assert ilk.clear(1 << 16) == FaultFlag.REQUEST_REFUSED


# ---------------------------------------------------------------- supply fault (bias read-back)

def test_expected_readback_follows_the_supply_and_readback_models(falling, board_ntc):
    # Independently: the supply's nominal output at each DAC code, read through the read-back's own transfer.
    codes = np.arange(0, falling.dac_full_scale + 1, 97)
    truth = board_ntc.bias_readback.adc_code(board_ntc.supply.output_v(codes))
    ours = np.array([falling.expected_readback_code(falling.level(int(c))) for c in codes])
    assert np.max(np.abs(ours - truth)) <= 1


def test_a_healthy_board_at_any_tolerance_corner_stays_inside_the_limit(falling, board_ntc):
    # Every tolerance of the supply and the read-back at random values within its bounds (uniform), at every
    # tenth DAC code: the reading never strays further from the expected code than the limit.
    from compensator.physics.supply import network_output_v

    rng = np.random.default_rng(11)
    supply, rb = board_ntc.supply, board_ntc.bias_readback
    codes = np.arange(0, falling.dac_full_scale + 1, 10)
    worst = 0
    for _ in range(200):
        r = rng.uniform(-1, 1, 8)
        out = network_output_v(supply, codes, dac_error=r[0] * 1e-2 * (supply.dac.reference_tolerance_pct
                                                                     + supply.dac.gain_error_pct),
                               dac_offset_lsb=r[1] * (supply.dac.offset_lsb + supply.dac.inl_lsb),
                               resistor_errors=tuple(r[2:5] * 1e-2 * supply.resistor_tolerance_pct),
                               feedback_error=r[5] * 1e-2 * supply.feedback_tolerance_pct)
        read = rb.adc_code(out, divider_error=r[6] * 1e-2 * rb.divider_tolerance_pct,
                           reference_error=r[7] * 1e-2 * rb.reference_tolerance_pct, offset_v=r[7] * rb.offset_v)
        expected = np.array([falling.expected_readback_code(falling.level(int(c))) for c in codes])
        worst = max(worst, int(np.max(np.abs(read - expected))))
    assert 0 < worst <= falling.supply_fault_codes


def _steady(lim, board, level, *, readback, now_ms):
    return _inputs(lim, board, 20.0, lim.code(level), now_ms=now_ms, bias_readback_code=readback)


def test_a_slew_over_the_whole_range_never_trips(falling, board_ntc):
    ilk = Interlocks(falling)
    top = falling.limit_level(20_000)
    for k in range(2 * (top // falling.slew_levels_per_tick) + 10):
        # the read-back shows the level applied over the last tick, as a healthy supply does
        rb = falling.expected_readback_code(falling.level(ilk.dac_code))
        out = ilk.step(_steady(falling, board_ntc, top if k < top // falling.slew_levels_per_tick + 5 else 0,
                               readback=rb, now_ms=k * falling.tick_ms))
        assert not out.faults_latched & FaultFlag.SUPPLY_FAULT
    assert out.state == STATE_RUN


def test_a_supply_that_stops_following_latches_after_the_stated_ticks(falling, board_ntc):
    ilk = Interlocks(falling)
    stuck = falling.expected_readback_code(falling.level(ilk.dac_code))   # frozen at the safe output
    target = falling.limit_level(20_000)
    k = 0
    while True:  # ramp up with a read-back that no longer moves
        out = ilk.step(_steady(falling, board_ntc, target, readback=stuck, now_ms=k * falling.tick_ms))
        k += 1
        if out.faults_latched & FaultFlag.SUPPLY_FAULT:
            break
        assert k < 1000
    # the first tick beyond the limit is the first whose applied level (before the step) reads too far away
    levels = [falling.level(falling.safe_dac_code) + falling.slew_levels_per_tick * j for j in range(k)]
    beyond = [abs(stuck - falling.expected_readback_code(v)) > falling.supply_fault_codes for v in levels]
    first = beyond.index(True)
    assert k == first + falling.supply_fault_ticks and out.state == STATE_TRIPPED
    # the recorded value is the read-back minus the expected code (the supply reads low: the bias rose no further)
    assert out.dac_code == falling.safe_dac_code and ilk.trip_record(9)[1] < -falling.supply_fault_codes
    assert falling.supply_fault_ticks == 3 and falling.supply_fault_codes == 84
    # stuck at the safe output, the supply agrees with the safe state again: the cause is gone, the fault clears
    out = ilk.step(_steady(falling, board_ntc, target, readback=stuck, now_ms=k * falling.tick_ms))
    assert not out.faults_live & FaultFlag.SUPPLY_FAULT and ilk.clear(int(FaultFlag.SUPPLY_FAULT)) == 0


def test_a_supply_failed_high_stays_latched(falling, board_ntc):
    ilk = Interlocks(falling)
    high = falling.readback_max_code + 200  # beyond the highest output the regulator should ever give
    for k in range(falling.supply_fault_ticks - 1):
        out = ilk.step(_steady(falling, board_ntc, 0, readback=high, now_ms=k * falling.tick_ms))
        assert not out.faults_live & FaultFlag.SUPPLY_FAULT   # not yet: fewer ticks than the count
    out = ilk.step(_steady(falling, board_ntc, 0, readback=high, now_ms=10 * falling.tick_ms))
    assert out.faults_latched & FaultFlag.SUPPLY_FAULT and out.state == STATE_TRIPPED
    assert ilk.clear(int(FaultFlag.SUPPLY_FAULT)) & FaultFlag.SUPPLY_FAULT   # the cause holds: it stays


def test_without_a_readback_channel_nothing_is_checked(rising, board_pt1000):
    ilk = Interlocks(rising)
    for k in range(50):
        out = ilk.step(_inputs(rising, board_pt1000, 20.0, rising.bias_limit_level, now_ms=k * rising.tick_ms,
                               bias_readback_code=0))
    assert rising.supply_fault_ticks == 0 and not out.faults_latched & FaultFlag.SUPPLY_FAULT


@pytest.mark.parametrize("which", ["falling", "rising"])
def test_level_bias_is_the_supply_output(which, request, board_ntc, board_pt1000):
    # A bias level is a DAC code counted in the direction of rising bias; its nominal output is the supply formula
    # at that code (compensator.physics.supply), linear in the level.
    lim = request.getfixturevalue(which)
    board = board_ntc if which == "falling" else board_pt1000
    levels = np.array([0, 1, 1000, lim.dac_full_scale])
    expected = board.supply.output_v(np.array([lim.code(int(v)) for v in levels]))
    assert lim.level_bias_v(levels) == pytest.approx(expected, rel=1e-12, abs=1e-9)
    assert lim.level_bias_v(7) == pytest.approx(float(board.supply.output_v(lim.code(7))), abs=1e-9)


def test_fault_words_are_32_bits():
    from compensator.firmware.faults import fault_names

    assert fault_names(1 << 31) == ["bit_31"] and fault_names(1 << 32) == [] and fault_names((1 << 33) | 1) == [
        "sensor_open"]
