"""Integer lookup tables: sizing against the bound, the firmware path, faults and the error bound."""

import os
import re
from dataclasses import replace

import numpy as np
import pytest

from compensator.errors import ModelError
from compensator.firmware import tables as T
from compensator.firmware.tables import (
    STATUS_OK,
    STATUS_SENSOR_FAULT,
    TableError,
    TableStatus,
    build_table,
    sweep_table,
)
from compensator.law import build_law

PAIRS = [("sipm_a", "board_ntc", 3.0), ("sipm_b", "board_pt1000", 4.0), ("sipm_c", "board_pt1000", 5.0)]


@pytest.fixture(scope="module")
def built(request):
    """Tables built once per module; while mutmut collects which tests reach which functions (its "stats" run)
    every test builds its own, so that each test is mapped to the code it checks. With a mutant active the cache
    is fine again: every table in it was built with that mutant."""
    cache = {}
    fresh = os.environ.get("MUTANT_UNDER_TEST") == "stats"

    def get(sipm_name, board_name, ov, layout, bound):
        key = (sipm_name, board_name, ov, layout, bound)
        if fresh or key not in cache:
            sipm, board = request.getfixturevalue(sipm_name), request.getfixturevalue(board_name)
            law = build_law(sipm, board, ov)
            cache[key] = (law, board, build_table(law, board, bound, layout))
        return cache[key]
    return get


@pytest.mark.parametrize("pair", PAIRS, ids=lambda p: p[0])
@pytest.mark.parametrize("layout", T.LAYOUTS)
@pytest.mark.parametrize("bound", [0.05, 0.02])
def test_every_code_within_the_bound(built, pair, layout, bound):
    law, board, table = built(*pair, layout, bound)
    sweep = sweep_table(table, law, board)
    assert sweep.within_bound
    assert np.all(np.abs(sweep.gain_error_pct) <= bound)
    assert sweep.adc_code.size == table.code_hi - table.code_lo + 1
    # The sweep's gain error is the supply-output difference over the target overvoltage.
    expected = 100 * (board.supply.output_v(sweep.table_dac_code) - law.output_v(sweep.temp_c)) / law.overvoltage_v
    if law.sipm.capacitance_tempco_ppm_per_k == 0:
        assert np.allclose(sweep.gain_error_pct, expected, atol=1e-12)


@pytest.mark.parametrize("pair", PAIRS, ids=lambda p: p[0])
def test_uniform_is_the_widest_spacing_that_meets_the_bound(built, pair):
    law, board, table = built(*pair, "uniform", 0.05)
    assert table.entries == ((table.code_hi - table.code_lo) >> table.shift) + 2
    target = T._target(law, board, 0.05)
    _, ok, _ = T._uniform_candidate(target, table.shift + 1)
    assert not ok
    assert table.table_bytes == 2 * table.entries


def test_uniform_fractional_nodes_near_one_lsb(built):
    # At 0.01 % the bound is 0.75 DAC LSB: whole-code nodes would need one node per ADC code, so the
    # sizing switches to 32-bit nodes with 8 fractional bits, which is far smaller.
    law, board, table = built("sipm_b", "board_pt1000", 4.0, "uniform", 0.01)
    assert table.node_frac_bits == 8 and table.node_type_bits == 32
    assert table.table_bytes == 4 * table.entries < 2 * (table.code_hi - table.code_lo + 2)
    assert sweep_table(table, law, board).within_bound


@pytest.mark.parametrize("pair", PAIRS, ids=lambda p: p[0])
def test_optimised_layout(built, pair):
    law, board, table = built(*pair, "optimised", 0.05)
    assert table.x[0] == table.code_lo
    assert np.all(np.diff(table.x) > 0)
    assert table.table_bytes == table.entries * (2 + 2 + table.slope_type_bits // 8)
    tighter = built(*pair, "optimised", 0.02)[2]
    assert tighter.entries > table.entries
    # The accumulator never overflows its C type.
    lengths = np.diff(np.append(table.x, table.code_hi + 1))
    assert int(np.max(np.abs(table.slope) * lengths)) + (1 << table.slope_frac_bits) < 2 ** (table.acc_type_bits - 1)


def test_optimised_beats_uniform_where_curvature_varies(built):
    # The NTC's code-to-temperature curve bends hard at the cold end: unequal spacing pays there.
    uniform = built("sipm_a", "board_ntc", 3.0, "uniform", 0.05)[2]
    optimised = built("sipm_a", "board_ntc", 3.0, "optimised", 0.05)[2]
    assert optimised.entries * 3 <= uniform.entries
    assert optimised.table_bytes < uniform.table_bytes


def exact_and_curvature(law, board, table):
    """The law's exact DAC code at every code of the range and |f''| from second differences (independent of
    the tool's own target)."""
    codes = np.arange(table.code_lo - 1, table.code_hi + 2)
    f = (law.output_v(board.temperature.temp_at(codes + 0.5)) - board.supply.intercept_v) \
        / board.supply.volts_per_code
    return f[1:-1], np.abs(f[2:] - 2 * f[1:-1] + f[:-2])


def bound_lsb(law, board, table, bound_pct):
    temps = board.temperature.temp_at(np.arange(table.code_lo, table.code_hi + 1) + 0.5)
    return bound_pct / (100 * board.supply.lsb_v / law.target_overvoltage_v(temps))


@pytest.mark.parametrize("pair", PAIRS, ids=lambda p: p[0])
def test_uniform_spacing_is_as_wide_as_the_interpolation_bound_allows(built, pair):
    # Standard numerical-analysis result: linear interpolation of f between nodes h apart errs by at most
    # h^2 max|f''| / 8; node and interpolation rounding add at most 1 LSB. So every power-of-two spacing h with
    # h^2 max|f''| / 8 + 1 <= bound works, and the tool, keeping the widest spacing that works, must not pick a
    # narrower one. Its nodes are the exact law rounded to the nearest DAC code.
    law, board, table = built(*pair, "uniform", 0.05)
    f, f2 = exact_and_curvature(law, board, table)
    bound = bound_lsb(law, board, table, 0.05).min()
    h = 1
    while (2 * h) ** 2 * f2.max() * 1.02 / 8 + 1 <= bound:
        h *= 2
    assert (1 << table.shift) >= h >= 4
    assert table.node_frac_bits == 0
    inner = np.arange(table.entries - 1) << table.shift  # nodes inside the range
    assert np.array_equal(table.y[:-1], np.rint(f[inner]).astype(np.int64))


@pytest.mark.parametrize("pair", PAIRS, ids=lambda p: p[0])
def test_optimised_segments_are_as_long_as_the_interpolation_bound_allows(built, pair):
    # A segment of L codes (an interval of L - 1) is fitted with a line within h^2 max|f''| / 8 of f (the
    # interpolation bound, h = L - 1), off by at most 1 LSB of node and interpolation rounding and by h 2^-(F+1)
    # of slope rounding. Every L meeting the bound with all that is feasible, so each of the tool's greedy
    # segments (but the last) must be at least that long: a tool with more breakpoints than needed fails here.
    law, board, table = built(*pair, "optimised", 0.05)
    f, f2 = exact_and_curvature(law, board, table)
    bound = bound_lsb(law, board, table, 0.05)
    starts = table.x - table.code_lo
    lengths = np.diff(np.append(starts, table.code_hi - table.code_lo + 1))
    checked = 0
    for a, length in zip(starts[:-1], lengths[:-1]):
        need = 2
        while True:
            h = need  # try L = need + 1
            stop = a + h + 1
            if stop > f.size:
                break
            if h * h * f2[a:stop].max() * 1.02 / 8 + 1 + h * 2.0 ** -(table.slope_frac_bits + 1) > bound[a:stop].min():
                break
            need += 1
        assert length >= need, (a, length, need)
        checked += 1
    assert checked >= 2


def python_int_value(table, n):
    """Each layout's arithmetic written again with Python integers and floor division (not the tool's shifts)."""
    def fdiv(p, k):
        return p // (2 ** k)

    def rnd(p, k):
        return fdiv(p + (2 ** k) // 2, k)

    y = [int(v) for v in table.y]
    g = table.node_frac_bits
    if table.layout == "uniform":
        d = n - table.code_lo
        i, r = d // 2 ** table.shift, d % 2 ** table.shift
        return rnd(y[i] + rnd((y[i + 1] - y[i]) * r, table.shift), g)
    if table.layout == "segmented":
        d, i = n - table.code_lo, 0
        while d >= 2 ** int(table.segment_shift[i]):
            d -= 2 ** int(table.segment_shift[i])
            i += 1
        k = int(table.segment_shift[i])
        return rnd(y[i] + rnd((y[i + 1] - y[i]) * d, k), g)
    if table.layout == "optimised":
        i = max(j for j in range(table.entries) if table.x[j] <= n)
        return y[i] + rnd(int(table.slope[i]) * (n - int(table.x[i])), table.slope_frac_bits)
    x = n - table.center_code
    acc = y[-1]
    for j in range(len(y) - 2, -1, -1):
        acc = y[j] + fdiv(acc * x, int(table.coeff_shift[j]))
    return rnd(acc, g)


@pytest.mark.parametrize("pair, bound", [(p, 0.05) for p in PAIRS] + [(PAIRS[1], 0.01)],
                         ids=lambda v: v[0] if isinstance(v, tuple) else str(v))
@pytest.mark.parametrize("layout", T.LAYOUTS)
def test_layout_arithmetic_matches_plain_integers(built, pair, bound, layout):
    law, board, table = built(*pair, layout, bound)
    codes = np.unique(np.linspace(table.code_lo, table.code_hi, 257).astype(np.int64))
    expected = [python_int_value(table, int(n)) for n in codes]
    assert np.array_equal(table.interpolate(codes), expected)


def test_smallest_layout_is_at_most_half_the_uniform_table(sipm_a, sipm_b, sipm_c, board_ntc, board_pt1000):
    # The target of the table sizing: on every bundled pair at 0.05 %, the chosen table needs at most half
    # the bytes of the smallest uniform table; every candidate was checked at every code.
    for sipm, board, ov in ((sipm_a, board_ntc, 3.0), (sipm_b, board_pt1000, 4.0), (sipm_c, board_pt1000, 5.0)):
        law = build_law(sipm, board, ov)
        report = T.compare_layouts(law, board, 0.05)
        assert [c.layout for c in report.candidates] == list(T.LAYOUTS)
        sizes = {c.layout: c.table_bytes for c in report.candidates}
        assert report.table.table_bytes == min(v for v in sizes.values() if v is not None)
        assert 2 * report.table.table_bytes <= sizes["uniform"] == report.uniform_bytes
        assert all(c.within_bound and c.max_gain_error_pct <= 0.05 for c in report.candidates)
        assert report.findings == ()
        assert sweep_table(report.table, law, board).within_bound
        assert build_table(law, board, 0.05).table_bytes == report.table.table_bytes


def test_smallest_explains_when_it_cannot_halve_the_uniform_table(sipm_b, board_pt1000):
    # At a loose bound three uniform nodes (6 bytes) cover the range and no layout can store it in 3 bytes.
    law = build_law(sipm_b, board_pt1000, 4.0)
    report = T.compare_layouts(law, board_pt1000, 5.0)
    assert report.uniform_bytes == 6 and report.table.table_bytes == 6  # two 16-bit nodes do not reach
    (finding,) = report.findings
    assert finding.code == "table_not_half_of_uniform" and f"{report.uniform_bytes} B" in finding.message


def test_greedy_placement_equalises_error(built):
    law, board, table = built("sipm_a", "board_ntc", 3.0, "optimised", 0.05)
    sweep = sweep_table(table, law, board)
    ends = np.append(table.x, table.code_hi + 1) - table.code_lo
    per_segment = [np.abs(sweep.gain_error_pct[a:b]).max() for a, b in zip(ends[:-1], ends[1:])]
    # Every segment but the last is pushed close to the bound.
    assert min(per_segment[:-1]) > 0.8 * 0.05


def test_lookup_statuses_and_safe_code(built, board_ntc):
    law, board, table = built("sipm_a", "board_ntc", 3.0, "optimised", 0.05)
    codes = np.arange(1 << 16)
    dac, status = table.lookup(codes)
    inside = (codes >= table.code_lo) & (codes <= table.code_hi)
    assert np.all(status[inside] == STATUS_OK)
    fault = (codes < table.fault_lo) | (codes > table.fault_hi)
    assert np.all(status[fault] == STATUS_SENSOR_FAULT)
    assert np.all(dac[fault] == board_ntc.safe_dac_code)
    # Rails (open or shorted sensor) and codes beyond a 12-bit ADC are faults.
    assert status[0] == STATUS_SENSOR_FAULT and status[4095] == STATUS_SENSOR_FAULT and status[4096] == STATUS_SENSOR_FAULT
    below = (codes >= table.fault_lo) & (codes < table.code_lo)
    above = (codes > table.code_hi) & (codes <= table.fault_hi)
    assert below.any() and above.any()
    # NTC on the low side of the divider: its resistance and so the code fall as it warms, so codes below the
    # range are hotter than it and codes above it colder.
    assert np.all(status[below] == TableStatus.HOTTER_THAN_RANGE) and np.all(dac[below] == dac[table.code_lo])
    assert np.all(status[above] == TableStatus.COLDER_THAN_RANGE) and np.all(dac[above] == dac[table.code_hi])
    # The fault band sits the margin (20 K) outside the operating range.
    t_band = board.temperature.temp_at(np.array([table.fault_lo, table.fault_hi]) + 0.5)
    assert sorted(t_band) == pytest.approx([-45.0, 65.0], abs=0.1)  # NTC on the low side: code falls as T rises


def test_output_clamp_follows_board_limit(sipm_b, board_pt1000):
    board = replace(board_pt1000, max_bias_v=43.5)  # the law needs up to ~42.9 V
    law = build_law(sipm_b, board, 4.0)
    table = build_table(law, board, 0.05, "uniform")
    assert board.supply.output_v(table.dac_max) <= 43.5 < board.supply.output_v(table.dac_max + 1)


def test_dac_too_coarse_names_the_term(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0)
    with pytest.raises(TableError) as exc:
        build_table(law, board_pt1000, 0.005, "optimised")
    assert exc.value.term == "DAC quantisation"
    coarse = replace(board_pt1000, supply=replace(board_pt1000.supply, dac=replace(board_pt1000.supply.dac, bits=10)))
    law = build_law(sipm_b, coarse, 4.0)
    with pytest.raises(TableError, match="DAC quantisation"):
        build_table(law, coarse, 0.05, "uniform")


def test_adc_too_coarse_names_the_term(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    with pytest.raises(TableError) as exc:
        build_table(law, board_ntc, 0.01, "optimised")
    assert exc.value.term == "ADC quantisation"


def test_clamped_law_names_the_supply(sipm_b, board_ntc):
    law = build_law(sipm_b, board_ntc, 4.0)
    with pytest.raises(TableError) as exc:
        build_table(law, board_ntc, 0.05)
    assert exc.value.term == "output limit (supply maximum output)"
    # the supply's own refusal follows the term: what the law needs over the range, and what to change
    assert re.fullmatch(r"output limit \(supply maximum output\): overvoltage_v: the law needs \d+\.\d{3} to "
                        r"\d+\.\d{3} V from -25 to 45 C, beyond the supply maximum output; lower --overvoltage-v or "
                        r"use another board", exc.value.reason)


def test_bad_arguments(sipm_a, board_ntc):
    law = build_law(sipm_a, board_ntc, 3.0)
    with pytest.raises(ModelError, match="layout"):
        build_table(law, board_ntc, 0.05, "zigzag")
    with pytest.raises(ModelError, match="max_gain_error_pct"):
        build_table(law, board_ntc, 0.0)
    with pytest.raises(ModelError, match="fault_margin_k"):
        build_table(law, board_ntc, 0.05, fault_margin_k=-1.0)
    # A very wide clamp band would hold too much overvoltage on a cold die.
    hot = build_law(sipm_a, board_ntc, 6.5)
    with pytest.raises(ModelError, match="fault_margin_k"):
        build_table(hot, board_ntc, 0.05, fault_margin_k=40.0)


def test_floor_shift_matches_floor_division():
    p = np.arange(-70, 71)
    for k in range(0, 6):
        assert np.array_equal(T.floor_shift(p, k), np.floor_divide(p, 2 ** k))


def test_layout_bytes_by_hand(sipm_b, board_pt1000):
    # uniform: 2 bytes per node; segmented: 2 per node plus 1 per segment width; optimised: 2 + 2 + slope bytes
    # per breakpoint; polynomial: the widths of its coefficients.
    report = T.compare_layouts(build_law(sipm_b, board_pt1000, 4.0), board_pt1000, 0.05)
    t = report.tables
    assert t["uniform"].table_bytes == 2 * t["uniform"].y.size == 26
    assert t["segmented"].table_bytes == 2 * t["segmented"].y.size + t["segmented"].segment_shift.size == 38
    assert t["optimised"].table_bytes == t["optimised"].x.size * (4 + t["optimised"].slope_type_bits // 8)
    assert t["polynomial"].table_bytes == sum(t["polynomial"].coeff_type_bits) // 8 == 10
    assert all(isinstance(c.table_bytes, int) for c in report.candidates)
    assert report.tables["polynomial"] is report.table


def test_a_layout_that_cannot_meet_the_bound_is_reported(sipm_b, board_pt1000, monkeypatch):
    import compensator.firmware.tables as tables_module

    def refusing(what):
        def refuse(*args, **kwargs):
            raise TableError("DAC quantisation", f"no {what} table meets the bound")
        return refuse

    monkeypatch.setattr(tables_module, "size_polynomial", refusing("polynomial"))
    law = build_law(sipm_b, board_pt1000, 4.0)
    report = T.compare_layouts(law, board_pt1000, 0.05)
    failed = report.candidates[-1]
    assert failed.layout == "polynomial" and failed.table_bytes is None and failed.entries is None
    assert failed.within_bound is False and "no polynomial table" in failed.reason
    assert [c.entries for c in report.candidates[:3]] == [t.entries for t in report.tables.values()]
    assert report.table.layout == "uniform" and report.table.table_bytes == 26  # ties go to the simpler layout
    (finding,) = report.findings
    assert "uniform 26 B, segmented 38 B, optimised 36 B, polynomial: " in finding.message
    for name in ("uniform", "segmented", "optimised"):
        monkeypatch.setattr(tables_module, f"size_{name}", refusing(name))
    with pytest.raises(TableError, match="no uniform table"):  # the first layout's reason
        T.compare_layouts(law, board_pt1000, 0.05)


def test_target_extrapolates_linearly_beyond_the_range(sipm_b, board_pt1000):
    law = build_law(sipm_b, board_pt1000, 4.0)
    target = T._target(law, board_pt1000, 0.05)
    lo, hi = int(target.codes[0]), int(target.codes[-1])
    assert target.at([lo - 3])[0] == pytest.approx(target.exact[0] - 3 * target.ext_lo, abs=1e-9)
    assert target.at([hi + 5])[0] == pytest.approx(target.exact[-1] + 5 * target.ext_hi, abs=1e-9)
    assert np.array_equal(target.at(target.codes[[0, 7, -1]]), target.exact[[0, 7, -1]])
    # the extrapolation slope is the law's own slope there: DAC codes per ADC code from the law one code outside
    f = T.ideal_dac_code(law, board_pt1000.temperature.temp_at(np.array([hi - 0.5, hi + 1.5])))
    assert target.ext_hi == pytest.approx((f[1] - f[0]) / 2, rel=1e-9)


def small_target(exact, *, ext, dac_full, bound_lsb):
    """A hand-made target over ADC codes 100 .. 100 + len(exact) - 1, extrapolated with slope ``ext``."""
    exact = np.asarray(exact, dtype=float)
    n = exact.size
    return T.Target(codes=np.arange(100, 100 + n, dtype=np.int64), temp_c=np.zeros(n), exact=exact,
                    bound_lsb=np.full(n, bound_lsb), gain_pct_per_lsb=np.ones(n), ext_lo=ext, ext_hi=ext,
                    dac_full=dac_full)


@pytest.mark.parametrize("frac", [0, 2])
def test_uniform_nodes_are_clipped_to_the_dac_range(frac):
    # The line 10 (n - 100) - 20.25 DAC codes runs from below code 0 to above full scale (50). Nodes every 2 codes
    # from 100 to 110 (the last one beyond the range, on the same line), rounded half to even (Python's round,
    # like numpy's rint) at 2^frac steps, then held inside 0 .. 50 x 2^frac: plain Python.
    target = small_target([10 * k - 20.25 for k in range(9)], ext=10.0, dac_full=50, bound_lsb=100.0)
    nodes, _, _ = T.uniform_candidate(target, 1, frac)
    scale = 2 ** frac
    expected = [min(max(round((10 * (n - 100) - 20.25) * scale), 0), 50 * scale) for n in range(100, 111, 2)]
    assert expected[:2] == [0, 0] and expected[-2:] == [50 * scale] * 2  # both ends are clipped
    assert nodes.tolist() == expected and nodes.dtype == np.int64


def test_uniform_error_equal_to_the_bound_meets_it():
    # Exact values 0, 0.5, 1 at codes 100 .. 102; nodes at 100, 102 (and 104, extrapolated) hold 0, 1 (and 2) as
    # plain DAC codes by default. At code 101 the firmware gives 0 + floor((1 x 1 + 1) / 2) = 1 (half rounds up):
    # an error of exactly 0.5 LSB, which meets a bound of 0.5 LSB.
    target = small_target([0.0, 0.5, 1.0], ext=0.5, dac_full=4095, bound_lsb=0.5)
    nodes, ok, worst = T.uniform_candidate(target, 1)
    assert nodes.tolist() == [0, 1, 2] and worst == 0.5 and ok is True
    nodes, ok, worst = T.uniform_candidate(replace(target, bound_lsb=np.full(3, 0.49)), 1)
    assert worst == 0.5 and ok is False


def test_target_takes_codes_of_any_integer_type(sipm_b, board_pt1000):
    # Codes read from a 16-bit ADC buffer (uint16) extrapolate as Python integers do, also below the range.
    target = T._target(build_law(sipm_b, board_pt1000, 4.0), board_pt1000, 0.05)
    lo, hi = int(target.codes[0]), int(target.codes[-1])
    got = target.at(np.array([lo - 3, lo, hi, hi + 5], dtype=np.uint16))
    expected = [target.exact[0] - 3 * target.ext_lo, target.exact[0], target.exact[-1],
                target.exact[-1] + 5 * target.ext_hi]
    assert got == pytest.approx(expected, abs=1e-9)
    # Further below the range than the range is wide, too.
    far = lo - target.codes.size - 5
    assert target.at([far])[0] == pytest.approx(target.exact[0] - (target.codes.size + 5) * target.ext_lo, abs=1e-9)


def test_layout_bytes_refuses_an_unknown_layout():
    from compensator.firmware.layouts import _fit, layout_bytes

    with pytest.raises(ModelError) as exc:
        layout_bytes(_fit("bogus"), 12)
    assert exc.value.reason == "unknown layout 'bogus'"


def test_segmented_value_with_fractional_nodes_by_hand():
    # Nodes 0, 5, 15 DAC codes held with one fractional bit (0, 10, 30); segments 2 and 4 codes wide. Offsets
    # 0 .. 5 lie on 0, 2.5, 5, 7.5, 10, 12.5 DAC codes; the firmware rounds each half up: plain floor division.
    y, shifts = np.array([0, 10, 30], dtype=np.int64), np.array([1, 2], dtype=np.int64)
    expected = []
    for d in range(6):
        i, start = (0, 0) if d < 2 else (1, 2)
        k = int(shifts[i])
        v = int(y[i]) + ((int(y[i + 1] - y[i])) * (d - start) + (2 ** k) // 2) // 2 ** k
        expected.append((v + 1) // 2)
    assert expected == [0, 3, 5, 8, 10, 13]
    from compensator.firmware.layouts import segmented_value

    assert segmented_value(y, shifts, np.arange(6), 1).tolist() == expected


def test_every_layout_after_a_failed_one_is_still_built(sipm_b, board_pt1000, monkeypatch):
    import compensator.firmware.tables as tables_module

    def refuse(*args, **kwargs):
        raise TableError("DAC quantisation", "no segmented table meets the bound")

    monkeypatch.setattr(tables_module, "size_segmented", refuse)
    report = T.compare_layouts(build_law(sipm_b, board_pt1000, 4.0), board_pt1000, 0.05)
    assert [c.layout for c in report.candidates] == list(T.LAYOUTS)
    assert sorted(report.tables) == sorted(set(T.LAYOUTS) - {"segmented"})
    assert report.candidates[1].table_bytes is None and report.candidates[2].table_bytes == 36


def test_without_a_uniform_table_there_is_no_baseline(sipm_b, board_pt1000, monkeypatch):
    # The half-of-uniform finding needs the uniform table: without one there is no baseline and no finding.
    import compensator.firmware.tables as tables_module

    def refuse(*args, **kwargs):
        raise TableError("DAC quantisation", "no uniform table meets the bound")

    monkeypatch.setattr(tables_module, "size_uniform", refuse)
    report = T.compare_layouts(build_law(sipm_b, board_pt1000, 4.0), board_pt1000, 0.05)
    assert report.uniform_bytes == 0 and report.findings == ()
    assert report.table.layout == "polynomial" and report.table.table_bytes == 10


def test_a_hand_made_uniform_table():
    # Nodes 10, 90, 170 every 8 codes from code 100 (the range 100 .. 108); plausible codes 90 .. 120. At code 104:
    # 10 + floor((80 x 4 + 4) / 8) = 50; at 103: 10 + floor((240 + 4) / 8) = 40. Below the range the stored end
    # value 5 (colder by default), above it 500 (hotter), outside 90 .. 120 the safe code 7 (a sensor fault);
    # everything within the output clamp 0 .. 4095. Arrays a layout does not use are empty int64 arrays.
    table = T.LookupTable(layout="uniform", adc_bits=12, dac_bits=12, code_lo=100, code_hi=108, fault_lo=90,
                          fault_hi=120, dac_min=0, dac_max=4095, safe_dac_code=7, below_dac_code=5,
                          above_dac_code=500, shift=3, y=np.array([10, 90, 170], dtype=np.int64))
    dac, status = table.lookup([89, 90, 99, 100, 103, 104, 108, 109, 120, 121])
    assert dac.tolist() == [7, 5, 5, 10, 40, 50, 90, 500, 500, 7]
    assert status.tolist() == [3, 1, 1, 0, 0, 0, 0, 2, 2, 3]
    for name in ("x", "slope", "segment_shift", "coeff_shift"):
        empty = getattr(table, name)
        assert empty.size == 0 and empty.dtype == np.int64
    assert table.table_bytes == 6 and table.entries == 3 and table.entry_bytes == 2


def test_refusals_word_for_word(sipm_a, sipm_b, board_ntc, board_pt1000):
    import re

    from compensator.physics.sipm import breakdown_v

    # Half an LSB of the direct supply's DAC: 14 x 2.5 V / 2^16 / 2 = 0.267 mV, over 4 V of overvoltage
    # 100 x 0.267 mV / 4 V = 0.006676 % of gain, above a bound of 0.005 %.
    law = build_law(sipm_b, board_pt1000, 4.0)
    with pytest.raises(TableError) as exc:
        build_table(law, board_pt1000, 0.005, "optimised")
    assert exc.value.reason == (
        "DAC quantisation: half an LSB of hut-board-pt1000's DAC (0.267 mV at the output) is already 0.006676 % gain "
        "at 4 V overvoltage, above the bound 0.005 %; use a finer DAC, a higher overvoltage or a looser bound")
    law = build_law(sipm_a, board_ntc, 3.0)
    with pytest.raises(TableError) as exc:
        build_table(law, board_ntc, 0.01, "optimised")
    assert re.fullmatch(r"ADC quantisation: half an ADC code of hut-board-ntc's temperature channel is 0\.0\d+ % gain "
                        r"at -25\.0 C, above the bound 0\.01 %; use a finer ADC or a looser bound", exc.value.reason)
    for bad in (0.0, -0.05, float("nan"), float("inf")):
        with pytest.raises(ModelError) as exc:
            build_table(law, board_ntc, bad, "uniform")
        assert exc.value.key == "max_gain_error_pct"
        assert exc.value.reason == f"max_gain_error_pct must be a positive number, got {bad!r}"
    for bad in (-1.0, float("nan")):
        with pytest.raises(ModelError) as exc:
            build_table(law, board_ntc, 0.05, "uniform", fault_margin_k=bad)
        assert (exc.value.key, exc.value.reason) == ("fault_margin_k",
                                                     f"fault_margin_k must be a non-negative number, got {bad!r}")
    # 40 K below -25 C the breakdown is 40 x 21.5 mV = 0.86 V lower (hut-sipm-a, no curvature), so the value held
    # for the coldest reading gives the overvoltage at -25 C plus 0.86 V.
    hot = build_law(sipm_a, board_ntc, 6.5)
    held = float(hot.output_v(-25.0) - breakdown_v(sipm_a.device, -25.0)) + 0.86
    with pytest.raises(ModelError) as exc:
        build_table(hot, board_ntc, 0.05, "uniform", fault_margin_k=40.0)
    assert exc.value.key == "fault_margin_k" and exc.value.reason == (
        f"fault_margin_k: a reading 40 K below the range would hold {held:.3f} V overvoltage, above "
        "max_overvoltage_v 7 V; use a smaller margin")
    with pytest.raises(ModelError) as exc:
        build_table(law, board_ntc, 0.05, "zigzag")
    assert exc.value.key == "layout" and exc.value.reason == (
        "layout must be one of smallest, uniform, segmented, optimised, polynomial, got 'zigzag'")


def test_rising_sensor_statuses(sipm_b, board_pt1000):
    # A Pt1000 code rises with temperature: below the range is colder, above it hotter (the NTC board is the
    # other way round: test_lookup_statuses_and_safe_code).
    law = build_law(sipm_b, board_pt1000, 4.0)
    table = build_table(law, board_pt1000, 0.05, "uniform")
    assert (table.below_status, table.above_status) == (TableStatus.COLDER_THAN_RANGE, TableStatus.HOTTER_THAN_RANGE)
    dac, status = table.lookup([table.code_lo - 1, table.code_hi + 1])
    assert status.tolist() == [1, 2] and dac.tolist() == [table.below_dac_code, table.above_dac_code]
    assert (table.below_dac_code, table.above_dac_code) == tuple(int(v) for v in table.interpolate(
        [table.code_lo, table.code_hi]))
