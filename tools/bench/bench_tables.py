"""Benchmark: lookup-table bytes against the gain-error bound, and the time to build and verify a table.

Usage: python tools/bench/bench_tables.py [--bounds 0.2 0.1 0.05 0.02 0.01] [--repeats 3]

1. For each bundled sipm/board pair, the smallest table of each layout that
   meets each bound: the uniform power-of-two table is the baseline, the
   optimised (equal-error breakpoints, stored slopes) layout is printed beside
   it with the ratio of bytes. Goal: optimised <= 0.5 x uniform at 0.05 %.
2. On the 16-bit ADC board: time to build the table and to verify all 65,536
   ADC codes through the integer reference (lookup of every code plus the
   gain-error check of every code in range), beside a plain Python loop doing
   the same lookups one code at a time (the baseline), in the same run.
   Target: all 65,536 codes verified in <= 1 s.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import numpy as np

from compensator.errors import CompensatorError
from compensator.firmware.tables import build_table, sweep_table
from compensator.law import build_law
from compensator.profiles import load_board, load_sipm

from timing import best_of  # tools/bench/timing.py, beside this script

PROFILES = Path(__file__).resolve().parents[2] / "hardware_profiles"
PAIRS = [("hut-sipm-a", "hut-board-ntc", 3.0), ("hut-sipm-b", "hut-board-pt1000", 4.0),
         ("hut-sipm-c", "hut-board-pt1000", 5.0)]


def loop_lookup(table, codes):
    """The firmware path one code at a time in plain Python integers (the baseline)."""
    out = []
    x, y, s = table.x.tolist(), table.y.tolist(), table.slope.tolist()
    for n in codes:
        if n < table.fault_lo or n > table.fault_hi:
            out.append(table.safe_dac_code)
        elif n < table.code_lo:
            out.append(table.below_dac_code)
        elif n > table.code_hi:
            out.append(table.above_dac_code)
        else:
            if table.layout == "uniform":
                d = n - table.code_lo
                i, r = d >> table.shift, d & ((1 << table.shift) - 1)
                v = y[i] + (((y[i + 1] - y[i]) * r + ((1 << table.shift) >> 1)) >> table.shift)
            else:
                lo, hi = 0, len(x) - 1
                while lo < hi:
                    mid = (lo + hi + 1) >> 1
                    if x[mid] <= n:
                        lo = mid
                    else:
                        hi = mid - 1
                v = y[lo] + ((s[lo] * (n - x[lo]) + ((1 << table.slope_frac_bits) >> 1)) >> table.slope_frac_bits)
            out.append(min(max(v, table.dac_min), table.dac_max))
    return out




def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--bounds", type=float, nargs="+", default=[0.2, 0.1, 0.05, 0.02, 0.01])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)

    print("1. table bytes against the bound (baseline: smallest uniform power-of-two table)")
    print(f"{'pair':32s} {'bound_%':>8s} {'uniform':>16s} {'optimised':>16s} {'ratio':>6s}")
    goal = []
    for sipm_name, board_name, ov in PAIRS:
        sipm, board = load_sipm(PROFILES / f"{sipm_name}.yaml"), load_board(PROFILES / f"{board_name}.yaml")
        law = build_law(sipm, board, ov)
        for bound in args.bounds:
            cells = []
            for layout in ("uniform", "optimised"):
                try:
                    t = build_table(law, board, bound, layout)
                    cells.append((t.entries, t.table_bytes))
                except CompensatorError as exc:
                    cells.append((None, str(getattr(exc, "term", exc))))
            label = f"{sipm_name}+{board_name} @{ov:g}V"
            if cells[0][0] is None:
                print(f"{label:32s} {bound:8.3f} {'cannot: ' + cells[0][1]:>34s}")
                continue
            ratio = cells[1][1] / cells[0][1]
            print(f"{label:32s} {bound:8.3f} {cells[0][0]:5d} e {cells[0][1]:6d} B {cells[1][0]:5d} e "
                  f"{cells[1][1]:6d} B {ratio:6.2f}")
            if math.isclose(bound, 0.05):
                goal.append((label, ratio))
    for label, ratio in goal:
        print(f"goal at 0.05 %: optimised/uniform bytes <= 0.5 for {label}: {ratio:.2f} "
              f"({'met' if ratio <= 0.5 else 'NOT met'})")

    print("\n2. build and verify a table for the 16-bit ADC (hut-sipm-b + hut-board-pt1000, 0.05 %)")
    sipm, board = load_sipm(PROFILES / "hut-sipm-b.yaml"), load_board(PROFILES / "hut-board-pt1000.yaml")
    law = build_law(sipm, board, 4.0)
    all_codes = np.arange(1 << 16)
    for layout in ("uniform", "optimised"):
        t_build, table = best_of(lambda: build_table(law, board, 0.05, layout), args.repeats)

        def verify():
            dac, status = table.lookup(all_codes)
            sweep = sweep_table(table, law, board)
            assert sweep.within_bound and np.array_equal(dac[table.code_lo:table.code_hi + 1], sweep.table_dac_code)
            return dac

        t_verify, dac = best_of(verify, args.repeats)
        t_loop, loop = best_of(lambda: loop_lookup(table, all_codes.tolist()), 1)
        assert loop == dac.tolist(), "loop baseline disagrees with the reference"
        print(f"{layout:9s}: build {t_build * 1e3:7.1f} ms, verify 65,536 codes {t_verify * 1e3:7.1f} ms "
              f"(target <= 1000 ms: {'met' if t_build + t_verify <= 1.0 else 'NOT met'}); "
              f"baseline plain-Python loop lookup {t_loop * 1e3:7.1f} ms ({t_loop / t_verify:5.1f}x slower)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
