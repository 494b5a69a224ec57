"""Benchmark: PID steps per second, Python references vs the generated C, with baselines.

Usage: python tools/bench/bench_pid.py [--steps N] [--repeats R]

Runs the fixed-point reference (``FixedPid.run``), the float reference
(``FloatPid.run``) and the generated C step function (compiled with ``cc -O2``),
both the default 64-bit-intermediate code and the 32-bit-only variant (with
its own reference),
over the same seeded sequence of N steps, recorded once from a closed loop
(first-order plant, measurement noise, setpoint steps large enough to
saturate the output, so limits, rate limit and back-calculation all act). Two
baselines are measured in the same run: a plain Python loop doing one
multiply-add-shift per step (the interpreter's floor for any per-step Python
code) and a C loop summing the same inputs (the memory floor). The C outputs
are checked bit for bit against the Python fixed-point reference (a checksum
over every output). No target is set; the figures show the cost of running
the bit-exact reference in tests and simulations.
"""

from __future__ import annotations

import argparse
import math
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

from compensator.firmware.pid import FixedPid, FloatPid, PidSettings, quantise_pid
from compensator.firmware.pid_c import render_pid_c

from timing import best_of  # tools/bench/timing.py, beside this script

SETTINGS = PidSettings(kp=0.8, ki_per_s=0.05, kd_s=2.0, sample_time_s=0.1, out_min=-2.0, out_max=2.0,
                       setpoint_weight=0.6, rate_limit_per_s=5.0)
INPUT_PER_COUNT = 0.001
OUTPUT_PER_COUNT = 0.001

C_BENCH = r"""
#define _POSIX_C_SOURCE 199309L
#include <stdio.h>
#include <stdlib.h>
#include <stdint.h>
#include <time.h>
#include "bench_pid.h"

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

int main(int argc, char **argv)
{
    long n = argc > 1 ? atol(argv[1]) : 0;
    int repeats = argc > 2 ? atoi(argv[2]) : 1;
    int32_t *in = malloc(sizeof(int32_t) * 2u * (size_t)n);
    double best_pid = 1e30, best_base = 1e30;
    int64_t checksum = 0, basesum = 0;
    int rep;
    if (in == NULL || fread(in, sizeof(int32_t), 2u * (size_t)n, stdin) != 2u * (size_t)n) {
        return 3;
    }
    for (rep = 0; rep < repeats; rep++) {
        bench_pid_state_t state;
        long k;
        double t0, t1;
        int64_t sum = 0;
        bench_pid_init(&state);
        t0 = now_s();
        for (k = 0; k < n; k++) {
            int32_t out = bench_pid_step(&state, in[2 * k], in[2 * k + 1]);
            sum = sum * 31 + out;
        }
        t1 = now_s();
        if (t1 - t0 < best_pid) { best_pid = t1 - t0; }
        checksum = sum;
        sum = 0;
        t0 = now_s();
        for (k = 0; k < n; k++) {
            sum = sum * 31 + (in[2 * k] - in[2 * k + 1]);
        }
        t1 = now_s();
        if (t1 - t0 < best_base) { best_base = t1 - t0; }
        basesum = sum;
    }
    printf("%.9f %.9f %lld %lld\n", best_pid, best_base, (long long)checksum, (long long)basesum);
    free(in);
    return 0;
}
"""


def make_inputs(n: int, seed: int = 2026):
    """Seeded setpoint and measurement counts from a closed loop, so the signals look like a real loop's.

    The float controller drives a first-order plant (gain 1 K/A, time constant
    20 s, zero-order hold) with measurement noise and setpoint steps; the
    recorded sequences are then replayed open loop to every implementation.
    """
    rng = np.random.default_rng(seed)
    setpoint = np.repeat(rng.integers(-2600, 2601, n // 3000 + 1), 3000)[:n].astype(np.int64)
    noise = rng.integers(-4, 5, n)
    a = math.exp(-SETTINGS.sample_time_s / 20.0)
    pid = FloatPid(SETTINGS)
    measurement = np.empty(n, dtype=np.int64)
    temp_k = 0.0
    for k in range(n):
        measurement[k] = round(temp_k / INPUT_PER_COUNT) + noise[k]
        u = pid.step(setpoint[k] * INPUT_PER_COUNT, measurement[k] * INPUT_PER_COUNT)
        temp_k = a * temp_k + (1 - a) * 1.0 * u
    return setpoint, measurement


def checksum(outputs) -> int:
    """The C program's checksum, sum = sum * 31 + out in wrapping int64."""
    total = 0
    mask = (1 << 64) - 1
    for out in outputs:
        total = (total * 31 + int(out)) & mask
    return total - (1 << 64) if total >= 1 << 63 else total




def _run_c(coeffs, setpoint, measurement, n: int, repeats: int):
    """Compile the rendered step function with the timing harness; return (time, baseline time, checksum)."""
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for name, text in render_pid_c(coeffs, name="bench_pid").items():
            (tmp / name).write_text(text)
        (tmp / "bench.c").write_text(C_BENCH)
        subprocess.run(["cc", "-std=c99", "-O2", "-Wall", "-Wextra", "-Werror", "-o", str(tmp / "bench"),
                        str(tmp / "bench.c"), str(tmp / "bench_pid.c")], check=True)
        data = np.column_stack([setpoint, measurement]).astype("<i4").tobytes()
        result = subprocess.run([str(tmp / "bench"), str(n), str(repeats)], input=data, capture_output=True,
                                check=True)
    t_c, t_c_base, c_sum, _ = result.stdout.decode().split()
    return float(t_c), float(t_c_base), int(c_sum)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--steps", type=int, default=300_000)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    n = args.steps
    coeffs = quantise_pid(SETTINGS, input_per_count=INPUT_PER_COUNT, output_per_count=OUTPUT_PER_COUNT)
    setpoint, measurement = make_inputs(n)

    t_fixed, run = best_of(lambda: FixedPid(coeffs).run(setpoint, measurement), args.repeats)
    t_float, _ = best_of(lambda: FloatPid(SETTINGS).run(setpoint * INPUT_PER_COUNT, measurement * INPUT_PER_COUNT),
                         args.repeats)
    r_list, y_list = setpoint.tolist(), measurement.tolist()
    kp, shift, half = coeffs.kp_mant, coeffs.p_shift, 1 << max(coeffs.p_shift - 1, 0)

    def python_floor():
        return [(kp * (r - y) + half) >> shift for r, y in zip(r_list, y_list)]

    t_base, _ = best_of(python_floor, args.repeats)
    rows = [
        ("Python baseline: one multiply-shift per step", t_base),
        ("FloatPid.run (float reference)", t_float),
        ("FixedPid.run (bit-exact reference)", t_fixed),
    ]
    c_note = "C: skipped (no cc on PATH)"
    coeffs32 = quantise_pid(SETTINGS, input_per_count=INPUT_PER_COUNT, output_per_count=OUTPUT_PER_COUNT,
                            word_bits=32, input_limit_count=4096)
    t_fixed32, run32 = best_of(lambda: FixedPid(coeffs32).run(setpoint, measurement), args.repeats)
    rows.append((f"FixedPid.run, 32-bit variant (F = {coeffs32.state_frac_bits})", t_fixed32))
    if shutil.which("cc"):
        notes = []
        for label, coeffs_c, reference in (("generated C, cc -O2", coeffs, run),
                                           ("generated C, 32-bit only, cc -O2", coeffs32, run32)):
            t_c, t_c_base, c_sum = _run_c(coeffs_c, setpoint, measurement, n, args.repeats)
            if label.endswith("cc -O2") and "32" not in label:
                rows.append(("C baseline: sum of the inputs", t_c_base))
            rows.append((label, t_c))
            same = c_sum == checksum(reference.output)
            notes.append(f"{label}: bit-exact with its reference over {n} steps: {'yes' if same else 'NO'}")
            if not same:
                print(notes[-1], file=sys.stderr)
                return 1
        c_note = "\n".join(notes)

    print(f"PID steps over {n} seeded steps (best of {args.repeats}); "
          f"{np.mean((run.output == coeffs.out_min_count) | (run.output == coeffs.out_max_count)):.1%} "
          f"of outputs at a limit")
    width = max(len(r[0]) for r in rows)
    print(f"{'implementation'.ljust(width)}  {'time s':>9}  {'steps/s':>12}  {'ns/step':>9}")
    for label, seconds in rows:
        print(f"{label.ljust(width)}  {seconds:9.4f}  {n / seconds:12.3e}  {1e9 * seconds / n:9.1f}")
    print(c_note)
    return 0


if __name__ == "__main__":
    sys.exit(main())
