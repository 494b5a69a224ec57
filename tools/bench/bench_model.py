"""Benchmark: SiPM model evaluations per second, vectorised vs a plain Python loop.

Usage: python tools/bench/bench_model.py [--points N] [--loop-points M]

Evaluates breakdown, overvoltage, gain, PDE, dark rate, crosstalk and current
(``compensator.physics.sipm.evaluate``) at N (temperature, bias) points in one
vectorised call, and the same model point by point in a plain Python loop over
M points (the baseline), in the same run. Target: > 1e7 points/s vectorised.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import numpy as np

from compensator.constants import ELEMENTARY_CHARGE_C
from compensator.physics.sipm import evaluate
from compensator.profiles import load_sipm

from timing import best_of  # tools/bench/timing.py, beside this script

PROFILE = Path(__file__).resolve().parents[2] / "hardware_profiles" / "hut-sipm-a.yaml"


def python_loop(dev, temps_c, biases_v):
    """The same model, one point at a time with the math module (the baseline)."""
    bd = dev.breakdown
    out = []
    k_xt = -math.log1p(-dev.crosstalk_probability) / dev.crosstalk_ref_overvoltage_v ** dev.crosstalk_overvoltage_exponent
    for t, v in zip(temps_c, biases_v):
        dt = t - bd.ref_temp_c
        vbd = bd.breakdown_v_at_ref + 1e-3 * dt * (bd.tempco_mv_per_k + bd.curvature_mv_per_k2 * dt)
        ov = max(v - vbd, 0.0)
        c = dev.cell_capacitance_f * (1 + 1e-6 * dev.capacitance_tempco_ppm_per_k * dt)
        g = c * ov / ELEMENTARY_CHARGE_C
        pde = dev.pde_max_fraction * -math.expm1(-ov / dev.pde_saturation_overvoltage_v)
        dcr = (dev.dark_rate_hz * (ov / dev.dark_ref_overvoltage_v) ** dev.dark_overvoltage_exponent
               * 2 ** ((t - dev.dark_ref_temp_c) / dev.dark_doubling_temp_k))
        xt = -math.expm1(-k_xt * ov ** dev.crosstalk_overvoltage_exponent)
        current = ELEMENTARY_CHARGE_C * g * dcr / (1 - xt)
        out.append((vbd, ov, g, pde, dcr, xt, current))
    return out




def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=1_000_000)
    parser.add_argument("--loop-points", type=int, default=50_000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    dev = load_sipm(PROFILE).device
    rng = np.random.default_rng(7)
    temps_c = rng.uniform(-25, 45, args.points)
    biases_v = rng.uniform(25.0, 30.0, args.points)
    vec_s, state = best_of(lambda: evaluate(dev, temps_c, bias_v=biases_v), args.repeats)
    n = min(args.loop_points, args.points)
    t_list, v_list = temps_c[:n].tolist(), biases_v[:n].tolist()
    loop_s, rows = best_of(lambda: python_loop(dev, t_list, v_list), args.repeats)
    # The two implementations must agree before their speeds mean anything.
    gains = np.array([r[2] for r in rows])
    max_rel = float(np.max(np.abs(gains - state.gain[:n]) / np.maximum(state.gain[:n], 1.0)))
    vec_rate, loop_rate = args.points / vec_s, n / loop_s
    print(f"{'implementation':<28}{'points':>12}{'seconds':>12}{'points/s':>14}")
    print(f"{'vectorised (numpy)':<28}{args.points:>12,}{vec_s:>12.4f}{vec_rate:>14.3e}")
    print(f"{'plain Python loop (base)':<28}{n:>12,}{loop_s:>12.4f}{loop_rate:>14.3e}")
    print(f"speed-up {vec_rate / loop_rate:.0f}x; target > 1e7 points/s vectorised: "
          f"{'met' if vec_rate > 1e7 else 'NOT met'}; max relative gain difference {max_rel:.1e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
