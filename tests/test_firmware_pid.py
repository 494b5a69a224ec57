"""Float and fixed-point PID references: hand-computed steps, closed loops, agreement bound, formats."""

from __future__ import annotations

import dataclasses
import inspect
import math
from fractions import Fraction

import numpy as np
import pytest

from compensator.errors import CompensatorError, ModelError
from compensator.firmware import pid as pid_module
from compensator.firmware.pid import (
    ANTI_WINDUP_MODES,
    INPUT_LIMIT_COUNT,
    INT32_MAX,
    INT32_MIN,
    FixedPid,
    FloatPid,
    PidSettings,
    agreement_bound_count,
    discretise_pid,
    quantise_pid,
    rshift_round,
)


def settings(**overrides) -> PidSettings:
    base = dict(kp=2.0, ki_per_s=0.5, kd_s=0.4, sample_time_s=0.1, out_min=-10.0, out_max=10.0)
    base.update(overrides)
    return PidSettings(**base)


# --- float reference against hand-computed steps ---------------------------------


def test_float_pid_hand_computed_steps():
    # kp 2, ki 0.5/s, kd 0.4 s, h 0.1 s, N 10, b 0.5:
    # Tf = kd/(kp N) = 0.02 s, ad = Tf/(Tf+h) = 1/6, bd = kd/(Tf+h) = 10/3, bi = ki h = 0.05
    pid = FloatPid(settings(setpoint_weight=0.5))
    # step 1 (r 1, y 0): P = 2 (0.5 - 0) = 1, D = 0 (no kick on the first step), I = 0
    assert pid.step(1.0, 0.0) == pytest.approx(1.0)
    assert pid.integrator == pytest.approx(0.05)  # 0 + 0.05 * 1
    # step 2 (y 0.2): P = 0.6, D = -(10/3) 0.2 = -2/3, v = 0.6 + 0.05 - 2/3
    assert pid.step(1.0, 0.2) == pytest.approx(0.6 + 0.05 - 2 / 3)
    assert pid.integrator == pytest.approx(0.05 + 0.05 * 0.8)
    # step 3 (y 0.3): P = 0.4, D = (1/6)(-2/3) - (10/3) 0.1 = -4/9, v = 0.4 + 0.09 - 4/9
    assert pid.step(1.0, 0.3) == pytest.approx(0.4 + 0.09 - 4 / 9)
    assert pid.derivative == pytest.approx(-4 / 9)
    assert pid.integrator == pytest.approx(0.09 + 0.05 * 0.7)


@pytest.mark.parametrize("mode, integrator", [
    # PI kp 4, ki 1/s, h 0.1 s, limits +-1; r 1, y 0: v = 4, u = 1, increment ki h e = 0.1
    ("back_calculation", 0.1 + 0.025 * (1.0 - 4.0)),  # Tt = Ti = kp/ki = 4 s, ao = h/Tt = 0.025
    ("clamping", 0.0),  # limited high and the error drives higher: hold
    ("none", 0.1),
])
def test_float_pid_anti_windup_first_step(mode, integrator):
    pid = FloatPid(settings(kp=4.0, ki_per_s=1.0, kd_s=0.0, out_min=-1.0, out_max=1.0, anti_windup=mode))
    assert pid.step(1.0, 0.0) == 1.0
    assert pid.integrator == pytest.approx(integrator)


def test_float_pid_clamping_integrates_when_error_reverses():
    pid = FloatPid(settings(kp=4.0, ki_per_s=1.0, kd_s=0.0, out_min=-1.0, out_max=1.0, anti_windup="clamping"))
    pid.step(1.0, 0.0)
    pid.step(1.0, 0.0)
    assert pid.integrator == 0.0
    # measurement above the setpoint: output limited low; the error is negative and drives lower: hold
    assert pid.step(0.0, 1.0) == -1.0
    assert pid.integrator == 0.0
    # small negative error inside the limits: integrates
    pid.step(0.0, 0.1)
    assert pid.integrator == pytest.approx(-0.01)


def test_float_pid_rate_limit_and_bumpless_start():
    pid = FloatPid(settings(kp=1.0, ki_per_s=0.0, kd_s=0.0, rate_limit_per_s=2.0))
    pid.reset(output=3.0)
    assert pid.step(0.0, 5.0) == pytest.approx(3.0)  # the first output is the given one
    # the error jumps: the output may move by at most rate h = 0.2 per step
    assert pid.step(5.0, 0.0) == pytest.approx(3.2)
    assert pid.step(5.0, 0.0) == pytest.approx(3.4)
    pid.reset()
    assert pid.step(5.0, 0.0) == pytest.approx(5.0)  # no previous output: not rate-limited


def test_float_pid_default_times():
    # PID: Tt = sqrt(Ti Td) = sqrt((2/0.5)(0.4/2)) = sqrt(0.8); Tf = 0.4/(2*10) = 0.02
    d = discretise_pid(settings())
    assert d.tracking_time_s == pytest.approx(math.sqrt(0.8))
    assert d.derivative_filter_s == pytest.approx(0.02)
    # PI: Tt = Ti; kp = 0: Tf = Tt = h
    assert discretise_pid(settings(kd_s=0.0)).tracking_time_s == pytest.approx(4.0)
    d0 = discretise_pid(settings(kp=0.0))
    assert d0.derivative_filter_s == pytest.approx(0.1) and d0.tracking_time_s == pytest.approx(0.1)
    # Tt never shorter than h; no tracking without integral action or with clamping
    assert discretise_pid(settings(tracking_time_s=0.01)).track == pytest.approx(1.0)
    assert discretise_pid(settings(ki_per_s=0.0)).track == 0.0
    assert discretise_pid(settings(anti_windup="clamping")).track == 0.0
    # no filter: N = inf gives the plain backward difference kd/h
    dn = discretise_pid(settings(derivative_filter_n=math.inf))
    assert dn.ad == 0.0 and dn.bd == pytest.approx(4.0)


def test_float_pid_manual_auto_is_bumpless():
    pid = FloatPid(settings(kd_s=0.0, rate_limit_per_s=1.0, out_min=0.0, out_max=10.0))
    for _ in range(50):
        pid.step(2.0, 1.5)
    held = pid.output
    pid.set_manual(held)
    assert pid.step(2.0, 1.5) == pytest.approx(held)  # auto -> manual at the present output
    pid.set_manual(held + 1.0)
    outs = [pid.step(2.0, 1.5) for _ in range(20)]
    assert outs[0] == pytest.approx(held + 0.1)  # the target is approached at 1 per s, h 0.1 s
    assert outs[-1] == pytest.approx(held + 1.0)
    pid.set_auto()
    first_auto = pid.step(2.0, 1.5)
    # manual -> auto: the integrator tracked u - P - D, so the first automatic output
    # differs from the manual one only by one integrator increment ki h e
    assert first_auto == pytest.approx(held + 1.0)
    assert abs(pid.step(2.0, 1.5) - first_auto) == pytest.approx(0.5 * 0.1 * 0.5)


def test_float_pid_manual_target_clipped():
    pid = FloatPid(settings(out_min=0.0, out_max=5.0))
    pid.set_manual(99.0)
    assert pid.step(0.0, 0.0) == 5.0
    with pytest.raises(ModelError, match="manual output"):
        pid.set_manual(math.nan)


@pytest.mark.parametrize("overrides", [
    dict(),
    dict(setpoint_weight=0.3, derivative_filter_n=4.0),
    dict(kp=0.0, kd_s=0.05),
    dict(kd_s=0.0, derivative_filter_n=math.inf),
])
def test_float_pid_equals_its_transfer_functions_in_python_control(overrides):
    """Away from the limits the controller is linear: u = Cr(z) r - Cy(z) y with
    Cr = b kp + bi/(z - 1) and Cy = kp + bi/(z - 1) + bd (z - 1)/(z - ad); reference: python-control
    ``forced_response`` on those discrete transfer functions."""
    control = pytest.importorskip("control")
    s = settings(out_min=-1e6, out_max=1e6, **overrides)
    d = discretise_pid(s)
    h = s.sample_time_s
    integ = control.tf([d.bi], [1.0, -1.0], h)
    c_r = d.kpb + integ
    c_y = d.kp + integ + control.tf([d.bd, -d.bd], [1.0, -d.ad], h)
    rng = np.random.default_rng(5)
    n = 400
    r = np.concatenate([[0.0], np.repeat(rng.normal(0, 2, n // 50), 50)[: n - 1]])
    y = np.concatenate([[0.0], np.cumsum(rng.normal(0, 0.1, n - 1))])
    t = np.arange(n) * h
    expected = control.forced_response(c_r, t, r).outputs - control.forced_response(c_y, t, y).outputs
    got = FloatPid(s).run(r, y).output
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-9)


# --- closed loop on a first-order plant -----------------------------------------------


def first_order_loop(pid: FloatPid, setpoint: np.ndarray, *, gain=2.0, tau_s=5.0, h=0.1):
    """y[k+1] = a y[k] + (1 - a) K u[k], a = exp(-h/tau) (zero-order-hold exact)."""
    a = math.exp(-h / tau_s)
    y = 0.0
    ys, us = [], []
    for r in setpoint:
        u = pid.step(r, y)
        ys.append(y)
        us.append(u)
        y = a * y + (1 - a) * gain * u
    return np.array(ys), np.array(us)


def test_closed_loop_integral_action_removes_steady_state_error():
    r = np.full(2000, 1.0)
    ys_pi, _ = first_order_loop(FloatPid(settings(kp=1.0, ki_per_s=0.4, kd_s=0.0)), r)
    assert abs(ys_pi[-1] - 1.0) < 1e-6
    ys_p, _ = first_order_loop(FloatPid(settings(kp=1.0, ki_per_s=0.0, kd_s=0.0)), r)
    # proportional only: the error settles at 1/(1 + K kp) = 1/3 (final-value theorem)
    assert ys_p[-1] == pytest.approx(1.0 - 1.0 / 3.0, abs=1e-6)


def overshoot(ys, r):
    return float(np.max(ys) - r)


def test_closed_loop_anti_windup_limits_overshoot_after_saturation():
    # a large setpoint step keeps the output at its limit for a long time
    r = np.full(1500, 3.0)
    base = dict(kp=1.0, ki_per_s=0.5, kd_s=0.0, out_min=0.0, out_max=2.0)
    results = {}
    for mode in ANTI_WINDUP_MODES:
        ys, us = first_order_loop(FloatPid(settings(anti_windup=mode, **base)), r)
        assert np.all((us >= 0.0) & (us <= 2.0))
        assert abs(ys[-1] - 3.0) < 1e-3
        results[mode] = overshoot(ys, 3.0)
    assert results["none"] > 0.3  # wound-up integrator: a big overshoot
    assert results["back_calculation"] < 0.5 * results["none"]
    assert results["clamping"] < 0.5 * results["none"]


def test_fixed_closed_loop_settles_to_the_setpoint():
    s = settings(kp=1.0, ki_per_s=0.4, kd_s=0.2, out_min=0.0, out_max=4.0)
    c = quantise_pid(s, input_per_count=0.001, output_per_count=4.0 / 4095)
    pid = FixedPid(c)
    a = math.exp(-0.1 / 5.0)
    y = 0.0
    for _ in range(3000):
        u = pid.step(1500, round(y / 0.001))
        y = a * y + (1 - a) * 2.0 * u * c.output_per_count
    # within one output count of the ideal steady state u = r/K
    assert abs(y - 1.5) <= 2.0 * c.output_per_count + 0.001


# --- quantisation and formats -------------------------------------------------------


def test_rshift_round_is_round_half_up():
    rng = np.random.default_rng(7)
    values = [int(v) for v in rng.integers(-(1 << 40), 1 << 40, 2000)] + [-3, -2, -1, 0, 1, 2, 3, -5, 5]
    for x in values:
        for shift in (0, 1, 2, 7, 31):
            exact = Fraction(x, 1 << shift)
            assert rshift_round(x, shift) == math.floor(exact + Fraction(1, 2))
    assert rshift_round(-5, 1) == -2 and rshift_round(5, 1) == 3  # ties toward +infinity


def test_quantised_coefficients_represent_the_settings():
    s = settings(setpoint_weight=0.7, rate_limit_per_s=3.0)
    c = quantise_pid(s, input_per_count=0.002, output_per_count=0.005)
    rep = c.represented()
    for key in ("kp_count", "kpb_count", "ki_count", "bd_count", "ad", "track"):
        exact = getattr(c, key)
        assert rep[key] == pytest.approx(exact, rel=2.0 ** -28), key
    for mant in (c.kp_mant, c.kpb_mant, c.ki_mant, c.ad_mant, c.bd_mant, c.track_mant):
        assert abs(mant) <= 1 << 30
    assert c.kp_count == pytest.approx(2.0 * 0.002 / 0.005)
    assert c.out_min_count == -2000 and c.out_max_count == 2000
    assert c.state_frac_bits == 27 - (2000).bit_length()
    assert c.rate_step_count == pytest.approx(3.0 * 0.1 / 0.005)


def test_quantise_limits_stay_inside_the_physical_limits():
    # 2.0 / 0.003 = 666.67 counts: the integer limit rounds inwards
    c = quantise_pid(settings(out_min=-1.0, out_max=2.0), input_per_count=1.0, output_per_count=0.003)
    assert c.out_max_count == 666 and c.out_min_count == -333
    # a reversing actuator (negative volt per code) swaps the limits
    c = quantise_pid(settings(out_min=25.0, out_max=35.0), input_per_count=0.01, output_per_count=-0.001)
    assert (c.out_min_count, c.out_max_count) == (-35000, -25000)
    assert c.kp_count < 0


@pytest.mark.parametrize("kwargs, overrides, match", [
    (dict(input_per_count=0.0, output_per_count=1.0), {}, "input_per_count"),
    (dict(input_per_count=1.0, output_per_count=math.nan), {}, "output_per_count"),
    (dict(input_per_count=1.0, output_per_count=1.0), dict(rate_limit_per_s=1e-9), "rate_limit_per_s"),
    (dict(input_per_count=1.0, output_per_count=1.0), dict(kp=1e9, ki_per_s=0.0, kd_s=0.0), "kp"),
    (dict(input_per_count=1.0, output_per_count=1.0), dict(out_min=0.2, out_max=0.7), "out_min/out_max"),
    (dict(input_per_count=1.0, output_per_count=1e-9), {}, "out_min/out_max"),
])
def test_quantise_errors_name_the_field(kwargs, overrides, match):
    with pytest.raises(ModelError, match=match):
        quantise_pid(settings(**overrides), **kwargs)


@pytest.mark.parametrize("overrides, field", [
    (dict(sample_time_s=0.0), "sample_time_s"),
    (dict(kp=math.inf), "kp"),
    (dict(out_min=1.0, out_max=1.0), "out_min"),
    (dict(derivative_filter_n=0.0), "derivative_filter_n"),
    (dict(rate_limit_per_s=-1.0), "rate_limit_per_s"),
    (dict(rate_limit_per_s="fast"), "rate_limit_per_s"),
    (dict(rate_limit_per_s=math.inf), "rate_limit_per_s"),
    (dict(tracking_time_s=math.nan), "tracking_time_s"),
    (dict(kd_s=None), "kd_s"),
    (dict(derivative_filter_n=math.nan), "derivative_filter_n"),
    (dict(anti_windup="integrator_freeze"), "anti_windup"),
    (dict(tracking_time_s=0.0), "tracking_time_s"),
    (dict(kp=1.0, ki_per_s=-1.0), "share one sign"),
    (dict(kp=0.0, ki_per_s=0.0, kd_s=0.0), "at least one gain"),
])
def test_settings_errors_name_the_field(overrides, field):
    with pytest.raises(ModelError, match=field) as info:
        settings(**overrides)
    assert isinstance(info.value, CompensatorError) and "\n" not in str(info.value)


@pytest.mark.parametrize("field, value", [
    ("kp_mant", (1 << 30) + 1), ("ad_shift", 63), ("state_frac_bits", 25), ("out_min_count", 5000),
    ("out_max_count", 1 << 20), ("rate_step_q", -1), ("anti_windup", "freeze"),
])
def test_coefficients_keep_their_invariants(field, value):
    c = quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01)
    with pytest.raises(ModelError, match=field.split("_")[0]):
        dataclasses.replace(c, **{field: value})


def test_fixed_input_validation():
    pid = FixedPid(quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01))
    with pytest.raises(ModelError, match="setpoint_count"):
        pid.step(1.5, 0)
    with pytest.raises(ModelError, match="measurement_count"):
        pid.step(0, 1 << 31)
    with pytest.raises(ModelError, match="measurement_count"):
        pid.run(0, np.array([0.5, 1.0]))


# --- fixed-point behaviour ---------------------------------------------------------


def test_fixed_inputs_saturate_at_the_input_limit():
    c = quantise_pid(settings(kp=1e-4, ki_per_s=0.0, kd_s=0.0), input_per_count=1.0, output_per_count=1.0)
    a, b = FixedPid(c), FixedPid(c)
    assert a.step(INT32_MAX, INT32_MIN) == b.step(INPUT_LIMIT_COUNT, -INPUT_LIMIT_COUNT)
    assert a.step(INT32_MIN, 0) == b.step(-INPUT_LIMIT_COUNT, 0)


def test_fixed_integrator_saturates_without_wrapping():
    c = quantise_pid(settings(kp=0.0, ki_per_s=1000.0, kd_s=0.0, anti_windup="none", out_min=-8.0, out_max=8.0),
                     input_per_count=1.0, output_per_count=1.0)
    pid = FixedPid(c)
    assert pid.step(INPUT_LIMIT_COUNT, -INPUT_LIMIT_COUNT) == 0  # the integrator acts from the next step
    for _ in range(200):
        assert pid.step(INPUT_LIMIT_COUNT, -INPUT_LIMIT_COUNT) == 8
    assert pid.state.integrator_q == INT32_MAX
    assert pid.step(-INPUT_LIMIT_COUNT, INPUT_LIMIT_COUNT) == 8  # one increment takes it to the bottom
    for _ in range(200):
        assert pid.step(-INPUT_LIMIT_COUNT, INPUT_LIMIT_COUNT) == -8
    assert pid.state.integrator_q == INT32_MIN


def test_fixed_run_equals_step_by_step():
    c = quantise_pid(settings(rate_limit_per_s=20.0), input_per_count=0.01, output_per_count=0.01)
    rng = np.random.default_rng(3)
    y = np.cumsum(rng.integers(-20, 21, 3000))
    manual = (np.arange(3000) // 250) % 3 == 2
    target = rng.integers(-1200, 1200, 3000) // 100 * 100
    run = FixedPid(c).run(400, y, manual=manual, manual_output_count=target)
    pid = FixedPid(c)
    for k in range(3000):
        if manual[k]:
            if not pid.manual or pid.state.manual_target_q != max(min(int(target[k]), 1000), -1000) << c.state_frac_bits:
                pid.set_manual(int(target[k]))
        elif pid.manual:
            pid.set_auto()
        assert pid.step(400, int(y[k])) == run.output[k]
        assert pid.state.integrator_q == run.integrator[k]


def test_fixed_manual_auto_is_bumpless():
    c = quantise_pid(settings(kd_s=0.0, out_min=0.0, out_max=10.0), input_per_count=0.01, output_per_count=0.01)
    pid = FixedPid(c)
    for _ in range(100):
        pid.step(200, 150)
    held = pid.output_count
    pid.set_manual(held)
    assert pid.step(200, 150) == held
    pid.set_auto()
    assert pid.step(200, 150) == held
    pid.reset(output_count=321)
    assert pid.step(0, 900) == 321  # bumpless start


# --- agreement of the fixed-point and float references ---------------------------------


CONFIGS = {
    "cooler_pid_back_calculation": dict(
        settings=dict(kp=0.8, ki_per_s=0.05, kd_s=2.0, sample_time_s=0.1, out_min=-2.0, out_max=2.0,
                      setpoint_weight=0.6, rate_limit_per_s=5.0),
        input_per_count=0.001, output_per_count=0.001),
    "bias_pi_clamping": dict(
        settings=dict(kp=0.02, ki_per_s=5.0, kd_s=0.0, sample_time_s=0.001, out_min=-1.5, out_max=1.5,
                      anti_windup="clamping"),
        input_per_count=1e-3, output_per_count=-5e-4),
    "reverse_pid_none": dict(
        settings=dict(kp=-0.15, ki_per_s=-0.002, kd_s=-0.02, sample_time_s=0.05, out_min=-1.5, out_max=1.5,
                      derivative_filter_n=math.inf, anti_windup="none", rate_limit_per_s=2.0),
        input_per_count=0.01, output_per_count=3.0 / 4095),
}


def random_schedule(rng, n, max_count):
    """Piecewise-constant setpoint, random-walk measurement with jumps, manual spells."""
    r = np.repeat(rng.integers(-max_count, max_count, n // 200 + 1), 200)[:n]
    y = np.clip(np.cumsum(rng.integers(-9, 10, n)) + rng.integers(-3, 4, n) * (rng.random(n) < 0.01) * 300,
                -max_count, max_count)
    manual = (np.arange(n) // 700) % 4 == 3
    return r.astype(np.int64), y.astype(np.int64), manual


@pytest.mark.parametrize("name", sorted(CONFIGS))
def test_fixed_agrees_with_float_within_the_derived_bound(name):
    cfg = CONFIGS[name]
    s = PidSettings(**cfg["settings"])
    c = quantise_pid(s, input_per_count=cfg["input_per_count"], output_per_count=cfg["output_per_count"])
    rng = np.random.default_rng(11)
    n, max_count = 4000, 1500
    r, y, manual = random_schedule(rng, n, max_count)
    mid = (c.out_min_count + c.out_max_count) // 2
    target = np.full(n, mid, dtype=np.int64)
    fixed = FixedPid(c).run(r, y, manual=manual, manual_output_count=target)
    flt = FloatPid(s).run(r * c.input_per_count, y * c.input_per_count, manual=manual,
                          manual_output=target * c.output_per_count)
    diff = np.abs(fixed.output - flt.output / c.output_per_count)
    bound = agreement_bound_count(c, n, max_input_count=max_count, manual=manual)
    # the schedule reaches both limits, so saturation and anti-windup are exercised
    assert np.any(fixed.output == c.out_min_count) and np.any(fixed.output == c.out_max_count)
    # ... while the states stay inside the int32 state range (the bound's assumption)
    state_range = 2.0 ** (31 - c.state_frac_bits)
    for values in (flt.integrator, flt.derivative, flt.integrator + flt.derivative):
        assert np.max(np.abs(values / c.output_per_count)) < 0.5 * state_range
    assert diff.max() <= bound
    # the bound is tight enough to catch an error of one count
    assert bound < 1.5


def test_agreement_bound_catches_a_wrong_coefficient():
    cfg = CONFIGS["cooler_pid_back_calculation"]
    s = PidSettings(**cfg["settings"])
    c = quantise_pid(s, input_per_count=cfg["input_per_count"], output_per_count=cfg["output_per_count"])
    wrong = dataclasses.replace(c, kp_mant=c.kp_mant + c.kp_mant // 100)  # kp off by 1 %
    r, y, _ = random_schedule(np.random.default_rng(11), 4000, 1500)
    fixed = FixedPid(wrong).run(r, y)
    flt = FloatPid(s).run(r * c.input_per_count, y * c.input_per_count)
    diff = np.abs(fixed.output - flt.output / c.output_per_count)
    assert diff.max() > agreement_bound_count(c, 4000, max_input_count=1500)


def test_agreement_bound_grows_with_steps():
    c = quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01)
    b1, b2 = (agreement_bound_count(c, n, max_input_count=1000) for n in (10, 10000))
    assert 0.5 <= b1 <= b2
    with pytest.raises(ModelError, match="n_steps"):
        agreement_bound_count(c, -1, max_input_count=1)


# --- documentation ------------------------------------------------------------------


def test_public_api_has_numpydoc_docstrings():
    for name in ("discretise_pid", "quantise_pid", "rshift_round", "agreement_bound_count"):
        doc = inspect.getdoc(getattr(pid_module, name))
        assert "Parameters\n----------" in doc, name
    for name in ("discretise_pid", "quantise_pid", "agreement_bound_count"):
        assert "Returns\n-------" in inspect.getdoc(getattr(pid_module, name)), name
    for cls in (FloatPid, FixedPid):
        for method in ("step", "run", "reset"):
            assert "Parameters\n----------" in inspect.getdoc(getattr(cls, method)), (cls, method)


def test_old_names_and_settings_from_gains():
    from compensator.loops.verify import PidGains

    d = discretise_pid(settings())
    assert d.ao == d.track and d.filter_time_s == d.derivative_filter_s
    g = PidGains(2.0, 0.5, 0.4, 8.0, 0.7)
    s = PidSettings.from_gains(g, sample_time_s=0.1, out_min=-1.0, out_max=2.0, rate_limit_per_s=3.0)
    assert (s.kp, s.ki_per_s, s.kd_s, s.derivative_filter_n, s.setpoint_weight) == (2.0, 0.5, 0.4, 8.0, 0.7)
    assert (s.sample_time_s, s.out_min, s.out_max, s.rate_limit_per_s) == (0.1, -1.0, 2.0, 3.0)
    # the same Tf by both names: kd / (kp N) = 0.4 / 16
    assert discretise_pid(s).derivative_filter_s == pytest.approx(g.derivative_filter_s) == pytest.approx(0.025)


def test_32_bit_ranges_by_hand():
    # The 32-bit variant needs P, the integrator increment and D within +-2^28 (Q.F) for inputs within +-x counts:
    # P <= ((|kp m| + |kp b m|) x >> s) + 1, increment <= (|ki m| 2 x >> s) + 1, D <= ((|bd m| 2 x >> s) + 2) / (1 - ad).
    # 2^28 - 2 = 1022 x 262657, so with mantissas summing to 1022 and no shift P and the increment reach exactly
    # 2^28 - 1 at x = 262657 (accepted) and pass 2^28 one count later (refused); D reaches 2^28 already there.
    from compensator.firmware.pid_coefficients import _check_32_bit_ranges, quantise_pid

    base = quantise_pid(PidSettings(kp=0.5, ki_per_s=0.05, kd_s=0.0, sample_time_s=0.1, out_min=0.0, out_max=4095.0),
                        input_per_count=1.0, output_per_count=1.0, word_bits=32, input_limit_count=4096)
    assert base.state_frac_bits == 15
    zero = dict(kp_mant=0, kpb_mant=0, p_shift=0, ki_mant=0, ki_shift=0, ad_mant=0, ad_shift=0, bd_mant=0, bd_shift=0)

    def coeffs(x, **kw):
        return dataclasses.replace(base, input_limit_count=x, **{**zero, **kw})

    cases = [(dict(kp_mant=511, kpb_mant=511), 262657, "P (kp times the input range)"),
             (dict(kp_mant=-511, kpb_mant=-511), 262657, "P (kp times the input range)"),
             (dict(kp_mant=16384, kpb_mant=16384, p_shift=1), 16383, "P (kp times the input range)"),
             (dict(ki_mant=511), 262657, "the integrator increment"),
             (dict(ki_mant=-16384, ki_shift=1), 16383, "the integrator increment"),
             (dict(bd_mant=511), 262656, "D (the derivative term)"),
             (dict(bd_mant=-16384, bd_shift=1), 16383, "D (the derivative term)"),
             # (6553 x 2 x 163855 >> 3) + 2 = 2^28 - 1 exactly: the + 2 of D's bound is pinned at its edge
             (dict(bd_mant=6553, bd_shift=3), 163855, "D (the derivative term)"),
             (dict(bd_mant=511, ad_mant=16384, ad_shift=15), 131328, "D (the derivative term)")]  # ad = 1/2
    for kw, x_ok, what in cases:
        _check_32_bit_ranges(coeffs(x_ok, **kw))
        with pytest.raises(ModelError) as exc:
            _check_32_bit_ranges(coeffs(x_ok + 1, **kw))
        assert exc.value.key == "word_bits" and exc.value.reason.startswith(f"the 32-bit variant: {what} can reach ")
    with pytest.raises(ModelError) as exc:
        _check_32_bit_ranges(coeffs(4096, kp_mant=511, kpb_mant=-511))
    assert exc.value.reason == ("the 32-bit variant: the setpoint weight must not be negative (kp and kp b of one "
                                "sign)") and exc.value.key == "word_bits"
    with pytest.raises(ModelError) as exc:
        _check_32_bit_ranges(coeffs(262658, kp_mant=511, kpb_mant=511))
    assert exc.value.reason == (
        "the 32-bit variant: P (kp times the input range) can reach 2.684e+08 state units (Q16.15) for inputs within "
        "+-262658 counts, beyond 2^28; the 32-bit variant needs a smaller input range (input_limit_count) or gain, "
        "otherwise use the 64-bit code")


def test_modes_refusals_and_the_run_record():
    pid = FloatPid(settings())
    pid.set_manual(1.0)
    assert pid.manual is True
    pid.set_auto()
    assert pid.manual is False
    for r, y in ((math.nan, 0.0), (0.0, math.inf)):  # either input alone
        with pytest.raises(ModelError) as exc:
            pid.step(r, y)
        assert exc.value.reason == f"setpoint/measurement: must be finite, got {r!r}, {y!r}"
    run = FloatPid(settings()).run(np.zeros(3), np.ones(3))
    output, integrator, derivative = run
    assert output is run.output and integrator is run.integrator and derivative is run.derivative


def test_agreement_bound_in_manual_mode_and_from_the_start():
    # In manual mode the output is the clipped target for both controllers: without a rate limit and with limits
    # on whole counts (L = 0) the error is only the final rounding to a whole count, 1/2. With no step at all the
    # bound is the same 1/2. Automatic mode accumulates the integrator's error on top.
    s = settings(out_min=-1000.0, out_max=1000.0)
    c = quantise_pid(s, input_per_count=1.0, output_per_count=1.0)
    assert agreement_bound_count(c, 200, max_input_count=500, manual=True) == 0.5
    assert agreement_bound_count(c, 200, max_input_count=500, manual=[True] * 200) == 0.5
    assert agreement_bound_count(c, 0, max_input_count=500) == 0.5
    assert agreement_bound_count(c, 200, max_input_count=500) > 0.5


def test_settings_from_gains_keep_how_the_firmware_runs_them():
    from compensator.loops.verify import PidGains

    s = PidSettings.from_gains(PidGains(2.0, 0.5, 0.4, 8.0, 0.7), sample_time_s=0.1, out_min=-1.0, out_max=2.0,
                               anti_windup="clamping", tracking_time_s=2.5)
    assert (s.anti_windup, s.tracking_time_s, s.rate_limit_per_s) == ("clamping", 2.5, None)
    s = PidSettings.from_gains(PidGains(2.0, 0.5, 0.4, 8.0, 0.7), sample_time_s=0.1, out_min=-1.0, out_max=2.0,
                               tracking_time_s=2.5)
    assert (s.anti_windup, s.tracking_time_s) == ("back_calculation", 2.5)
    assert discretise_pid(s).tracking_time_s == 2.5


def test_agreement_bound_of_a_p_controller_by_hand():
    # kp = 0.5 is exact in Q.15 (64-bit mantissa 2^30, shift 16): P errs only by its rounding, eta / 2 with one state
    # LSB eta = 2^-15. Without integral or derivative action the integrator's error starts at P's plus eta and grows
    # by eta / 2 a step (its rounding), so after n automatic steps the output is within
    # eta / 2 + eta (3/2 + (n - 1) / 2) + 1/2 (the final rounding) counts.
    c = quantise_pid(PidSettings(kp=0.5, ki_per_s=0.0, kd_s=0.0, sample_time_s=0.1, out_min=0.0, out_max=4095.0),
                     input_per_count=1.0, output_per_count=1.0)
    assert (c.state_frac_bits, c.kp_mant, c.p_shift) == (15, 1 << 30, 16)
    eta = 2.0 ** -15
    for n in (1, 2, 5):
        assert agreement_bound_count(c, n, max_input_count=4095) == pytest.approx(
            0.5 + eta * (2 + (n - 1) / 2), rel=1e-15)


def _bound_from_the_derivation(c, n, x, manual, max_output_count=None):
    """agreement_bound_count's recurrence written again from its docstring's derivation (plain Python floats)."""
    q = c.represented()
    eta = 2.0 ** -c.state_frac_bits
    x = min(x, c.input_limit_count)
    d = {k: abs(q[k] - getattr(c, k)) for k in q}
    e_p = (d["kp_count"] + d["kpb_count"]) * x + (eta / 2 if c.p_shift else 0.0)
    e_d = 0.0
    if c.bd_mant:
        d_max = abs(c.bd_count) * 2 * x / (1 - c.ad)
        e_d = (d["ad"] * d_max + d["bd_count"] * 2 * x + eta) / (1 - c.ad)
    lim = max(abs(c.out_min_count - c.out_min_exact_count), abs(c.out_max_count - c.out_max_exact_count))
    uv = 2.0 ** (32 - c.state_frac_bits) if max_output_count is None else 2.0 * max_output_count
    rate = d["rate_step_count"]
    e_i, e_u = e_p + e_d + eta, 0.0
    for k in range(n):
        if manual[k]:
            e_u = max(lim, e_u + rate) if c.rate_step_q else lim
            e_i = e_u + e_p + e_d + eta
            continue
        e_u = max(e_p + e_i + e_d, lim, *((e_u + rate,) if c.rate_step_q else ()))
        if c.anti_windup == "back_calculation" and c.track_mant:
            e_i = (1 - c.track) * e_i + c.track * (e_u + e_p + e_d) + d["track"] * uv + d["ki_count"] * 2 * x + eta
        else:
            e_i = e_i + d["ki_count"] * 2 * x + eta / 2
    return e_u + 0.5


@pytest.mark.parametrize("overrides, opc", [
    (dict(), 0.013),
    (dict(rate_limit_per_s=7.3, out_min=-3.3, out_max=9.1), 0.011),
    (dict(anti_windup="clamping", kd_s=0.0), 0.007),
    (dict(anti_windup="none", kp=0.0), 0.017),
    (dict(ki_per_s=0.0, rate_limit_per_s=2.9), 0.019)])
def test_agreement_bound_is_its_derivation(overrides, opc):
    # Coefficients that do not quantise exactly (output_per_count not a power of two) and limits off whole counts, so
    # that every term of the derivation is non-zero somewhere; automatic and manual steps mixed.
    # With limits on whole counts (700 counts each way) the limit term L vanishes and the other terms show.
    manual = [k % 7 in (3, 4) for k in range(40)]
    for whole in (False, True):
        limits = dict(out_min=-700 * opc, out_max=700 * opc) if whole else {}
        c = quantise_pid(settings(**{**overrides, **limits}), input_per_count=0.003, output_per_count=opc)
        for mode in (manual, [False] * 40, [True] * 40):
            assert agreement_bound_count(c, 40, max_input_count=900, manual=mode) == pytest.approx(
                _bound_from_the_derivation(c, 40, 900, mode), rel=1e-13, abs=0)
        assert agreement_bound_count(c, 40, max_input_count=900, manual=manual, max_output_count=1000) == \
            pytest.approx(_bound_from_the_derivation(c, 40, 900, manual, 1000), rel=1e-13, abs=0)


def test_fixed_pid_refuses_non_integer_and_out_of_range_counts():
    pid = FixedPid(quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01))
    cases = [(lambda: pid.step(1.5, 0), "setpoint_count: need an integer count, got 1.5"),
             (lambda: pid.step(0, 2 ** 31), "measurement_count: 2147483648 is outside the int32 range"),
             (lambda: pid.set_manual(-(2 ** 31) - 1), "output_count: -2147483649 is outside the int32 range")]
    for call, reason in cases:
        with pytest.raises(ModelError) as exc:
            call()
        assert exc.value.reason == reason


def test_fixed_pid_run_refusals_and_input_saturation():
    c = quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01, input_limit_count=100)
    n = 3
    for kw, name in ((dict(setpoint_count=[-(2 ** 31) - 1] * n), "setpoint_count"),
                     (dict(measurement_count=[0, 2 ** 31, 0]), "measurement_count"),
                     (dict(manual=[True] * n, manual_output_count=[2 ** 31] * n), "manual_output_count")):
        args = dict(setpoint_count=[0] * n, measurement_count=[0] * n)
        args.update(kw)
        with pytest.raises(ModelError) as exc:
            FixedPid(c).run(args.pop("setpoint_count"), args.pop("measurement_count"), **args)
        assert exc.value.reason == f"{name}: values outside the int32 range"
    ok = FixedPid(c).run([-(2 ** 31)] * n, [2 ** 31 - 1] * n)  # the ends of int32 are accepted
    assert ok.output.dtype == np.int64 and ok.integrator.dtype == np.int64
    # Inputs are saturated to +-input_limit_count (100 counts) before anything else: -500 acts as -100 and 700 as 100.
    for r, y, r_sat, y_sat in ((-500, 700, -100, 100), (300, -900, 100, -100)):
        a, b = FixedPid(c), FixedPid(c)
        assert [a.step(r, y) for _ in range(3)] == [b.step(r_sat, y_sat) for _ in range(3)]
        assert a.state == b.state
    assert FixedPid(c).step(-99, 99) != FixedPid(c).step(-100, 100)  # and nothing inside the limit is touched


def test_fixed_state_saturates_at_the_int32_range():
    # Output limits of +-1000 counts give F = 27 - 10 = 17 fraction bits: the int32 state holds +-16384 counts. A
    # measurement step of 2^24 - 1 counts makes the derivative term (kd / (Tf + h) = 3.3 counts per count) far
    # larger: it saturates at the int32 ends, negative for a rising measurement. An error of 2^24 - 1 counts drives
    # the integrator to the ends in one step (0.05 x 2^24 counts), and the bumpless start from reset(0) sets it
    # to -P there (beyond the ends too).
    big = (1 << 24) - 1
    for sign in (1, -1):
        c = quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01)
        assert c.state_frac_bits == 17
        pid = FixedPid(c)
        pid.step(0, 0)
        pid.step(0, sign * big)
        assert pid.state.derivative_q == (INT32_MIN if sign > 0 else INT32_MAX)
        for mode in ("none", "back_calculation"):
            pid = FixedPid(quantise_pid(settings(anti_windup=mode), input_per_count=0.01, output_per_count=0.01))
            pid.step(sign * big, 0)
            assert pid.state.integrator_q == (INT32_MAX if sign > 0 else INT32_MIN)
        pid = FixedPid(quantise_pid(settings(ki_per_s=0.0, kd_s=0.0), input_per_count=0.01, output_per_count=0.01))
        pid.reset(0)
        pid.step(sign * big, 0)
        assert pid.state.integrator_q == (INT32_MIN if sign > 0 else INT32_MAX)


def test_reset_clears_every_field_and_the_32_bit_integrator_floor():
    from compensator.firmware.pid_fixed import FixedPidState

    c = quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01)
    pid = FixedPid(c)
    pid.set_manual(300)
    pid.run([100, -200, 400], [5, 60, -70], manual=[False, True, False], manual_output_count=[0, 300, 0])
    pid.reset()
    zero = FixedPidState(integrator_q=0, derivative_q=0, output_q=0, manual_target_q=0, last_measurement_count=0,
                         manual=False, primed=False, have_output=False)
    assert pid.state == zero == FixedPid(c).state
    with pytest.raises(ModelError) as exc:
        FixedPid(s := settings())
    assert exc.value.reason == f"coeffs: need FixedPidCoefficients, got {type(s).__name__}"
    # The 32-bit variant's integrator stops at -2^28 (Q.F) as it does at +2^28 (test_firmware_pid_c32.py).
    from compensator.firmware.pid_coefficients import STATE_LIMIT_32

    c32 = quantise_pid(settings(kp=0.0, kd_s=0.0, anti_windup="none", out_min=-4095.0, out_max=4095.0),
                       input_per_count=1.0, output_per_count=1.0, word_bits=32, input_limit_count=4096)
    run = FixedPid(c32).run(np.full(3000, -4096), np.zeros(3000, dtype=np.int64))
    assert run.integrator.min() == -STATE_LIMIT_32 == -(1 << 28)


def test_quantise_mantissas_and_refusals_by_hand():
    from compensator.firmware.pid_coefficients import _quantise

    # m 2^-s ~= v with |m| <= limit and the largest s (at most max_shift): 0.005 x 2^22 = 20971.52 -> 20972, s = 22
    # with a 15-bit limit (32767); 1000 in 31 bits: 1000 x 2^21 = 2097152000 (2^22 would pass 2^31 - 1).
    assert _quantise(0.0, "x") == (0, 0)
    assert _quantise(0.005, "x", (1 << 15) - 1, 46) == (20972, 22)
    assert _quantise(-1000.0, "x", (1 << 31) - 1, 62) == (-2097152000, 21)
    # Capped at the largest shift, 3 keeps the mantissa 12: fewer than 10 significant bits, refused.
    with pytest.raises(ModelError) as exc:
        _quantise(3.0, "x", (1 << 15) - 1, 2)
    assert exc.value.reason == "x: 3 is too small for the fixed-point format (would keep fewer than 10 significant bits)"
    assert _quantise(3.0, "x", (1 << 15) - 1, 9) == (1536, 9)  # 3 x 2^9, at least 2^10
    for kw, key, reason in ((dict(word_bits=16), "word_bits", "word_bits: must be 64 or 32, got 16"),
                            (dict(input_limit_count=0), "input_limit_count",
                             "input_limit_count: must be within 1..2^24, got 0")):
        with pytest.raises(ModelError) as exc:
            quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01, **kw)
        assert (exc.value.key, exc.value.reason) == (key, reason)
    assert quantise_pid(settings(), input_per_count=0.01, output_per_count=0.01, input_limit_count=1).input_limit_count == 1
