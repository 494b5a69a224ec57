"""Benchmark: lookup-table bytes of every layout against the gain-error bound, and build+verify times.

Usage: python tools/bench/bench_tables.py [--bounds 0.2 0.1 0.05 0.02 0.01] [--repeats 3] [--no-24-bit]

1. For each bundled sipm/board pair and bound, the bytes of every layout
   (uniform, segmented, optimised, polynomial), each checked at every ADC code
   of the range; the smallest uniform power-of-two table is the baseline and
   the smallest layout (what ``--layout smallest`` keeps) is printed beside it
   with the ratio. Target at 0.05 %: smallest <= 0.5 x uniform on every pair.
2. On the 16-bit ADC board: time to build each layout and to verify all 65,536
   ADC codes through the integer reference (lookup of every code plus the
   gain-error check of every code in range), beside a plain Python loop doing
   the same lookups one code at a time (the baseline), in the same run.
   Target: build and verify in <= 1 s.
3. The same board with a 24-bit ADC (1.46 million codes in range): the time
   of ``--layout smallest`` (every layout built and checked at every code)
   beside the uniform layout alone (the baseline), and the size of the
   summary sweep against the full one.
"""

from __future__ import annotations

import argparse
import math
from dataclasses import replace
from pathlib import Path

import numpy as np

from compensator.errors import CompensatorError
from compensator.firmware.layouts import LAYOUTS
from compensator.firmware.table_c import render_sweep_csv
from compensator.firmware.tables import build_table, compare_layouts, sweep_table
from compensator.law import build_law
from compensator.profiles import load_board, load_sipm

from timing import best_of  # tools/bench/timing.py, beside this script

PROFILES = Path(__file__).resolve().parents[2] / "hardware_profiles"
PAIRS = [("hut-sipm-a", "hut-board-ntc", 3.0), ("hut-sipm-b", "hut-board-pt1000", 4.0),
         ("hut-sipm-c", "hut-board-pt1000", 5.0)]


def loop_lookup(table, codes):
    """The firmware path one code at a time in plain Python integers (the baseline), for any layout."""
    out = []
    y = table.y.tolist()
    for n in codes:
        if n < table.fault_lo or n > table.fault_hi:
            out.append(table.safe_dac_code)
        elif n < table.code_lo:
            out.append(table.below_dac_code)
        elif n > table.code_hi:
            out.append(table.above_dac_code)
        else:
            v = int(table.interpolate([n])[0]) if table.layout != "uniform" else _uniform(table, y, n)
            out.append(min(max(v, table.dac_min), table.dac_max))
    return out


def _uniform(table, y, n):
    d = n - table.code_lo
    i, r = d >> table.shift, d & ((1 << table.shift) - 1)
    v = y[i] + (((y[i + 1] - y[i]) * r + ((1 << table.shift) >> 1)) >> table.shift)
    g = table.node_frac_bits
    return (v + ((1 << g) >> 1)) >> g


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--bounds", type=float, nargs="+", default=[0.2, 0.1, 0.05, 0.02, 0.01])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--no-24-bit", action="store_true", help="skip part 3 (about a minute)")
    args = parser.parse_args(argv)

    print("1. table bytes of every layout against the bound (baseline: smallest uniform power-of-two table)")
    print(f"{'pair':32s} {'bound_%':>8s} " + " ".join(f"{k:>10s}" for k in LAYOUTS) + f" {'smallest':>10s} {'ratio':>6s}")
    goal = []
    for sipm_name, board_name, ov in PAIRS:
        sipm, board = load_sipm(PROFILES / f"{sipm_name}.yaml"), load_board(PROFILES / f"{board_name}.yaml")
        law = build_law(sipm, board, ov)
        label = f"{sipm_name}+{board_name} @{ov:g}V"
        for bound in args.bounds:
            try:
                report = compare_layouts(law, board, bound)
            except CompensatorError as exc:
                print(f"{label:32s} {bound:8.3f} cannot: {getattr(exc, 'term', exc)}")
                continue
            cells = [f"{c.table_bytes:>8d} B" if c.table_bytes is not None else f"{'-':>10s}"
                     for c in report.candidates]
            ratio = report.table.table_bytes / report.uniform_bytes
            print(f"{label:32s} {bound:8.3f} " + " ".join(cells) + f" {report.table.layout:>10s} {ratio:6.2f}")
            if math.isclose(bound, 0.05):
                goal.append((label, report.table.layout, report.table.table_bytes, report.uniform_bytes, ratio))
    for label, layout, nbytes, ubytes, ratio in goal:
        print(f"target at 0.05 %: smallest/uniform bytes <= 0.5 for {label}: {layout} {nbytes} B / {ubytes} B = "
              f"{ratio:.2f} ({'met' if ratio <= 0.5 else 'NOT met'})")

    print("\n2. build and verify each layout for the 16-bit ADC (hut-sipm-b + hut-board-pt1000, 0.05 %)")
    sipm, board = load_sipm(PROFILES / "hut-sipm-b.yaml"), load_board(PROFILES / "hut-board-pt1000.yaml")
    law = build_law(sipm, board, 4.0)
    all_codes = np.arange(1 << 16)
    for layout in LAYOUTS:
        t_build, table = best_of(lambda: build_table(law, board, 0.05, layout), args.repeats)

        def verify():
            dac, status = table.lookup(all_codes)
            sweep = sweep_table(table, law, board)
            assert sweep.within_bound and np.array_equal(dac[table.code_lo:table.code_hi + 1], sweep.table_dac_code)
            return dac

        t_verify, dac = best_of(verify, args.repeats)
        t_loop, loop = best_of(lambda: loop_lookup(table, all_codes.tolist()), 1)
        assert loop == dac.tolist(), "loop baseline disagrees with the reference"
        print(f"{layout:10s}: build {t_build * 1e3:7.1f} ms, verify 65,536 codes {t_verify * 1e3:7.1f} ms "
              f"(target <= 1000 ms: {'met' if t_build + t_verify <= 1.0 else 'NOT met'}); "
              f"baseline plain-Python loop lookup {t_loop * 1e3:8.1f} ms ({t_loop / t_verify:6.1f}x slower)")
    t_all, report = best_of(lambda: compare_layouts(law, board, 0.05), 1)
    print(f"--layout smallest (every layout built and checked at every code): {t_all * 1e3:.0f} ms")

    if not args.no_24_bit:
        print("\n3. the same pair with a 24-bit ADC")
        channel = board.temperature
        b24 = replace(board, temperature=replace(channel, front_end=replace(channel.front_end, adc_bits=24)))
        law24 = build_law(sipm, b24, 4.0)
        t_uni, uni = best_of(lambda: build_table(law24, b24, 0.05, "uniform"), 1)
        t_small, rep = best_of(lambda: compare_layouts(law24, b24, 0.05), 1)
        sweep = sweep_table(rep.table, law24, b24)
        summary = render_sweep_csv(sweep, mode="summary")
        full_bytes = sum(len(line) + 1 for line in render_sweep_csv(sweep, mode="full").splitlines())
        print(f"{sweep.adc_code.size} codes in range; baseline uniform alone {t_uni:.1f} s ({uni.table_bytes} B); "
              f"smallest {t_small:.1f} s ({rep.table.layout}, {rep.table.table_bytes} B); sweep.csv summary "
              f"{len(summary) / 1e3:.0f} kB against full {full_bytes / 1e6:.0f} MB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
