"""Sizing the table layouts against the gain-error bound (the layouts and their integer evaluation are in
:mod:`compensator.firmware.layouts`, which re-exports these names).

``uniform`` tries every power-of-two spacing and keeps the widest that
meets the bound (for plain DAC codes and for 32-bit nodes with 8 fractional
bits, whichever is smaller). ``segmented`` places nodes greedily: each segment
is the widest power of two that still meets the bound. ``optimised`` places
breakpoints greedily with a minimax line per segment. ``polynomial`` fits a
weighted minimax polynomial (linear programme, scipy's HiGHS) for each degree,
quantises its coefficients one at a time from the highest, refitting the lower
ones after each, and keeps the smallest coefficient set that meets the bound.
Every candidate is then checked with the integer arithmetic of
:mod:`compensator.firmware.layouts` at every ADC code of the range.
"""

from __future__ import annotations

import numpy as np

from compensator.firmware.fixed_point import acc_bits, floor_shift, half, uint_bits
from compensator.firmware.layouts import (
    MAX_POLYNOMIAL_DEGREE,
    UNIFORM_NODE_FRAC_BITS,
    LayoutFit,
    Target,
    TableError,
    _fit,
    polynomial_value,
    uniform_value,
)

__all__ = ["uniform_candidate", "size_uniform", "size_segmented", "size_optimised", "size_polynomial"]

#: Codes at most used for the polynomial fit (all codes are verified afterwards).
_FIT_POINTS = 6000

#: The fit aims this far (DAC LSB) inside the bound: half an LSB for the final rounding plus slack.
_FIT_MARGIN_LSB = 0.6

#: Bound on every intermediate of the integer Horner evaluation.
_HORNER_LIMIT = 1 << 62


def _meets(target: Target, got, lo: int = 0, hi: int | None = None) -> bool:
    sl = slice(lo, hi)
    return bool(np.all(np.abs(got - target.exact[sl]) <= target.bound_lsb[sl]))


def _scaled_nodes(target: Target, codes, frac: int):
    scale = 1 << frac
    return np.clip(np.rint(target.at(codes) * scale), 0, target.dac_full * scale).astype(np.int64)


def uniform_candidate(target: Target, shift: int, node_frac_bits: int = 0) -> tuple[np.ndarray, bool, float]:
    """Nodes of a uniform table with spacing ``2^shift``, whether it meets the bound, and its largest error (LSB).

    Parameters
    ----------
    target : Target
    shift : int
    node_frac_bits : int
    """
    code_lo = int(target.codes[0])
    nodes = code_lo + (np.arange((target.span >> shift) + 2, dtype=np.int64) << shift)
    y = _scaled_nodes(target, nodes, node_frac_bits)
    d = target.codes - code_lo
    got = uniform_value(y, d >> shift, d & ((1 << shift) - 1), shift, node_frac_bits)
    err = np.abs(got - target.exact)
    return y, bool(np.all(err <= target.bound_lsb)), float(err.max())


def _node_bits(target: Target, value_bits: int, frac: int) -> int:
    return max(value_bits, uint_bits(((target.dac_full + 1) << frac) - 1))


def _interpolation_acc_max(y, segment_shift, frac: int) -> int:
    """Largest magnitude the interpolation between nodes ``y`` forms (see :func:`uniform_value`).

    Segment ``i`` (width ``2^k_i``) forms ``(y[i+1] - y[i]) r`` and that plus ``2^(k_i - 1)`` for every remainder
    ``0 <= r < 2^k_i``, at most ``|dy| (2^k - 1) + 2^(k - 1)`` (exact for a rising step, ``2^(k - 1)`` above it for
    a falling one); the value then lies between the nodes, so rounding away the ``frac`` bits forms at most the
    largest node plus ``2^(frac - 1)``.
    """
    # int64 holds it: the profiles allow at most 24-bit DACs and ADCs, so |dy| < 2^32 (8 fraction bits) and widths <= 2^24
    width = np.left_shift(np.int64(1), segment_shift)
    steps = np.abs(np.diff(y)) * (width - 1) + (width >> 1)
    return max(int(steps.max()), int(y.max()) + half(frac))


def _breakpoint_acc_max(y, slope, lengths, frac_bits: int) -> int:
    """Largest magnitude the breakpoint interpolation forms (see :func:`optimised_value`).

    Row ``i`` forms ``slope_i d`` and that plus ``2^(F - 1)`` for ``0 <= d < length_i``, at most
    ``P = max |slope| (length - 1) + 2^(F - 1)`` (exact for a rising row); adding the row's value to that shifted
    down by ``F`` forms at most ``max y + (P >> F) + 1``.
    """
    products = int(np.max(np.abs(slope) * (lengths - 1))) + half(frac_bits)
    return max(products, int(y.max()) + (products >> frac_bits) + 1)


def size_uniform(target: Target, value_bits: int) -> LayoutFit:
    """The widest power-of-two spacing for each node format; keep the one with fewer bytes.

    Parameters
    ----------
    target : Target
    value_bits : int
        Width of a DAC code in C.
    """
    top = max(1, target.span.bit_length())
    best = None
    for frac in UNIFORM_NODE_FRAC_BITS:
        node_bits = _node_bits(target, value_bits, frac)
        for shift in range(top, -1, -1):
            y, ok, _ = uniform_candidate(target, shift, frac)
            if ok:
                size_bits = y.size * node_bits
                if best is None or size_bits < best[0]:
                    best = (size_bits, shift, frac, node_bits, y)
                break
    if best is None:
        raise TableError("DAC quantisation", "no uniform table meets the bound even with one node per ADC code")
    _, shift, frac, node_bits, y = best
    return _fit("uniform", y=y, shift=shift, node_frac_bits=frac, node_type_bits=node_bits,
                acc_type_bits=acc_bits(_interpolation_acc_max(y, shift, frac)))


def _place_segmented(target: Target, frac: int):
    """Greedy power-of-two segments: from each node, the widest segment that meets the bound."""
    code_lo, n = int(target.codes[0]), target.codes.size
    top = max(1, target.span.bit_length())
    start = 0
    y_start = int(_scaled_nodes(target, [code_lo], frac)[0])
    ys, ks = [y_start], []
    while start < n:
        for k in range(top, -1, -1):
            end = start + (1 << k)
            if k and (1 << k) >= 2 * (n - start):
                continue  # half this width already covers what is left
            y_end = int(_scaled_nodes(target, [code_lo + end], frac)[0])
            stop = min(end, n)
            r = np.arange(stop - start, dtype=np.int64)
            v = y_start + (((y_end - y_start) * r + half(k)) >> k)
            got = floor_shift(v + half(frac), frac)
            if _meets(target, got, start, stop):
                break
        else:  # pragma: no cover - k = 0 always meets a feasible bound
            raise TableError("DAC quantisation", "no segmented table meets the bound")
        ys.append(y_end)
        ks.append(k)
        start, y_start = end, y_end
    return np.asarray(ys, dtype=np.int64), np.asarray(ks, dtype=np.int64)


def size_segmented(target: Target, value_bits: int) -> LayoutFit:
    """Values-only nodes at power-of-two segment widths, for each node format; keep the smaller.

    Parameters
    ----------
    target : Target
    value_bits : int
        Width of a DAC code in C.
    """
    best = None
    for frac in UNIFORM_NODE_FRAC_BITS:
        node_bits = _node_bits(target, value_bits, frac)
        y, k = _place_segmented(target, frac)
        size_bits = y.size * node_bits + 8 * k.size
        if best is None or size_bits < best[0]:
            best = (size_bits, frac, node_bits, y, k)
    _, frac, node_bits, y, k = best
    return _fit("segmented", y=y, segment_shift=k, node_frac_bits=frac, node_type_bits=node_bits,
                acc_type_bits=acc_bits(_interpolation_acc_max(y, k, frac)))


def _segment_ok(target: Target, start: int, end: int, last: bool, frac_bits: int, slope_max: int):
    """Whether one segment meets the bound; returns (ok, y0, slope).

    The segment covers indices ``start .. end - 1`` (``.. end`` when it is the
    last one). Its line is the best uniform (minimax) fit of a convex or
    concave stretch: the chord's slope, shifted by half the largest deviation
    so the error swings equally both ways; then it is rounded to the integer
    node and fixed-point slope and checked with the firmware's arithmetic.
    """
    stop = end + 1 if last else end
    f = target.exact[start:stop]
    d = np.arange(stop - start, dtype=np.int64)
    chord = (f[-1] - f[0]) / d[-1] if d[-1] > 0 else 0.0
    resid = f - (f[0] + chord * d)
    y0 = int(np.clip(np.rint(f[0] + 0.5 * (resid.max() + resid.min())), 0, target.dac_full))
    s = int(np.rint(chord * (1 << frac_bits)))
    if abs(s) > slope_max:
        return False, y0, s
    got = y0 + floor_shift(s * d + half(frac_bits), frac_bits)
    return bool(np.all(np.abs(got - f) <= target.bound_lsb[start:stop])), y0, s


def _place_optimised(target: Target, frac_bits: int, slope_max: int):
    """Greedy breakpoints: every segment as long as the bound allows (indices into target.codes)."""
    n = target.codes.size
    xs, ys, ss = [], [], []
    start = 0
    while True:
        if start == n - 1:  # a single code left: a flat segment
            y0 = int(np.clip(np.rint(target.exact[start]), 0, target.dac_full))
            if abs(y0 - target.exact[start]) > target.bound_lsb[start]:
                raise TableError("DAC quantisation", "a single code cannot meet the bound")
            xs.append(start), ys.append(y0), ss.append(0)
            break
        ok_last, y0, s = _segment_ok(target, start, n - 1, True, frac_bits, slope_max)
        if ok_last:
            xs.append(start), ys.append(y0), ss.append(s)
            break
        # Gallop, then bisect, for the furthest next node `end` with [start, end) feasible.
        good, step = start + 1, 1
        ok, y_good, s_good = _segment_ok(target, start, good, False, frac_bits, slope_max)
        if not ok:
            raise TableError("DAC quantisation", "a one-code segment cannot meet the bound")
        while True:
            step *= 2
            cand = start + step
            if cand >= n - 1:
                bad = n - 1
                break
            ok, y_c, s_c = _segment_ok(target, start, cand, False, frac_bits, slope_max)
            if not ok:
                bad = cand
                break
            good, y_good, s_good = cand, y_c, s_c
        while bad - good > 1:
            mid = (good + bad) // 2
            ok, y_c, s_c = _segment_ok(target, start, mid, False, frac_bits, slope_max)
            if ok:
                good, y_good, s_good = mid, y_c, s_c
            else:
                bad = mid
        xs.append(start), ys.append(y_good), ss.append(s_good)
        start = good
    codes = target.codes[np.asarray(xs, dtype=np.int64)]
    return codes, np.asarray(ys, dtype=np.int64), np.asarray(ss, dtype=np.int64)


def size_optimised(target: Target, code_bits: int, value_bits: int) -> LayoutFit:
    """Greedy breakpoints with 16- and 32-bit slopes; keep the layout with fewer bytes.

    Parameters
    ----------
    target : Target
    code_bits, value_bits : int
        Widths of an ADC code and a DAC code in C.
    """
    span = target.span
    max_slope = float(np.max(np.abs(np.diff(target.exact)))) if target.codes.size > 1 else 0.0
    best = None
    for slope_bits in (16, 32):
        slope_max = (1 << (slope_bits - 1)) - 1
        room = int(np.floor(np.log2(slope_max / (2.0 * max_slope + 1.0))))  # headroom for steeper chords
        frac_bits = min(room, max(span, 1).bit_length() + 2)
        if frac_bits < 1:
            continue
        try:
            x, y, s = _place_optimised(target, frac_bits, slope_max)
        except TableError:
            continue
        size_bits = x.size * (code_bits + value_bits + slope_bits)
        if best is None or size_bits < best[0]:
            best = (size_bits, slope_bits, frac_bits, x, y, s)
    if best is None:
        raise TableError("DAC quantisation", "no breakpoint layout meets the bound")
    _, slope_bits, frac_bits, x, y, s = best
    lengths = np.diff(np.append(x, int(target.codes[-1]) + 1))
    return _fit("optimised", x=x, y=y, slope=s, slope_frac_bits=frac_bits, node_type_bits=value_bits,
                slope_type_bits=slope_bits, acc_type_bits=acc_bits(_breakpoint_acc_max(y, s, lengths, frac_bits)))


def _minimax(basis, f, w, fixed=None):
    """Weighted minimax fit ``min max |w (basis c + fixed - f)|`` by linear programming (scipy HiGHS).

    Returns (coefficients, weighted error).
    """
    from scipy.optimize import linprog

    m, n = basis.shape
    rhs = f - (0.0 if fixed is None else fixed)
    a = basis * w[:, None]
    ones = np.ones((m, 1))
    a_ub = np.vstack([np.hstack([a, -ones]), np.hstack([-a, -ones])])
    b_ub = np.concatenate([rhs * w, -rhs * w])
    cost = np.zeros(n + 1)
    cost[-1] = 1.0
    res = linprog(cost, A_ub=a_ub, b_ub=b_ub, bounds=[(None, None)] * (n + 1), method="highs")
    if res.status != 0:
        return None, np.inf
    return res.x[:n], float(res.x[-1])


def _horner_bound(coeff, coeff_shift, x_max: int) -> int:
    """Largest magnitude any product ``acc x`` of the Horner evaluation can reach (rigorous)."""
    b = abs(int(coeff[-1]))
    worst = 0
    for j in range(len(coeff) - 2, -1, -1):
        worst = max(worst, b * x_max)
        b = abs(int(coeff[j])) + ((b * x_max) >> int(coeff_shift[j])) + 1
    return max(worst, b)


def _polynomial_try(target: Target, sample, u, w, degree: int, widths: tuple, log2_scale: int):
    """Quantise a degree-``degree`` fit with coefficient widths ``widths``; None if it misses the bound."""
    f = target.exact[sample]
    powers = np.vander(u, degree + 1, increasing=True)
    a, err = _minimax(powers, f, w)
    if a is None or err > 1.0:
        return None
    big_q = [0] * (degree + 1)
    c = [0] * (degree + 1)
    fixed = np.zeros(u.size)
    for j in range(degree, -1, -1):
        if j < degree:  # refit the coefficients not yet quantised, with the quantised ones held
            a_low, err = _minimax(powers[:, :j + 1], f, w, fixed)
            if a_low is None or err > 1.0:
                return None
            a[:j + 1] = a_low
        limit = (1 << (widths[j] - 1)) - 1
        # C_j = a_j 2^q_j holds the j-th coefficient in x times 2^Q_j, Q_j = q_j + j log2_scale; as many
        # bits as the width allows, and Q_j <= Q_(j+1) so that every Horner shift is >= 0
        cap = None if j == degree else big_q[j + 1] - j * log2_scale
        if a[j] == 0:
            qj = 0 if cap is None else cap
        else:
            # |a_j| 2^q_j <= limit (up to a relative 2^-52 from the float log2), so it rounds to at most limit
            qj = int(np.floor(np.log2(limit / abs(a[j]))))
            if cap is not None:
                qj = min(qj, cap)
        big_q[j] = qj + j * log2_scale
        c[j] = int(np.rint(a[j] * 2.0 ** qj))
        fixed = fixed + c[j] * 2.0 ** -qj * powers[:, j]
    shifts = np.diff(np.array(big_q, dtype=np.int64))
    if np.any(shifts > 62) or not 0 <= big_q[0] <= 62:
        return None
    return np.array(c, dtype=np.int64), shifts, big_q[0]


def size_polynomial(target: Target, value_bits: int, max_degree: int = MAX_POLYNOMIAL_DEGREE) -> LayoutFit:
    """The polynomial with the fewest coefficient bytes that meets the bound at every code.

    Parameters
    ----------
    target : Target
    value_bits : int
        Width of a DAC code in C (unused by this layout; kept for a uniform call).
    max_degree : int
        Highest degree tried.
    """
    code_lo, code_hi = int(target.codes[0]), int(target.codes[-1])
    center = (code_lo + code_hi) // 2
    x_all = target.codes - center
    x_max = int(np.max(np.abs(x_all)))
    log2_scale = max(1, x_max).bit_length()  # |x| / 2^log2_scale < 1
    n = target.codes.size
    if n > _FIT_POINTS:
        sample = np.unique(np.concatenate([np.linspace(0, n - 1, _FIT_POINTS).round().astype(np.int64),
                                           [0, n - 1]]))
    else:
        sample = np.arange(n)
    slack = target.bound_lsb[sample] - _FIT_MARGIN_LSB
    if np.any(slack <= 0):
        raise TableError("DAC quantisation", "the bound leaves no room for a polynomial's rounding")
    w = 1.0 / slack
    u = x_all[sample] / float(1 << log2_scale)
    options = []
    for degree in range(1, max_degree + 1):
        for narrow in range(0, degree + 1):  # the `narrow` highest coefficients in 16 bits, the rest in 32
            widths = tuple(16 if j > degree - narrow else 32 for j in range(degree + 1))
            options.append((sum(widths), degree, widths))
    options.sort(key=lambda o: (o[0], o[1]))  # the fewest bits first, then the lower degree
    for _, degree, widths in options:
        got = _polynomial_try(target, sample, u, w, degree, widths, log2_scale)
        if got is None:
            continue
        coeff, shifts, q0 = got
        if _horner_bound(coeff, shifts, x_max) >= _HORNER_LIMIT:
            continue
        values = polynomial_value(coeff, shifts, x_all, q0)
        if _meets(target, values):
            return _fit("polynomial", y=coeff, coeff_shift=shifts, node_frac_bits=q0, center_code=center,
                        coeff_type_bits=widths, node_type_bits=0, acc_type_bits=64)
    raise TableError("DAC quantisation", f"no polynomial up to degree {max_degree} meets the bound")
