"""The fixed-point PID's raw state (Q.F integrator, derivative and output) step by step: by hand, and against the
algorithm of ``compensator.firmware.pid``'s docstring evaluated with exact rationals.

``FixedPid`` writes each rounding as ``(m x + 2^(s-1)) >> s``; the checks here round the exact rational ``m x / 2^s``
half up with ``fractions.Fraction`` (``floor(q + 1/2)``), so that a wrong rounding term moves the state by one LSB of
Q.F, which the output counts alone rarely show.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction

import numpy as np
import pytest

from compensator.firmware.fixed_point import INT32_MAX, INT32_MIN
from compensator.firmware.pid import FixedPid, PidSettings, quantise_pid


def rhu(m: int, x: int, s: int) -> int:
    """``m x / 2^s`` rounded half up (ties toward +infinity), from the exact rational."""
    return math.floor(Fraction(m * x, 2 ** s) + Fraction(1, 2))


def clip(x, lo, hi):
    return max(lo, min(hi, x))


class ExactPid:
    """The algorithm of the ``compensator.firmware.pid`` docstring, written again with exact rational rounding."""

    def __init__(self, c):
        self.c = c
        self.i_lim = (INT32_MIN, INT32_MAX) if c.word_bits == 64 else (-c.integrator_limit_q, c.integrator_limit_q)
        self.reset()

    def reset(self, output_count=None):
        self.i = self.d = self.y_prev = self.target = 0
        self.manual = self.primed = False
        self.have_output = output_count is not None
        self.u = 0 if output_count is None else self.q(output_count)

    def q(self, count):
        c = self.c
        return clip(count, c.out_min_count, c.out_max_count) * 2 ** c.state_frac_bits

    def step(self, r, y):
        c, lim = self.c, self.c.input_limit_count
        r, y = clip(r, -lim, lim), clip(y, -lim, lim)
        y_prev = self.y_prev if self.primed else y
        p = rhu(1, c.kpb_mant * r - c.kp_mant * y, c.p_shift)
        d = clip(rhu(c.ad_mant, self.d, c.ad_shift) - rhu(c.bd_mant, y - y_prev, c.bd_shift), INT32_MIN, INT32_MAX)
        if not self.primed and self.have_output and not self.manual:
            self.i = clip(self.u - p - d, *self.i_lim)
        v = clip(p + self.i + d, INT32_MIN, INT32_MAX)
        f = c.state_frac_bits
        u = self.target if self.manual else clip(v, c.out_min_count * 2 ** f, c.out_max_count * 2 ** f)
        if c.rate_step_q and self.have_output:
            u = clip(u, self.u - c.rate_step_q, self.u + c.rate_step_q)
        if self.manual:
            self.i = clip(u - p - d, *self.i_lim)
        else:
            inc = rhu(c.ki_mant, r - y, c.ki_shift)
            if c.anti_windup == "back_calculation":
                self.i = clip(self.i + inc + rhu(c.track_mant, u - v, c.track_shift), *self.i_lim)
            elif c.anti_windup == "none" or not ((v > u and inc > 0) or (v < u and inc < 0)):
                self.i = clip(self.i + inc, *self.i_lim)
        self.d, self.u, self.y_prev, self.primed, self.have_output = d, u, y, True, True
        return rhu(1, u, f)


def hand_coefficients(**kw):
    """Small mantissas set directly: F = 4, output limits +-20 counts (+-320 in Q.4)."""
    base = quantise_pid(PidSettings(kp=1.0, ki_per_s=1.0, kd_s=0.1, sample_time_s=0.1, out_min=-20.0, out_max=20.0),
                        input_per_count=1.0, output_per_count=1.0)
    fields = dict(state_frac_bits=4, kp_mant=3, kpb_mant=3, p_shift=1, ki_mant=5, ki_shift=2, ad_mant=3, ad_shift=2,
                  bd_mant=7, bd_shift=1, track_mant=1, track_shift=1, rate_step_q=0, anti_windup="back_calculation")
    fields.update(kw)
    return dataclasses.replace(base, **fields)


def test_fixed_state_step_by_hand():
    # kp = kp b = 3 2^-1, ki h = 5 2^-2, ad = 3 2^-2, bd = 7 2^-1, track = 1 2^-1 (Q.4 state, limits +-320).
    # Step 1 (r 5, y 0, y_prev = y): P = 15/2 -> 8 (a tie, up); D = 0/4 - 0/2 -> 0; v = u = 8;
    #   I = 0 + 25/4 -> 6 + track (0 + 1/2 -> 0) = 6; output 8/16 -> 1 (a tie, up).
    # Step 2 (r 5, y 3): P = 6/2 -> 3; D = 0 - 21/2 -> -(11) (10.5 rounds to 11) = -11; v = u = 3 + 6 - 11 = -2;
    #   I = 6 + 10/4 -> 3 = 9; output -2/16 -> 0.
    # Step 3 (r 5, y 3): P = 3; D = -33/4 = -8.25 -> -8 minus 0 = -8; v = u = 3 + 9 - 8 = 4; I = 9 + 3 = 12; output 0.
    # Step 4 (r 400, y 3): P = 1191/2 -> 596; D = -24/4 -> -6; v = 596 + 12 - 6 = 602, u = 320 (the limit);
    #   I = 12 + 1985/4 -> 496 + (320 - 602)/2 = -141 -> -141 (a tie, up) = 367; output 20.
    pid = FixedPid(hand_coefficients())
    rows = [(pid.step(r, y), pid.state.integrator_q, pid.state.derivative_q, pid.state.output_q)
            for r, y in ((5, 0), (5, 3), (5, 3), (400, 3))]
    assert rows == [(1, 6, 0, 8), (0, 9, -11, -2), (0, 12, -8, 4), (20, 367, -6, 320)]
    # Bumpless start from reset(2): u_prev = 32; the first step sets I = 32 - P - D = 32 - 8 - 0 = 24, so v = u = 32.
    pid = FixedPid(hand_coefficients())
    pid.reset(2)
    assert pid.step(5, 0) == 2 and pid.state.integrator_q == 24 + 6
    # Now from a measurement that moved: D = 0 in the first step, so a derivative with the wrong sign cannot hide:
    # with D = -11 (primed, r 5, y 3 after y 0) the manual tracking sets I = u - P - D = 160 - 3 + 11 = 168.
    pid = FixedPid(hand_coefficients())
    pid.step(5, 0)
    pid.set_manual(10)
    pid.step(5, 3)
    assert (pid.state.integrator_q, pid.state.derivative_q, pid.state.output_q) == (168, -11, 160)


def schedule(rng, n, lim):
    """Seeded random walks with jumps to and beyond the input limit, manual spells and resets."""
    r = np.repeat(rng.integers(-lim // 2, lim // 2 + 1, n // 40 + 1), 40)[:n]
    y = np.cumsum(rng.integers(-lim // 50, lim // 50 + 1, n))
    pick = rng.random(n)
    y = np.where(pick < 0.05, rng.choice([-2 * lim, 2 * lim, -lim, lim], n), y)
    r = np.where(rng.random(n) < 0.03, rng.choice([-2 * lim, 2 * lim], n), r)
    events = []
    manual = False
    for k in range(n):
        e = rng.random()
        if e < 0.04:
            events.append(("m", int(rng.integers(-3000, 3000))))
            manual = True
        elif e < 0.08 and manual:
            events.append(("a",))
            manual = False
        elif e < 0.10:
            events.append(("reset", None if rng.random() < 0.5 else int(rng.integers(-3000, 3000))))
            manual = False
        events.append(("s", int(r[k]), int(y[k])))
    return events


CASES = {
    # 64 bits: a PID with a setpoint weight and a rate limit, back-calculation (P far beyond int32 at the limits)
    "pid64": (dict(kp=0.8, ki_per_s=0.5, kd_s=2.0, sample_time_s=0.1, out_min=-2.0, out_max=2.0, setpoint_weight=0.6,
                   rate_limit_per_s=5.0), 0.001, 0.001, 64, 1 << 16),
    # 64 bits: clamping through a reversing DAC, no rate limit
    "clamp64": (dict(kp=0.02, ki_per_s=5.0, kd_s=0.001, sample_time_s=0.001, out_min=25.0, out_max=35.0,
                     anti_windup="clamping"), 1e-3, -2.5e-4, 64, 1 << 16),
    # 64 bits: reverse acting, no anti-windup, unfiltered derivative
    "none64": (dict(kp=-0.15, ki_per_s=-0.2, kd_s=-0.02, sample_time_s=0.05, out_min=-1.5, out_max=1.5,
                    derivative_filter_n=math.inf, anti_windup="none", rate_limit_per_s=20.0), 0.01, 3.0 / 4095, 64,
               1 << 16),
    # 32 bits: P, D and the increment close to +-2^28, so that the integrator's +-2^28 clamp acts in every branch
    "pid32": (dict(kp=0.8, ki_per_s=4.0, kd_s=0.002, sample_time_s=0.01, out_min=0.0, out_max=4095.0,
                   setpoint_weight=0.7, rate_limit_per_s=2e4), 1.0, 1.0, 32, 1 << 16),
    "clamp32": (dict(kp=0.5, ki_per_s=40.0, kd_s=0.0, sample_time_s=0.01, out_min=-2000.0, out_max=4095.0,
                     anti_windup="clamping"), 1.0, 1.0, 32, 1 << 16),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_fixed_state_equals_the_exact_algorithm(case):
    settings, ipc, opc, word_bits, limit = CASES[case]
    c = quantise_pid(PidSettings(**settings), input_per_count=ipc, output_per_count=opc, word_bits=word_bits,
                     input_limit_count=limit)
    pid, ref = FixedPid(c), ExactPid(c)
    for event in schedule(np.random.default_rng(11), 600, limit):
        if event[0] == "m":
            pid.set_manual(event[1])
            ref.manual, ref.target = True, ref.q(event[1])
        elif event[0] == "a":
            pid.set_auto()
            ref.manual = False
        elif event[0] == "reset":
            pid.reset(event[1])
            ref.reset(event[1])
        else:
            out = pid.step(event[1], event[2])
            assert out == ref.step(event[1], event[2]), event
            s = pid.state
            assert (s.integrator_q, s.derivative_q, s.output_q) == (ref.i, ref.d, ref.u), event


def test_integrator_clamps_in_the_bumpless_start_and_in_manual_tracking():
    from compensator.firmware.pid_coefficients import STATE_LIMIT_32, _check_32_bit_ranges

    # 64 bits, kp = kp b = 2^30 (no shift, Q.4): P = 2^30 (r - y) = 200 2^30 for r = 100, y = -100, far beyond int32.
    # Bumpless start from reset(2) (u_prev = 32): I = 32 - P is clipped to INT32_MIN, so v = P + INT32_MIN saturates
    # high and the output goes to its limit, 20 counts (the start cannot be bumpless); mirrored, -20 and INT32_MAX.
    c = hand_coefficients(kp_mant=1 << 30, kpb_mant=1 << 30, p_shift=0, ki_mant=0, ki_shift=0, track_mant=0,
                          track_shift=0)
    for sign, out, i_end in ((1, 20, INT32_MIN), (-1, -20, INT32_MAX)):
        pid = FixedPid(c)
        pid.reset(2)
        assert pid.step(sign * 100, -sign * 100) == out and pid.state.integrator_q == i_end
        # manual tracking, target 10 counts (160 in Q.4): I = 160 - P - D, clipped to the same end
        pid = FixedPid(c)
        pid.set_manual(10)
        assert pid.step(sign * 100, -sign * 100) == 10 and pid.state.integrator_q == i_end
    # 32 bits, Q.4, limits +-2^23 counts (+-2^27 in Q.4, the most the 32-bit format allows), inputs within +-2^16:
    # kp = kp b = 16383 2^-3 keeps P = 16383 2^17 / 8 = 268419072 = 2^28 - 16384 inside 2^28 (accepted by the range
    # check), but u - P reaches -2^27 - 268419072 = -402636800: the integrator stops at -2^28 = -268435456.
    c32 = dataclasses.replace(c, word_bits=32, integrator_limit_q=STATE_LIMIT_32, input_limit_count=1 << 16,
                              out_min_count=-(1 << 23), out_max_count=1 << 23, kp_mant=16383, kpb_mant=16383,
                              p_shift=3, bd_mant=0, bd_shift=0, ad_mant=0, ad_shift=0)
    _check_32_bit_ranges(c32)
    for sign in (1, -1):
        pid = FixedPid(c32)
        pid.reset(-sign * (1 << 23))
        # I = -2^28 (clipped), v = 268419072 - 268435456 = -16384 (Q.4): the output is -1024 counts
        assert pid.step(sign * (1 << 16), -sign * (1 << 16)) == -sign * 1024
        assert pid.state.integrator_q == -sign * (1 << 28)
        pid = FixedPid(c32)
        pid.set_manual(sign * (1 << 23))
        pid.step(-sign * (1 << 16), sign * (1 << 16))
        assert pid.state.integrator_q == sign * (1 << 28)  # 2^27 + 268419072, clipped


def test_coefficient_invariants_at_their_exact_ends():
    # Each invariant of FixedPidCoefficients (the ones the overflow-free arithmetic relies on, pid module docstring):
    # the last accepted value and the first refused one, with the refusal's reason word for word.
    from compensator.errors import ModelError

    c = hand_coefficients(out_min_count=-127, out_max_count=127)  # 127 = INT32_MAX >> 24 fits every F up to 24
    c32 = dataclasses.replace(c, word_bits=32, integrator_limit_q=1 << 28, input_limit_count=1 << 16)
    accepted = [(c, dict(state_frac_bits=0)), (c, dict(state_frac_bits=24)),
                (c, dict(kp_mant=1 << 30, kpb_mant=-(1 << 30), p_shift=62)), (c32, dict(ki_mant=-32767, ki_shift=46)),
                (c, dict(input_limit_count=1)), (c, dict(input_limit_count=1 << 24)),
                (c, dict(integrator_limit_q=1)), (c, dict(integrator_limit_q=INT32_MAX)),
                (c, dict(out_min_count=5, out_max_count=5)),
                (c, dict(state_frac_bits=20, out_min_count=-2047, out_max_count=2047)),  # INT32_MAX >> 20 = 2047
                (c, dict(rate_step_q=0)), (c, dict(rate_step_q=INT32_MAX))]
    for base, kw in accepted:
        assert all(getattr(dataclasses.replace(base, **kw), k) == v for k, v in kw.items())
    refused = [
        (c, dict(state_frac_bits=-1), "state_frac_bits: -1 is outside 0..24"),
        (c, dict(state_frac_bits=25), "state_frac_bits: 25 is outside 0..24"),
        (c, dict(word_bits=16), "word_bits: must be 64 or 32, got 16"),
        (c, dict(kp_mant=(1 << 30) + 1), "kp_mant: 1073741825 exceeds 1073741824 in magnitude"),
        (c, dict(kpb_mant=-(1 << 30) - 1), "kpb_mant: -1073741825 exceeds 1073741824 in magnitude"),
        (c32, dict(ki_mant=32768), "ki_mant: 32768 exceeds 32767 in magnitude"),
        (c32, dict(ad_mant=-32768), "ad_mant: -32768 exceeds 32767 in magnitude"),
        (c32, dict(bd_mant=40000), "bd_mant: 40000 exceeds 32767 in magnitude"),
        (c32, dict(track_mant=32768), "track_mant: 32768 exceeds 32767 in magnitude"),
        (c, dict(p_shift=63), "p_shift: 63 is outside 0..62"),
        (c, dict(ki_shift=-1), "ki_shift: -1 is outside 0..62"),
        (c32, dict(ad_shift=47), "ad_shift: 47 is outside 0..46"),
        (c32, dict(bd_shift=47), "bd_shift: 47 is outside 0..46"),
        (c32, dict(track_shift=47), "track_shift: 47 is outside 0..46"),
        (c, dict(input_limit_count=0), "input_limit_count: 0 is outside 1..2^24"),
        (c, dict(input_limit_count=(1 << 24) + 1), "input_limit_count: 16777217 is outside 1..2^24"),
        (c, dict(integrator_limit_q=0), "integrator_limit_q: 0 is outside 1..2^31-1"),
        (c, dict(integrator_limit_q=1 << 31), "integrator_limit_q: 2147483648 is outside 1..2^31-1"),
        (c, dict(out_min_count=6, out_max_count=5), "out_min_count/out_max_count: 6 is above 5"),
        (c, dict(state_frac_bits=20, out_max_count=2048), "out_min_count/out_max_count: the limits do not fit Q11.20"),
        (c, dict(state_frac_bits=20, out_min_count=-2048), "out_min_count/out_max_count: the limits do not fit Q11.20"),
        (c, dict(rate_step_q=-1), "rate_step_q: -1 is outside 0..2^31-1"),
        (c, dict(rate_step_q=1 << 31), "rate_step_q: 2147483648 is outside 0..2^31-1"),
        (c, dict(anti_windup="freeze"), "anti_windup: must be one of back_calculation, clamping, none, got 'freeze'"),
    ]
    for base, kw, reason in refused:
        with pytest.raises(ModelError) as exc:
            dataclasses.replace(base, **kw)
        assert exc.value.reason == reason, kw


def test_clamping_holds_on_an_increment_of_one_and_clips_the_integrator():
    # Clamping (conditional integration): hold while v is beyond the limit and the increment drives further, even by
    # one state LSB. ki h = 4 2^-2 (the increment is the error itself), no derivative.
    c = hand_coefficients(anti_windup="clamping", ki_mant=4, ki_shift=2, ad_mant=0, ad_shift=0, bd_mant=0, bd_shift=0)
    pid = FixedPid(c)
    pid.set_manual(20)  # u = 320 (Q.4); P = -300/2 -> -150; tracking sets I = 320 + 150 = 470
    pid.step(0, 100)
    assert pid.state.integrator_q == 470
    pid.set_auto()
    # P = 3/2 -> 2, v = 472 > 320: limited, and an increment of exactly 1 would drive further: I holds at 470
    assert pid.step(101, 100) == 20 and pid.state.integrator_q == 470
    # kp b = 0, kp = 2^30 (Q.4, no shift): P = -2^30 y. Manual at 0 with y = 2 puts I at 0 + 2^31, clipped to INT32_MAX;
    # back in automatic, v = -2^31 + INT32_MAX = -1 is inside the limits, so the increment 5 x 98 / 4 -> 123 is
    # integrated, and the sum is clipped to INT32_MAX (mirrored: -2^31, and -122 clipped to INT32_MIN).
    c = hand_coefficients(anti_windup="clamping", kpb_mant=0, kp_mant=1 << 30, p_shift=0, ad_mant=0, ad_shift=0,
                          bd_mant=0, bd_shift=0)
    for sign, end in ((1, INT32_MAX), (-1, INT32_MIN)):
        pid = FixedPid(c)
        pid.set_manual(0)
        pid.step(sign * 100, sign * 2)
        assert pid.state.integrator_q == end
        pid.set_auto()
        assert pid.manual is False
        assert pid.step(sign * 100, sign * 2) == 0
        assert (pid.state.integrator_q, pid.state.output_q) == (end, -1 if sign > 0 else 0)


def test_reset_refuses_an_output_count_outside_int32_by_name():
    from compensator.errors import ModelError

    pid = FixedPid(hand_coefficients())
    with pytest.raises(ModelError) as exc:
        pid.reset(1 << 31)
    assert exc.value.reason == "output_count: 2147483648 is outside the int32 range"


def quantise_by_search(value, limit, max_shift):
    """The definition written as a plain search with exact rationals: the largest shift s <= max_shift whose rounded
    (half up) mantissa |value| 2^s still fits ``limit``; None where the value is refused (above the limit, or fewer
    than 10 significant bits left)."""
    v = Fraction(value)
    if v == 0:
        return 0, 0
    if abs(v) > limit:
        return None
    half = Fraction(1, 2)
    s = next(k for k in range(max_shift, -1, -1) if math.floor(abs(v) * 2 ** k + half) <= limit)
    mant = math.floor(abs(v) * 2 ** s + half)
    return (int(math.copysign(mant, value)), s) if mant >= 1024 else None


def test_quantise_is_the_largest_shift_that_fits():
    from compensator.errors import ModelError
    from compensator.firmware.pid_coefficients import _quantise

    rng = np.random.default_rng(5)
    for limit in ((1 << 15) - 1, 1 << 30):
        # values whose scaled mantissa lands on the limit, half a count above it (rounds past it), and just below
        ties = [(limit + d) * 2.0 ** -k for k in (0, 3, 20) for d in (0.0, 0.5, 0.4999, 0.6, -0.5, -0.4)]
        values = ties + [float(x) for x in 10.0 ** rng.uniform(-12, 10, 40)] + [1024.0, 1023.5, 2.0, 1.999]
        for value in values:
            for sign in (1, -1):
                for max_shift in (0, 9, 46, 62):
                    expected = quantise_by_search(sign * value, limit, max_shift)
                    if expected is None:
                        with pytest.raises(ModelError):
                            _quantise(sign * value, "x", limit, max_shift)
                    else:
                        assert _quantise(sign * value, "x", limit, max_shift) == expected, (sign * value, limit,
                                                                                             max_shift)
    assert _quantise(32767.0, "x", 32767, 46) == (32767, 0)  # exactly the limit fits, without a shift
    assert _quantise(2.0, "x", 32767, 9) == (1024, 9)  # exactly 10 significant bits are kept


def test_limits_round_to_a_whole_count_only_within_their_floating_point_error():
    from compensator.firmware.pid_coefficients import _limit_counts

    # A limit within 1e-9 (relative, at least 1e-9 absolute) of a whole count is that count; otherwise the integer
    # limits lie inside the exact ones (ceil below, floor above). 1.1 / 0.1 = 11.000000000000002 and
    # 2.3 / 0.1 = 22.999999999999996 in binary floating point are 11 and 23.
    assert _limit_counts(1.1 / 0.1, 2.3 / 0.1) == (11, 23)
    assert _limit_counts(1e-9, -1e-9) == (0, 0)  # exactly at the tolerance: whole counts
    assert _limit_counts(1.0000000015, 4.999999993) == (2, 4)  # 1.5e-9 and 7e-9 (1.4e-9 of 5) away: inside
    assert _limit_counts(1.0000000005, 4.9999999995) == (1, 5)
    assert _limit_counts(-2000.000001, 2000.000001) == (-2000, 2000)  # 5e-10 relative of 2000
    assert _limit_counts(-2000.00001, 2000.00001) == (-2000, 2000)  # 5e-9 relative: ceil and floor, the same here
    assert _limit_counts(1999.999999, 2.5) == (2000, 2)  # ceil and floor of values off whole counts
    big = 123456.0
    off = big * (1 + 5e-10)  # 6.2e-5 above: within 1e-9 of |x| but not within 1e-9 absolute
    assert _limit_counts(off, off) == (123456, 123456)
    c = quantise_pid(PidSettings(kp=1.0, ki_per_s=0.0, kd_s=0.0, sample_time_s=0.1, out_min=1.1, out_max=2.3),
                     input_per_count=1.0, output_per_count=0.1)
    assert (c.out_min_count, c.out_max_count) == (11, 23)


def test_default_input_limits_per_word_width():
    # 2^24 counts for the 64-bit code, 2^16 (a 16-bit ADC) for the 32-bit variant, unless told otherwise
    s = PidSettings(kp=0.5, ki_per_s=0.05, kd_s=0.0, sample_time_s=0.1, out_min=0.0, out_max=4095.0)
    assert quantise_pid(s, input_per_count=1.0, output_per_count=1.0).input_limit_count == 1 << 24
    assert quantise_pid(s, input_per_count=1.0, output_per_count=1.0, word_bits=32).input_limit_count == 1 << 16
    assert quantise_pid(s, input_per_count=1.0, output_per_count=1.0, word_bits=32,
                        input_limit_count=1000).input_limit_count == 1000


def refusal(call):
    from compensator.errors import ModelError

    with pytest.raises(ModelError) as exc:
        call()
    return exc.value


def p_settings(**kw):
    base = dict(kp=0.5, ki_per_s=0.0, kd_s=0.0, sample_time_s=0.1, out_min=0.0, out_max=4095.0)
    base.update(kw)
    return PidSettings(**base)


def test_quantise_pid_refusals_word_for_word():
    q = quantise_pid
    assert refusal(lambda: q({"kp": 1.0}, input_per_count=1.0, output_per_count=1.0)).reason == (
        "settings: need a PidSettings, got dict")
    assert refusal(lambda: q(p_settings(), input_per_count=0.0, output_per_count=1.0)).reason == (
        "input_per_count: must be a finite non-zero number, got 0.0")
    assert refusal(lambda: q(p_settings(), input_per_count=1.0, output_per_count=math.inf)).reason == (
        "output_per_count: must be a finite non-zero number, got inf")
    assert refusal(lambda: q(p_settings(out_min=0.2, out_max=0.7), input_per_count=1.0, output_per_count=1.0)
                   ).reason == ("out_min/out_max: the limits 0.2..0.7 contain no whole output count at "
                                "output_per_count 1.0")
    # limits of 2^27 counts leave no fraction bit below the head room of 16: refused; 2^27 - 1 gives F = 0
    assert refusal(lambda: q(p_settings(out_max=float(1 << 27)), input_per_count=1.0, output_per_count=1.0)
                   ).reason == "out_min/out_max: limits of 134217728 counts exceed the fixed-point range (2^27 counts)"
    # Each coefficient's refusal names its setting: kp too large (2^30 state units and more), the others too small.
    assert refusal(lambda: q(p_settings(kp=1e6), input_per_count=1.0, output_per_count=1.0)).reason.startswith(
        "kp: 3.2768e+10 is too large for the fixed-point format")  # 1e6 x 2^15
    cases = [(dict(ki_per_s=1e-30), "ki_per_s: "), (dict(kd_s=1e-30), "kd_s: "),
             (dict(kd_s=1.0, derivative_filter_n=1e30), "derivative filter: "),
             (dict(ki_per_s=1.0, tracking_time_s=1e30), "tracking_time_s: ")]
    for kw, start in cases:
        reason = refusal(lambda: q(p_settings(**kw), input_per_count=1.0, output_per_count=1.0)).reason
        assert reason.startswith(start) and reason.endswith("is too small for the fixed-point format (would keep "
                                                            "fewer than 10 significant bits)"), reason


def test_quantise_pid_state_format_by_hand():
    q = quantise_pid
    # F = min(24, 27 - bit_length(largest |limit| count)): the lower limit counts as much as the upper one
    assert q(p_settings(out_min=-4095.0, out_max=10.0), input_per_count=1.0, output_per_count=1.0
             ).state_frac_bits == 15
    assert q(p_settings(out_min=0.0, out_max=float((1 << 27) - 1)), input_per_count=1.0, output_per_count=1.0
             ).state_frac_bits == 0
    c = q(p_settings(out_min=0.5, out_max=1.5), input_per_count=1.0, output_per_count=1.0)  # one whole count only
    assert (c.out_min_count, c.out_max_count, c.state_frac_bits) == (1, 1, 24)
    # kp = 1 count per count exactly (a power of two): P is formed, mantissa 2^30, shift 30 - 24 = 6
    c = q(p_settings(kp=1.0, out_min=-1.0, out_max=1.0), input_per_count=1.0, output_per_count=1.0)
    assert (c.kp_mant, c.kpb_mant, c.p_shift, c.state_frac_bits) == (1 << 30, 1 << 30, 6, 24)


def test_32_bit_state_fraction_bits_follow_the_largest_gain():
    # 15-bit mantissas: F is the largest with gain 2^F <= 32767, whichever gain is the largest (inputs within 16
    # counts keep P, D and the increment far inside 2^28). 100 2^8 = 25600 fits, 100 2^9 = 51200 does not.
    def frac(**kw):
        return quantise_pid(p_settings(**kw), input_per_count=1.0, output_per_count=1.0, word_bits=32,
                            input_limit_count=16).state_frac_bits

    assert frac(kp=100.0, setpoint_weight=0.5) == 8  # kp = 100, kp b = 50
    assert frac(kp=50.0, setpoint_weight=4.0) == 7  # kp b = 200: 200 2^7 = 25600
    assert frac(kp=0.5, ki_per_s=1000.0) == 8  # ki h = 100
    assert frac(kp=0.5, kd_s=10.0, derivative_filter_n=math.inf) == 8  # kd / h = 100 (no filter)
    assert frac(kp=511.984375) == 6  # 32767 / 64: exactly the largest mantissa at F = 6
    assert frac(kp=20000.0) == 0  # 20000 x 2 > 32767: no fraction bit
    c = quantise_pid(p_settings(kp=32767.0), input_per_count=1.0, output_per_count=1.0, word_bits=32,
                     input_limit_count=1)
    assert (c.state_frac_bits, c.kp_mant, c.p_shift) == (0, 32767, 0)
    e = refusal(lambda: quantise_pid(p_settings(kp=40000.0), input_per_count=1.0, output_per_count=1.0, word_bits=32,
                                     input_limit_count=1))
    assert (e.key, e.reason) == ("word_bits", "the 32-bit variant: a gain of 40000 output counts per input count does "
                                              "not fit a 15-bit mantissa even without state fraction bits; use the "
                                              "64-bit code")
    # a tiny integral gain keeps the 32-bit variant's largest shift, 46 (not the 64-bit code's 62): ki h = 1e-15
    # count per count at F = 15: 1e-15 2^15 2^46 = 2305.8 -> 2306, at least 2^10 (a shift of 49 would fit 15 bits)
    c = quantise_pid(p_settings(ki_per_s=1e-14, anti_windup="clamping"), input_per_count=1.0, output_per_count=1.0,
                     word_bits=32, input_limit_count=16)
    assert (c.state_frac_bits, c.ki_shift, c.ki_mant) == (15, 46, 2306)


def test_settings_refusals_and_edges_word_for_word():
    from compensator.firmware.pid import FloatPid, discretise_pid

    ok = dict(kp=1.0, ki_per_s=0.5, kd_s=0.0, sample_time_s=0.1, out_min=-1.0, out_max=1.0)
    assert PidSettings(**{**ok, "derivative_filter_n": 1.0}).derivative_filter_n == 1.0  # N = 1 is a filter too
    assert PidSettings(**{**ok, "kp": 0.0, "ki_per_s": -1.0}).ki_per_s == -1.0  # a zero gain has no sign
    cases = [(dict(rate_limit_per_s=0.0), "PID setting rate_limit_per_s: must be positive and finite or None, got 0.0"),
             (dict(anti_windup="freeze"),
              "PID setting anti_windup: must be one of back_calculation, clamping, none, got 'freeze'"),
             (dict(kp=1.0, ki_per_s=-0.5), "PID settings kp, ki_per_s, kd_s: non-zero gains must share one sign "
                                           "(negative gains make a reverse-acting controller)"),
             (dict(kp=0.0, ki_per_s=0.0), "PID settings kp, ki_per_s, kd_s: at least one gain must be non-zero")]
    for kw, reason in cases:
        assert refusal(lambda: PidSettings(**{**ok, **kw})).reason == reason
    # without a derivative gain there is no filter: Tf = 0, ad = 0
    d = discretise_pid(PidSettings(**ok))
    assert (d.derivative_filter_s, d.ad, d.bd) == (0.0, 0.0, 0.0)
    assert refusal(lambda: FloatPid({"kp": 1.0})).reason == "settings: need a PidSettings, got dict"


def test_float_pid_fresh_state_and_refusals():
    from compensator.firmware.pid import FloatPid

    pid = FloatPid(PidSettings(kp=1.0, ki_per_s=0.5, kd_s=0.0, sample_time_s=0.1, out_min=-1.0, out_max=1.0))
    assert pid.output == 0.0 and pid.manual is False  # documented: 0.0 before the first step, automatic
    pid.set_manual(0.5)
    pid.reset()
    assert pid.manual is False and pid.output == 0.0
    assert refusal(lambda: pid.reset(math.nan)).reason == "reset output: must be finite, got nan"
    for r, y in (([math.nan, 0.0], [0.0, 0.0]), ([0.0, 0.0], [0.0, math.inf])):  # either sequence alone
        assert refusal(lambda: pid.run(r, y)).reason == "setpoint/measurement: must be finite"
    assert refusal(lambda: pid.run([0.0, 0.0, 0.0], [0.0] * 4)).reason == (
        "setpoint and measurement: need one-dimensional sequences of equal length, got shapes (3,) and (4,)")
    assert refusal(lambda: pid.run(np.zeros((2, 2)), np.zeros((2, 2)))).reason == (
        "setpoint and measurement: need one-dimensional sequences of equal length, got shapes (2, 2) and (2, 2)")
    assert refusal(lambda: pid.run([0.0], [0.0], manual=[True])).reason == (
        "manual_output: required when a manual schedule is given")
    fixed = FixedPid(hand_coefficients())
    assert refusal(lambda: fixed.run([0.5], [0])).reason == "setpoint_count: need integer counts, got dtype float64"
    assert refusal(lambda: fixed.run([0], [0.5])).reason == "measurement_count: need integer counts, got dtype float64"
    assert refusal(lambda: fixed.run([0], [0], manual=[True], manual_output_count=[1.5])).reason == (
        "manual_output_count: need integer counts, got dtype float64")
    empty = fixed.run(np.array([], dtype=np.int64), np.array([], dtype=np.int64))  # keeps the record's integer type
    assert [a.dtype for a in empty] == [np.dtype(np.int64)] * 3 and [a.size for a in empty] == [0, 0, 0]


def test_float_clamping_integrates_a_small_increment_away_from_the_limit():
    # Clamping holds only when the increment drives further into the limit. With the proportional term on -y only
    # (setpoint weight 0), kp = 1, ki h = 0.25, limits 0..10: r = 2, y = 1 gives v = -1 below the lower limit (u = 0)
    # while the error 1 and its increment 0.25 (less than one unit) point back inside: integrated, I = 0.25. Then
    # r = 0, y = 1: v = -1 + 0.25 = -0.75 < 0 and the increment -0.25 drives further: held.
    from compensator.firmware.pid import FloatPid

    pid = FloatPid(PidSettings(kp=1.0, ki_per_s=2.5, kd_s=0.0, sample_time_s=0.1, out_min=0.0, out_max=10.0,
                               anti_windup="clamping", setpoint_weight=0.0))
    assert pid.step(2.0, 1.0) == 0.0 and pid.integrator == 0.25
    assert pid.step(0.0, 1.0) == 0.0 and pid.integrator == 0.25


def test_quantise_pid_records_rate_step_and_absent_terms_by_hand():
    q = quantise_pid
    # no derivative, no tracking (clamping), no rate limit: zero mantissas with zero shifts, a zero exact rate step
    c = q(p_settings(ki_per_s=0.5, anti_windup="clamping"), input_per_count=1.0, output_per_count=1.0)
    assert (c.ad_mant, c.ad_shift, c.track_mant, c.track_shift, c.rate_step_q, c.rate_step_count) == (0, 0, 0, 0, 0,
                                                                                                      0.0)
    assert c.sample_time_s == 0.1
    # rate 5 /s x 0.1 s / 0.001 per count = 500 counts a step, in Q.16 (limits +-2000 counts): 500 x 2^16 exactly
    c = q(p_settings(out_min=-2.0, out_max=2.0, rate_limit_per_s=5.0), input_per_count=0.001, output_per_count=0.001)
    assert (c.state_frac_bits, c.rate_step_q, c.rate_step_count) == (16, 500 << 16, 500.0)
    # the smallest rate step, one state LSB: 2^-15 count a step at F = 15 (limits 0..4095, one count per unit)
    c = q(p_settings(rate_limit_per_s=10 * 2.0 ** -15), input_per_count=1.0, output_per_count=1.0)
    assert (c.state_frac_bits, c.rate_step_q) == (15, 1)
    e = refusal(lambda: q(p_settings(rate_limit_per_s=10 * 2.0 ** -17), input_per_count=1.0, output_per_count=1.0))
    assert e.reason == ("rate_limit_per_s: 7.62939453125e-05 per second is below the fixed-point resolution "
                        "(2^-15 count per step)")
    # a rate step beyond the state range is capped: at INT32_MAX (64 bits) or at 2^28 (32 bits)
    fast = p_settings(rate_limit_per_s=1e12)
    assert q(fast, input_per_count=1.0, output_per_count=1.0).rate_step_q == INT32_MAX
    assert q(fast, input_per_count=1.0, output_per_count=1.0, word_bits=32, input_limit_count=16).rate_step_q == 1 << 28


def test_32_bit_variant_gives_up_one_fraction_bit_at_a_time():
    # kp = kp b = 0.5 over +-8192 counts: P reaches (16384 + 16384) 8192 + 1 = 2^28 + 1 state units at F = 15 (refused)
    # and (16384 + 16384) 8192 / 2 + 1 = 2^27 + 1 at F = 14 (mantissa 16384 with a shift of 1): F = 14.
    c = quantise_pid(p_settings(), input_per_count=1.0, output_per_count=1.0, word_bits=32, input_limit_count=8192)
    assert (c.state_frac_bits, c.kp_mant, c.p_shift) == (14, 16384, 1)


def test_render_pid_c_refusals_word_for_word():
    from compensator.firmware.pid_c import render_pid_c

    c = hand_coefficients()
    e = refusal(lambda: render_pid_c(c, name="Cooler"))
    assert (e.key, e.reason) == ("name", "name 'Cooler': must be a C identifier of at most 31 lower-case letters, "
                                         "digits and underscores, starting with a letter")
    e = refusal(lambda: render_pid_c({"kp_mant": 1}, name="cooler_pid"))
    assert e.reason == "coeffs: need FixedPidCoefficients, got dict"
