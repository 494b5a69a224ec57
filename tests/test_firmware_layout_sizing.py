"""The table sizing searches on small hand-made targets, against plain-Python greedy searches and hand calculations.

Each reference below is written again with Python integers, ``round`` (half to even, as numpy's ``rint``) and
floor division, not with the tool's numpy shifts; the targets are a few dozen codes, so every test takes
milliseconds.
"""

import math

import numpy as np
import pytest

from compensator.firmware import layout_sizing as S
from compensator.firmware.layouts import Target, TableError, polynomial_value

LO = 100  # first ADC code of every hand-made target


def target(exact, *, bound, dac_full=4095, ext=None):
    """A target over codes LO .. LO + len(exact) - 1, extrapolated with the end slopes of ``exact``."""
    exact = np.asarray(exact, dtype=float)
    n = exact.size
    ext_lo = float(exact[1] - exact[0]) if ext is None else ext
    ext_hi = float(exact[-1] - exact[-2]) if ext is None else ext
    bound = np.broadcast_to(np.asarray(bound, dtype=float), (n,)).copy()
    return Target(codes=np.arange(LO, LO + n, dtype=np.int64), temp_c=np.zeros(n), exact=exact, bound_lsb=bound,
                  gain_pct_per_lsb=np.ones(n), ext_lo=ext_lo, ext_hi=ext_hi, dac_full=dac_full)


def exact_at(t, code):
    """The target's value at any integer code, extrapolated linearly beyond its ends (plain Python)."""
    lo, hi = LO, LO + t.exact.size - 1
    if code < lo:
        return float(t.exact[0]) + (code - lo) * t.ext_lo
    if code > hi:
        return float(t.exact[-1]) + (code - hi) * t.ext_hi
    return float(t.exact[code - lo])


def node(t, code, frac):
    return min(max(round(exact_at(t, code) * 2 ** frac), 0), t.dac_full * 2 ** frac)


def rnd(p, k):
    """floor((p + 2^(k-1)) / 2^k), and p for k = 0."""
    return (p + (2 ** k) // 2) // 2 ** k


def c_bits(v):
    return next(b for b in (8, 16, 32, 64) if v < 2 ** b)


def meets(t, got, start=0):
    return all(abs(g - float(t.exact[start + j])) <= float(t.bound_lsb[start + j]) for j, g in enumerate(got))


def uniform_reference(t, value_bits):
    """Widest power-of-two spacing that meets the bound, for nodes with 0 and 8 fractional bits; fewer bytes."""
    n = t.exact.size
    best = None
    for frac in (0, 8):
        node_bits = max(value_bits, c_bits((t.dac_full + 1) * 2 ** frac - 1))
        for shift in range(max(1, (n - 1).bit_length()), -1, -1):
            y = [node(t, LO + j * 2 ** shift, frac) for j in range(((n - 1) >> shift) + 2)]
            got = []
            for d in range(n):
                i, r = d // 2 ** shift, d % 2 ** shift
                got.append(rnd(y[i] + rnd((y[i + 1] - y[i]) * r, shift), frac))
            if meets(t, got):
                if best is None or len(y) * node_bits // 8 < best[0]:
                    best = (len(y) * node_bits // 8, shift, frac, node_bits, y)
                break
    return best


def segmented_reference(t, frac):
    """Greedy power-of-two segments: from each node the widest width (but not twice what is left) that meets."""
    n = t.exact.size
    top = max(1, (n - 1).bit_length())
    start, y_start = 0, node(t, LO, frac)
    ys, ks = [y_start], []
    while start < n:
        for k in range(top, -1, -1):
            if k and 2 ** k >= 2 * (n - start):
                continue
            y_end = node(t, LO + start + 2 ** k, frac)
            got = [rnd(y_start + rnd((y_end - y_start) * r, k), frac) for r in range(min(2 ** k, n - start))]
            if meets(t, got, start):
                break
        ys.append(y_end)
        ks.append(k)
        start, y_start = start + 2 ** k, y_end
    return ys, ks


# A parabola over 33 codes: f(d) = 200 + 3 d + d^2 / 16 DAC codes (f'' = 1/8 per code^2).
PARABOLA = [200 + 3 * d + d * d / 16 for d in range(33)]


@pytest.mark.parametrize("bound", [0.5, 0.75, 1.0, 2.0, 4.0, 40.0])
def test_uniform_sizing_is_the_plain_python_search(bound):
    t = target(PARABOLA, bound=bound)
    fit = S.size_uniform(t, 16)
    nbytes, shift, frac, node_bits, y = uniform_reference(t, 16)
    assert (fit.shift, fit.node_frac_bits, fit.node_type_bits) == (shift, frac, node_bits)
    assert fit.y.tolist() == y and fit.y.size * fit.node_type_bits // 8 == nbytes and fit.layout == "uniform"
    # The accumulator: the largest |Y[i+1] - Y[i]| (2^s - 1) + 2^s, or the largest node plus 2^G; these fit 32 bits.
    assert fit.acc_type_bits == 32


def test_uniform_sizing_by_hand_on_a_line():
    # f(d) = 7 + 2 d over 17 codes (d = 0 .. 16): the widest spacing tried is 2^5 = 32 (16 has 5 bits), so two
    # plain DAC nodes, at d = 0 and 32 (extrapolated): 7 and 71, interpolate it exactly (7 + floor((64 r + 16) / 32)
    # = 7 + 2 r): 2 nodes of 16 bits.
    t = target([7 + 2 * d for d in range(17)], bound=0.5)
    fit = S.size_uniform(t, 16)
    assert (fit.shift, fit.node_frac_bits, fit.node_type_bits, fit.y.tolist()) == (5, 0, 16, [7, 71])


def test_uniform_sizing_takes_fractional_nodes_when_they_are_smaller():
    # f = d / 3 + 0.25: plain DAC nodes round by up to half an LSB, so at a bound of 0.55 LSB only a node at every
    # code works (34 nodes, 68 bytes); nodes with 8 fractional bits (32-bit) meet it 8 codes apart (6 nodes,
    # 24 bytes). The plain-Python search finds the same.
    t = target([d / 3 + 0.25 for d in range(33)], bound=0.55)
    fit = S.size_uniform(t, 16)
    assert uniform_reference(t, 16)[1:4] == (fit.shift, fit.node_frac_bits, fit.node_type_bits)
    assert fit.node_frac_bits == 8 and fit.node_type_bits == 32 and fit.y.size * 4 < 2 * 34


def test_uniform_sizing_refuses_an_impossible_bound():
    # Exact values half-way between DAC codes, with a bound below half an LSB: even a node at every code misses.
    # (the firmware's output is a whole DAC code, 0.5 LSB from 10.5 whatever the nodes hold).
    t = target([10.5] * 9, bound=0.4, ext=0.0)
    with pytest.raises(TableError) as exc:
        S.size_uniform(t, 16)
    assert exc.value.term == "DAC quantisation"
    assert exc.value.reason == "DAC quantisation: no uniform table meets the bound even with one node per ADC code"
    assert S.size_uniform(target([10.5] * 9, bound=0.5, ext=0.0), 16).shift == 4  # at 0.5 LSB one spacing does


@pytest.mark.parametrize("bound", [0.5, 0.75, 1.0, 3.0])
@pytest.mark.parametrize("frac", [0, 8])
def test_segmented_placement_is_the_plain_python_greedy(bound, frac):
    t = target(PARABOLA, bound=bound)
    y, k = S._place_segmented(t, frac)
    ys, ks = segmented_reference(t, frac)
    assert y.tolist() == ys and k.tolist() == ks


def test_segmented_sizing_keeps_the_format_with_fewer_bytes():
    # Bytes: 16-bit nodes (or 32-bit with 8 fractional bits) plus one byte per segment width.
    # (The last three are close calls: 8 fractional bits win by 14 to 9 bytes; plain nodes by 11 to 14; a tie
    # at 29 bytes, which goes to plain nodes, the first format tried.)
    line = [d / 3 + 0.25 for d in range(17)]
    for exact, bound in ((PARABOLA, 0.75), ([d / 3 + 0.25 for d in range(33)], 0.55), (line, 0.55),
                         ([d / 3 + d * d / 64 + 0.25 for d in range(17)], 1.0),
                         ([d / 3 + d * d / 256 + 0.25 for d in range(33)], 0.52)):
        t = target(exact, bound=bound)
        fit = S.size_segmented(t, 16)
        sizes = {}
        for frac, node_bits in ((0, 16), (8, 32)):
            ys, ks = segmented_reference(t, frac)
            sizes[frac] = (len(ys) * node_bits // 8 + len(ks), ys, ks, node_bits)
        frac = min(sizes, key=lambda f: (sizes[f][0], f))
        assert fit.layout == "segmented" and fit.node_frac_bits == frac and fit.y.tolist() == sizes[frac][1]
        assert fit.segment_shift.tolist() == sizes[frac][2] and fit.node_type_bits == sizes[frac][3]
        assert fit.acc_type_bits == 32


def test_a_wide_dac_needs_a_64_bit_accumulator():
    # A 24-bit DAC, f = (2^20 + 1/3) d over d = 0 .. 8, bound 0.34 LSB: plain nodes need one per code (their
    # rounding alone is up to 1/3 LSB), nodes with 8 fractional bits meet it 8 codes apart. Those reach
    # (2^23 + 8/3) 2^8 > 2^31, so the accumulator is 64 bits.
    full = (1 << 24) - 1
    t = target([((1 << 20) + 1 / 3) * d for d in range(9)], bound=0.34, dac_full=full)
    uni = S.size_uniform(t, 32)
    assert (uni.node_frac_bits, uni.node_type_bits, uni.shift, uni.acc_type_bits) == (8, 32, 3, 64)
    seg = S.size_segmented(t, 32)
    assert seg.node_frac_bits == 8 and seg.acc_type_bits == 64
    # With plain 16-bit nodes of a 12-bit DAC, 32 bits hold everything.
    assert S.size_uniform(target(PARABOLA, bound=1.0), 16).acc_type_bits == 32


def segment_line(t, start, stop, frac_bits):
    """The minimax line of ``exact[start:stop]`` rounded as the firmware stores it (chord slope, centred offset)."""
    f = [float(v) for v in t.exact[start:stop]]
    m = len(f) - 1
    chord = (f[-1] - f[0]) / m if m else 0.0
    resid = [f[j] - (f[0] + chord * j) for j in range(len(f))]
    y0 = min(max(round(f[0] + 0.5 * (max(resid) + min(resid))), 0), t.dac_full)
    s = round(chord * 2 ** frac_bits)
    return y0, s, [y0 + rnd(s * j, frac_bits) for j in range(len(f))]


def test_segment_line_by_hand():
    # f(d) = 10 + d^2 / 8 at d = 0 .. 4 (the last segment: both ends included): 10, 10.125, 10.5, 11.125, 12. The
    # chord's slope is 2 / 4 = 0.5; residuals from the chord 0, -0.375, -0.5, -0.375, 0, so the line is moved by
    # half of (0 + -0.5): y0 = rint(9.75) = 10; slope 0.5 x 2^4 = 8. The firmware gives 10 + floor((8 d + 8) / 16)
    # = 10, 11, 11, 12, 12: errors 0, 0.875, 0.5, 0.875, 0 LSB.
    t = target([10 + d * d / 8 for d in range(9)], bound=0.875)
    assert S._segment_ok(t, 0, 4, True, 4, 1000) == (True, 10, 8)
    assert S._segment_ok(target([10 + d * d / 8 for d in range(9)], bound=0.87), 0, 4, True, 4, 1000)[0] is False
    # Not the last segment: codes 0 .. 3 only, chord from f(0) to f(3) = 11.125: slope 0.375, residuals 0, -0.25,
    # -0.25, 0, y0 = rint(9.875) = 10, slope 6.
    assert S._segment_ok(t, 0, 4, False, 4, 1000) == (True, 10, 6)
    assert segment_line(t, 0, 4, 4)[:2] == (10, 6)
    # A slope beyond its C type is refused (8 > 7; 8 itself is allowed), a line below code 0 is held at 0 and one
    # above full scale at full scale.
    assert S._segment_ok(t, 0, 4, True, 4, 7)[0] is False and S._segment_ok(t, 0, 4, True, 4, 8)[0] is True
    assert S._segment_ok(target([4095.7] * 5, bound=1.0, ext=0.0), 0, 4, True, 4, 1000)[:2] == (True, 4095)
    low = target([-3 + d for d in range(9)], bound=5.0)
    assert S._segment_ok(low, 0, 4, True, 4, 1000)[1] == 0


@pytest.mark.parametrize("bound", [0.6, 1.0, 2.5])
def test_optimised_breakpoints_are_greedy_and_maximal(bound):
    # Every segment (but the last) meets the bound with the line the firmware stores, and one code more would not:
    # the greedy search gives each segment the most codes it can have. Checked with the plain-Python line.
    t = target([200 + d * d / 16 + (d * d * d) / 2000 for d in range(64)], bound=bound)
    frac_bits, slope_max = 8, (1 << 15) - 1
    x, y, s = S._place_optimised(t, frac_bits, slope_max)
    starts = (x - LO).tolist()
    ends = starts[1:] + [t.exact.size]
    assert starts[0] == 0 and all(b > a for a, b in zip(starts, starts[1:]))
    for j, (a, b) in enumerate(zip(starts, ends)):
        last = j == len(starts) - 1
        y0, s0, got = segment_line(t, a, b + 1 if last else b, frac_bits)
        assert meets(t, got[:b - a], a) and (int(y[j]), int(s[j])) == (y0, s0)
        if not last:
            assert not meets(t, segment_line(t, a, b + 1, frac_bits)[2], a)  # one code more misses


def test_optimised_sizing_bytes_and_types():
    # Breakpoint (16 bits) + value (16 bits) + slope (16 or 32 bits): both slope widths give the same breakpoints
    # here, so the 16-bit slopes (6 bytes a row) are kept.
    t = target([200 + d * d / 16 for d in range(64)], bound=1.0)
    fit = S.size_optimised(t, 16, 16)
    assert fit.slope_type_bits == 16 and fit.node_type_bits == 16 and fit.acc_type_bits == 32
    assert fit.layout == "optimised"
    # F: as many bits as the steepest chord leaves in the slope type, at most bit_length(span) + 2 = 8.
    assert fit.slope_frac_bits == 8
    x, y, s = S._place_optimised(t, 8, (1 << 15) - 1)
    assert fit.x.tolist() == x.tolist() and fit.slope.tolist() == s.tolist()


def test_optimised_single_code_and_flat_end():
    # One code: a flat segment at its rounded value.
    t = target([5.2], bound=0.5, ext=0.0)
    x, y, s = S._place_optimised(t, 4, 1000)
    assert (x.tolist(), y.tolist(), s.tolist()) == ([LO], [5], [0])
    with pytest.raises(TableError) as exc:
        S._place_optimised(target([5.5], bound=0.4, ext=0.0), 4, 1000)
    assert exc.value.term == "DAC quantisation"
    assert exc.value.reason == "DAC quantisation: a single code cannot meet the bound"
    # Rounded half to even (5.5 -> 6: an error of exactly the bound 0.5 meets it) and held within 0 .. full scale.
    for exact, full, want in ((5.5, 4095, 6), (-0.3, 4095, 0), (0.2, 4095, 0), (4095.4, 4095, 4095), (9.6, 9, 9)):
        assert S._place_optimised(target([exact], bound=0.6, ext=0.0, dac_full=full), 4, 1000)[1].tolist() == [want]
    assert S._place_optimised(target([5.5], bound=0.5, ext=0.0), 4, 1000)[1].tolist() == [6]
    assert S._place_optimised(target([-0.7], bound=1.0, ext=0.0), 4, 1000)[1].tolist() == [0]  # not -1


def test_minimax_line_of_a_parabola_by_hand():
    # The best uniform line to x^2 on [-1, 1] is 1/2 with error 1/2 (Chebyshev equioscillation at -1, 0, 1).
    u = np.linspace(-1.0, 1.0, 201)
    c, err = S._minimax(np.vander(u, 2, increasing=True), u * u, np.ones(u.size))
    assert c == pytest.approx([0.5, 0.0], abs=1e-9) and err == pytest.approx(0.5, abs=1e-9)
    # Weights scale the error; a held part is subtracted first (x^2 - x^2 leaves zero to fit).
    c, err = S._minimax(np.vander(u, 2, increasing=True), u * u, np.full(u.size, 4.0))
    assert err == pytest.approx(2.0, abs=1e-9)
    c, err = S._minimax(np.vander(u, 2, increasing=True), u * u, np.ones(u.size), fixed=u * u)
    assert c == pytest.approx([0.0, 0.0], abs=1e-9) and err == pytest.approx(0.0, abs=1e-9)


def test_minimax_line_of_a_falling_exponential_by_hand():
    # The best uniform line to a convex f on [a, b] has the chord's slope m and errors of equal size at a, b and
    # the point c where f'(c) = m (Chebyshev equioscillation). For f = exp(-x) on [0, 1]: m = 1/e - 1 < 0,
    # c = -ln(-m) = 0.458675, and the error is E = (f(0) - f(c) + m c) / 2 = 0.038971 (worked by hand from these
    # formulas).
    # The slope is negative: the fit must not hold its coefficients at or above zero.
    m = math.exp(-1.0) - 1.0
    c = -math.log(-m)
    e = (1.0 - math.exp(-c) + m * c) / 2.0
    assert (c, e) == pytest.approx((0.458675, 0.038971), abs=1e-6)
    u = np.linspace(0.0, 1.0, 4001)
    coef, err = S._minimax(np.vander(u, 2, increasing=True), np.exp(-u), np.ones(u.size))
    # on the grid the error is the continuous one less at most f'' h^2 / 8 (h = 1/4000)
    assert err == pytest.approx(e, abs=1e-7) and err <= e + 1e-12
    assert coef == pytest.approx([1.0 - e, m], abs=1e-6)


def _interpolation_intermediates(y, shifts, frac):
    """Every value the C evaluation of a uniform or segmented table forms, in plain Python integers."""
    seen = []
    for i, k in enumerate(shifts):
        y0, dy = y[i], y[i + 1] - y[i]
        for r in range(2 ** k):
            p = dy * r
            v = y0 + (p + (2 ** k) // 2) // 2 ** k
            seen += [y0, dy, p, p + (2 ** k) // 2, v, v + (2 ** frac) // 2]
    return max(abs(v) for v in seen)


@pytest.mark.parametrize("y, shifts, frac, over", [
    # rising steps dominate: 5000 x (2^4 - 1) + 2^3 = 75008 exactly
    ([1000, 5000, 2000, 7000], [3, 2, 4], 0, 0),
    # the same at one spacing (uniform): 5000 x 7 + 4 = 35004
    ([1000, 5000, 2000, 7000], [3, 3, 3], 0, 0),
    # a falling step dominates: the product 6000 x 15 = 90000 is formed, the bound says 90000 + 2^3
    ([7000, 1000, 1200], [4, 1], 0, 8),
    # one-code segments (k = 0) with 8 fraction bits: the largest node (not the last) plus 2^7
    ([256 * 900, 256 * 4000, 256 * 3000], [0, 0], 8, 0),
])
def test_interpolation_accumulator_against_every_intermediate(y, shifts, frac, over):
    # The bound must hold every intermediate (brute force over every segment and remainder), and waste no more than
    # the rounding term of a falling step.
    y = np.array(y, dtype=np.int64)
    k = shifts[0] if len(set(shifts)) == 1 else np.array(shifts, dtype=np.int64)
    bound = S._interpolation_acc_max(y, k, frac)
    assert bound == _interpolation_intermediates(y.tolist(), shifts, frac) + over


@pytest.mark.parametrize("y, slope, lengths, frac_bits, over", [
    # a rising row dominates: 700 x (15 - 1) + 2^3 = 9808 exactly
    ([100, 3000, 2000], [300, 700, 50], [10, 15, 5], 4, 0),
    # a falling row: the product 700 x 14 = 9800 is formed, the bound says 9800 + 2^3
    ([100, 3000, 2000], [300, -700, 50], [10, 15, 5], 4, 8),
    # flat rows under a large value: 60000 + floor((2 x 9 + 8) / 16) = 60001 reached, the bound allows one more
    ([60000, 3000], [2, -1], [10, 5], 4, 1),
])
def test_breakpoint_accumulator_against_every_intermediate(y, slope, lengths, frac_bits, over):
    seen = []
    for y0, s0, n in zip(y, slope, lengths):
        for d in range(n):
            p = s0 * d
            seen += [p, p + 2 ** frac_bits // 2, y0 + (p + 2 ** frac_bits // 2) // 2 ** frac_bits]
    bound = S._breakpoint_acc_max(np.array(y), np.array(slope), np.array(lengths), frac_bits)
    assert bound == max(abs(v) for v in seen) + over


def test_horner_bound_against_every_intermediate():
    # The bound must be at least every |acc x| the Horner evaluation forms, over every x within +-x_max.
    rng = np.random.default_rng(7)
    for _ in range(20):
        coeff = [int(v) for v in rng.integers(-30000, 30000, size=4)]
        shifts = [int(v) for v in rng.integers(0, 6, size=3)]
        x_max = int(rng.integers(1, 200))
        worst = 0
        for x in range(-x_max, x_max + 1):
            acc = coeff[-1]
            for j in range(len(coeff) - 2, -1, -1):
                worst = max(worst, abs(acc * x))
                acc = coeff[j] + (acc * x) // 2 ** shifts[j]
            worst = max(worst, abs(acc))
        bound = S._horner_bound(coeff, shifts, x_max)
        assert worst <= bound
    # By hand: C = (1, 2), shift 0, x_max 3: |2 x| <= 6, acc <= 1 + 6 + 1 = 8.
    assert S._horner_bound([1, 2], [0], 3) == 8


def test_polynomial_sizing_by_hand():
    # f(x) = 1000 + x / 2 + x^2 / 64 at x = -32 .. 32 (around the centre code). A line misses by its minimax
    # error (32^2 / 64) / 2 = 8 LSB, far above the bound of 1 LSB. The constant term is always held in 32 bits
    # (it carries the DAC code and its fraction bits); the quadratic's other coefficients are exact binary
    # fractions that 16 bits hold, so the smallest layout is 32 + 16 + 16 bits: 8 bytes, degree 2. Its shifts:
    # Q_2 = 20 (1/64 x 2^20 = 16384, the most a 16-bit word allows for 64 = (1/64) 2^12 in x / 2^6), Q_1 = 15
    # (0.5 x 2^15 = 16384) and Q_0 = min(21, Q_1) = 15 (1000 x 2^15 = 32768000).
    t = target([1000 + x / 2 + x * x / 64 for x in range(-32, 33)], bound=1.0)
    fit = S.size_polynomial(t, 16)
    assert fit.y.size == 3 and tuple(fit.coeff_type_bits) == (32, 16, 16) and fit.center_code == LO + 32
    assert fit.layout == "polynomial" and fit.acc_type_bits == 64 and fit.node_type_bits == 0
    assert (fit.y.tolist(), fit.coeff_shift.tolist(), fit.node_frac_bits) == ([32768000, 16384, 16384], [0, 5], 15)
    got = polynomial_value(fit.y, fit.coeff_shift, t.codes - fit.center_code, fit.node_frac_bits)
    assert meets(t, got.tolist())
    # Each coefficient stands for the exact one: C_j 2^-Q_j (Q_0 = G, Q_(j+1) = Q_j + shift_j).
    q = [fit.node_frac_bits]
    for sh in fit.coeff_shift.tolist():
        q.append(q[-1] + sh)
    assert [int(c) / 2 ** qj for c, qj in zip(fit.y.tolist(), q)] == pytest.approx([1000, 0.5, 1 / 64], rel=2e-4)
    # A degree cap of 1 leaves no polynomial.
    with pytest.raises(TableError) as exc:
        S.size_polynomial(t, 16, max_degree=1)
    assert (exc.value.term, exc.value.reason) == ("DAC quantisation",
                                                  "DAC quantisation: no polynomial up to degree 1 meets the bound")


def test_polynomial_sizing_needs_room_for_rounding():
    # The fit aims 0.6 LSB inside the bound; a bound of 0.6 LSB leaves nothing.
    t = target([1000 + x / 2 for x in range(-8, 9)], bound=0.6)
    with pytest.raises(TableError) as exc:
        S.size_polynomial(t, 16)
    assert exc.value.term == "DAC quantisation"
    assert exc.value.reason == "DAC quantisation: the bound leaves no room for a polynomial's rounding"
    fit = S.size_polynomial(target([1000 + x / 2 for x in range(-8, 9)], bound=0.61), 16)
    assert fit.y.size == 2  # a line fits a line


def test_optimised_slope_formats_by_hand():
    # The fraction bits F of a slope type of w bits: floor(log2((2^(w-1) - 1) / (2 max|f'| + 1))), at most
    # bit_length(span) + 2. A line of 5000 DAC codes per code over 9 codes (span 8: at most 6): 16 bits leave
    # floor(log2(32767 / 10001)) = 1 bit, and the line is one row, slope 10000 (6 bytes); 32 bits would give F = 6
    # and 8 bytes, so the 16-bit slope is kept. At 10000 codes per code 16 bits leave no fraction bit
    # (log2(32767 / 20001) < 1) and 32-bit slopes are used: F = min(16, 6) = 6, slope 10000 x 64.
    wide = (1 << 24) - 1
    fit = S.size_optimised(target([5000 * d + 100 for d in range(9)], bound=0.5, dac_full=wide), 16, 32)
    assert (fit.slope_type_bits, fit.slope_frac_bits, fit.x.tolist(), fit.y.tolist(), fit.slope.tolist()) == (
        16, 1, [LO], [100], [10000])
    assert fit.acc_type_bits == 32  # 10000 x 9 + 2^1 < 2^31
    fit = S.size_optimised(target([10000 * d + 100 for d in range(9)], bound=0.5, dac_full=wide), 16, 32)
    assert (fit.slope_type_bits, fit.slope_frac_bits, fit.slope.tolist()) == (32, 6, [640000])
    # One and two codes: F = min(room, bit_length(max(span, 1)) + 2) = 3.
    one = S.size_optimised(target([5.2], bound=0.5, ext=0.0), 16, 16)
    assert (one.slope_type_bits, one.slope_frac_bits, one.x.tolist(), one.y.tolist(), one.slope.tolist()) == (
        16, 3, [LO], [5], [0])
    two = S.size_optimised(target([5.0, 6.0], bound=0.5), 16, 16)
    assert (two.slope_frac_bits, two.slope.tolist()) == (3, [8])


def test_optimised_sizing_refusal_names_the_term():
    # Values half-way between DAC codes and a bound below half an LSB: no breakpoint layout of either slope width.
    with pytest.raises(TableError) as exc:
        S.size_optimised(target([10.5] * 5, bound=0.4, ext=0.0), 16, 16)
    assert exc.value.term == "DAC quantisation"
    assert exc.value.reason == "DAC quantisation: no breakpoint layout meets the bound"


@pytest.mark.parametrize("top, acc_bits", [(1 << 23, 64), ((1 << 23) - 1, 32)])
def test_accumulator_width_at_the_node_limit(top, acc_bits):
    # A slow line from 2^23 DAC codes down (a 24-bit DAC), f = top - d / 3, d = 0 .. 8, at 0.34 LSB: nodes with 8
    # fractional bits 8 codes apart (12 bytes; plain ones would need one per code). The accumulator holds a node
    # plus the rounding term 2^7 (half of 2^8): 2^23 x 2^8 + 2^7 does not fit int32 (INT32_MAX = 2^31 - 1, ISO C99
    # 7.18.2.1), (2^23 - 1) 2^8 + 2^7 = 2^31 - 2^7 does; the interpolation term (8/3 x 2^8 per node, 7 steps) is far
    # smaller.
    t = target([top - d / 3 for d in range(9)], bound=0.34, dac_full=(1 << 24) - 1)
    for fit in (S.size_uniform(t, 32), S.size_segmented(t, 32)):
        assert fit.node_frac_bits == 8 and int(fit.y.max()) == top << 8
        assert fit.acc_type_bits == acc_bits


def optimised_reference(t, frac_bits):
    """The greedy breakpoints by linear scan: the whole rest as the last segment when it meets the bound, else the
    furthest next breakpoint ``end <= n - 2`` with codes ``start .. end - 1`` within the bound (never a lone last
    code), with the plain-Python line."""
    n, start, rows = t.exact.size, 0, []
    while True:
        if start == n - 1:
            rows.append((start, min(max(round(float(t.exact[start])), 0), t.dac_full), 0))
            return rows
        y0, s, got = segment_line(t, start, n, frac_bits)
        if meets(t, got, start):
            rows.append((start, y0, s))
            return rows
        end = max(e for e in range(start + 1, n - 1) if e == start + 1 or meets(t, segment_line(t, start, e,
                                                                                                  frac_bits)[2], start))
        rows.append((start,) + segment_line(t, start, end, frac_bits)[:2])
        start = end


@pytest.mark.parametrize("n", [6, 9, 10, 17, 18, 21])
@pytest.mark.parametrize("bound", [0.55, 0.8, 1.5])
def test_optimised_placement_is_the_linear_scan(n, bound):
    # Gallop-and-bisect finds what a scan over every end finds where a segment's feasibility is monotonic in its
    # length, as on these parabolas (rounding can break that: on 33 codes at 1.5 LSB, codes 15 .. 22 meet the
    # bound, 15 .. 23 not, 15 .. 24 again, and the search stops at the first miss).
    t = target([30 + 2.5 * d + d * d / 5 for d in range(n)], bound=bound)
    x, y, s = S._place_optimised(t, 6, (1 << 15) - 1)
    rows = optimised_reference(t, 6)
    assert list(zip((x - LO).tolist(), y.tolist(), s.tolist())) == rows


def test_a_one_code_segment_that_cannot_meet_the_bound():
    with pytest.raises(TableError) as exc:
        S._place_optimised(target([10.5, 11.5, 12.5], bound=0.4), 4, 1000)
    assert exc.value.term == "DAC quantisation"
    assert exc.value.reason == "DAC quantisation: a one-code segment cannot meet the bound"


def test_uniform_candidate_nodes_are_plain_codes_by_default():
    t = target(PARABOLA, bound=1.0)
    nodes, ok, worst = S.uniform_candidate(t, 3)
    assert nodes.tolist() == [node(t, LO + 8 * j, 0) for j in range(6)]
    assert (nodes.tolist(), ok, worst) == (S.uniform_candidate(t, 3, 0)[0].tolist(),) + S.uniform_candidate(t, 3, 0)[1:]


def test_uniform_sizing_ties_and_two_codes():
    # f = d / 7 + 0.25 over 9 codes at 0.51 LSB: 4 plain nodes (8 bytes) or 2 nodes with 8 fractional bits
    # (8 bytes): a tie goes to plain nodes, the first format tried.
    t = target([d / 7 + 0.25 for d in range(9)], bound=0.51)
    assert uniform_reference(t, 16)[0] == 8
    fit = S.size_uniform(t, 16)
    assert (fit.node_frac_bits, fit.y.size) == (0, 4)
    # Two codes on a line: the widest spacing tried is 2^1 (a span of 1 has one bit), nodes at d = 0 and 2.
    fit = S.size_uniform(target([3.0, 5.0], bound=0.5), 16)
    assert (fit.shift, fit.y.tolist()) == (1, [3, 7])


def test_segmented_refuses_an_impossible_bound():
    # Values half-way between DAC codes, bound below half an LSB: not even one-code segments (k = 0) meet it.
    with pytest.raises(TableError) as exc:
        S._place_segmented(target([10.5] * 5, bound=0.4, ext=0.0), 0)
    assert exc.value.reason == "DAC quantisation: no segmented table meets the bound"


def test_nodes_are_int64_codes_clipped_at_zero():
    # A line from below code 0: the nodes are held at 0 there, and stored as int64.
    t = target([-3.4 + d for d in range(9)], bound=5.0)
    nodes, _, _ = S.uniform_candidate(t, 2)
    assert nodes.dtype == np.int64 and nodes.tolist() == [0, 1, 5, 9]  # -3.4, 0.6, 4.6, 8.6 rounded
    y, k = S._place_segmented(t, 0)
    assert y.dtype == np.int64 and k.dtype == np.int64 and int(y[0]) == 0


def test_polynomial_degree_2_minimax_of_a_quartic_by_hand():
    # f(x) = 1000 + x / 2 + x^2 / 64 + x^4 / 2^20 at x = -32 .. 32. The x^4 term is at most 1 LSB; its best
    # quadratic on [-32, 32] is 32^2 x^2 / 2^20 - 32^4 / (8 x 2^20) (Chebyshev: x^4 - x^2 + 1/8 = T_4 / 8 on
    # [-1, 1]), 1/8 LSB off. A line misses by 8 LSB, so the polynomial is of degree 2 with coefficients
    # 1000 - 1/8, 1/2 and 1/64 + 1/1024 = 17/1024 (the last one held exactly; the others as well as 32 and 16 bits
    # allow after each refit).
    t = target([1000 + x / 2 + x * x / 64 + x ** 4 / 2 ** 20 for x in range(-32, 33)], bound=1.0)
    fit = S.size_polynomial(t, 16)
    assert fit.y.size == 3
    q = [fit.node_frac_bits]
    for sh in fit.coeff_shift.tolist():
        q.append(q[-1] + sh)
    got = [int(c) / 2 ** qj for c, qj in zip(fit.y.tolist(), q)]
    assert got == pytest.approx([1000 - 1 / 8, 0.5, 17 / 1024], rel=1e-4)


def test_polynomial_fit_keeps_the_margin_for_rounding():
    # f = 1000 + x / 2 + x^2 / 1024 at x = -32 .. 32: the best line misses by (32^2 / 1024) / 2 = 0.5 LSB, more than
    # the 1 - 0.6 = 0.4 LSB the fit may use at a bound of 1 LSB, so a line is not taken although its rounded values
    # might meet the bound: the polynomial is of degree 2.
    t = target([1000 + x / 2 + x * x / 1024 for x in range(-32, 33)], bound=1.0)
    assert S.size_polynomial(t, 16).y.size == 3


def test_polynomial_takes_a_line_that_leaves_room_for_rounding():
    # f = 1000 + x / 2 + x^2 / 2048 at x = -32 .. 32: the best line misses by (32^2 / 2048) / 2 = 0.25 LSB, within
    # the 1 - 0.6 = 0.4 LSB the fit may use at a bound of 1 LSB (the pair of the test above): a line it is.
    t = target([1000 + x / 2 + x * x / 2048 for x in range(-32, 33)], bound=1.0)
    fit = S.size_polynomial(t, 16)
    got = polynomial_value(fit.y, fit.coeff_shift, t.codes - fit.center_code, fit.node_frac_bits)
    assert fit.y.size == 2 and meets(t, got.tolist())


@pytest.mark.parametrize("a1, c1", [(2.0 ** -12, 256), (0.0, 0)])
def test_polynomial_shifts_capped_by_the_next_coefficient(a1, c1):
    # f = 1000 + a1 x + x^2 / 64 at x = -32 .. 32 (three coefficients, the constant in 32 bits, 8 bytes; a line
    # misses by 8 LSB). Q_2 = 20 as in test_polynomial_sizing_by_hand. A 16-bit word could hold 2^-12 (or 0) with
    # far more than 20 fraction bits, but Q_1 may not pass Q_2 (every Horner shift >= 0): Q_1 = 20, C_1 = a1 2^20.
    # The constant could take 21 bits in 32 (1000 x 2^21 < 2^31) but Q_0 <= Q_1: Q_0 = 20, C_0 = 1000 x 2^20.
    t = target([1000 + a1 * x + x * x / 64 for x in range(-32, 33)], bound=1.0)
    fit = S.size_polynomial(t, 16)
    assert (fit.y.tolist(), fit.coeff_shift.tolist(), fit.node_frac_bits) == ([1000 << 20, c1, 16384], [0, 0], 20)


def test_polynomial_layout_details_by_hand():
    quad = [1000 + x / 2 + x * x / 64 for x in range(-32, 33)]
    # Degrees up to 2 are enough for a quadratic.
    assert S.size_polynomial(target(quad, bound=1.0), 16, max_degree=2).y.size == 3
    # A constant needs a degree-1 polynomial (no degree 0 is offered): 32 + 16 bits, the slope 0.
    # A zero top coefficient keeps q = 0, so Q_1 = 1 x log2_scale = bit_length(8) = 4 over x = -8 .. 8, and the
    # constant may not pass it: Q_0 = min(floor(log2((2^31 - 1) / 1000)), 4) = 4, C_0 = 1000 x 2^4.
    fit = S.size_polynomial(target([1000.0] * 17, bound=1.0, ext=0.0), 16)
    assert tuple(fit.coeff_type_bits) == (32, 16) and int(fit.y[1]) == 0 and fit.y[0] == 1000 << fit.node_frac_bits
    assert (fit.y.tolist(), fit.coeff_shift.tolist(), fit.node_frac_bits) == ([16000, 0], [0], 4)
    # 64 codes (100 .. 163): the centre is the whole code floor(263 / 2) = 131.
    fit = S.size_polynomial(target([1000 + (x - 31) / 2 for x in range(64)], bound=1.0), 16)
    assert fit.center_code == 131 and isinstance(fit.center_code, int)
    # A large constant (10^6 DAC codes, a 24-bit DAC) takes Q_0 = floor(log2((2^31 - 1) / 10^6)) = 11 bits, fewer
    # than Q_1 = 15 and Q_2 = 20 (test_polynomial_sizing_by_hand): shifts 4 and 5.
    fit = S.size_polynomial(target([10 ** 6 + x / 2 + x * x / 64 for x in range(-32, 33)], bound=1.0,
                                   dac_full=(1 << 24) - 1), 24)
    assert (fit.y.tolist(), fit.coeff_shift.tolist(), fit.node_frac_bits) == ([10 ** 6 << 11, 16384, 16384], [4, 5], 11)


def test_polynomial_fit_samples_long_ranges(monkeypatch):
    # More than 6000 codes: the fit uses 6000 of them, spread evenly (gaps of at most ceil(6400 / 5999) = 2 codes)
    # with both ends included, and every code is checked afterwards; a quadratic over 6401 codes is still held by
    # three coefficients within the bound at every code.
    n = 6401
    t = target([500 + 0.3 * d + (d - 3200) ** 2 / 40000 for d in range(n)], bound=1.0, dac_full=(1 << 16) - 1)
    samples, real_try = [], S._polynomial_try

    def spy(target_, sample, *args):
        samples.append(np.asarray(sample).tolist())
        return real_try(target_, sample, *args)

    monkeypatch.setattr(S, "_polynomial_try", spy)
    fit = S.size_polynomial(t, 16)
    for sample in samples:
        assert len(sample) == 6000 and (sample[0], sample[-1]) == (0, n - 1)
        assert 1 <= min(np.diff(sample)) and max(np.diff(sample)) <= 2
    got = polynomial_value(fit.y, fit.coeff_shift, t.codes - fit.center_code, fit.node_frac_bits)
    assert fit.y.size == 3 and meets(t, got.tolist())


def test_optimised_wide_accumulator_by_hand():
    # A line of 10000 DAC codes per code over 300 codes (a 24-bit DAC): 16-bit slopes leave no fraction bit, so
    # 32-bit ones with F = min(floor(log2((2^31 - 1) / 20001)), bit_length(299) + 2) = min(16, 11) = 11: one row,
    # slope 10000 x 2^11 = 20480000. The accumulator holds |S| x 300 + 2^11 = 6 144 002 048 > 2^31: 64 bits. The
    # values are 32-bit DAC codes.
    fit = S.size_optimised(target([10000 * d + 100 for d in range(300)], bound=0.5, dac_full=(1 << 24) - 1), 16, 32)
    assert (fit.slope_type_bits, fit.slope_frac_bits, fit.slope.tolist()) == (32, 11, [20480000])
    assert (fit.acc_type_bits, fit.node_type_bits) == (64, 32)


@pytest.mark.parametrize("rate, acc_bits", [(3506 + 1 / 3, 32), (3507 + 1 / 3, 64)])
def test_optimised_32_bit_slopes_win_and_their_accumulator_edge(rate, acc_bits):
    # A line of 3506 1/3 (or 3507 1/3) DAC codes per code over 300 codes, a 24-bit DAC, 0.5 LSB. 16-bit slopes get
    # F = floor(log2(32767 / (2 x 3507 + 1))) = 2 bits: the nearest slope is 1/12 code per code off, so the error
    # drifts by (L - 1) / 12 LSB across a row of L codes, more than the 1 LSB between -0.5 and +0.5 once L > 13:
    # at least 300 / 13, so 24 rows of 64 bits. 32-bit slopes get
    # F = min(18, bit_length(299) + 2) = 11 and hold the whole line in one row, S = round(rate x 2^11): 80 bits.
    # The accumulator forms S x 299 + 2^10 at the last code: 7180971 x 299 + 1024 = 2^31 - 372295 fits int32,
    # 7183019 x 299 + 1024 = 2^31 + 240057 does not.
    t = target([rate * d + 100 for d in range(300)], bound=0.5, dac_full=(1 << 24) - 1)
    fit = S.size_optimised(t, 16, 32)
    slope = round(rate * 2 ** 11)
    assert (fit.slope_type_bits, fit.slope_frac_bits, fit.x.tolist(), fit.slope.tolist()) == (32, 11, [LO], [slope])
    assert slope * 299 + 1024 - 2 ** 31 == (-372295 if acc_bits == 32 else 240057)
    assert fit.acc_type_bits == acc_bits
