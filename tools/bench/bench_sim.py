"""Benchmark: field-simulation unit-steps per second, against python-control and a plain Python loop.

Usage: python tools/bench/bench_sim.py [--days D] [--units N] [--workers W] [--quick]

On the bundled demo scenario (``hardware_profiles/hut-week-scenario.yaml``,
run at one tick per second), in one run:

1. the ``compensated`` strategy (sensor -> ADC -> the table's integer path ->
   DAC -> supply -> series resistor -> gain) for 1 unit and for N units
   (default 1,000) over D days (default 7) through the Monte Carlo on W local
   processes (default 2): wall time, unit-steps per second, peak resident
   memory of the process and its workers. Targets: 1,000 units x 7 days in
   at most 60 s on 2 cores, at most 2 GB;
2. the linear loop (quantisation, noise, limits and drop off: outdoor air ->
   enclosure -> die -> sensor -> law -> bias) by this engine and by
   python-control's ``forced_response`` on the same continuous system, per
   unit (target: at least 5x python-control); the two outputs are compared;
3. a plain per-step Python loop: :class:`compensator.sim.FieldPlant` stepped
   one tick at a time with the table's scalar lookup (the way a per-tick
   simulator in Python would run), over a shorter span.

Every figure is the wall time of one run (no repeats: the runs are long);
the machine's other load shows in them, so run it on a quiet machine. The
CPU time of the many-unit run (this process and its workers) is printed
too, with the wall time it implies on two idle cores.
"""

from __future__ import annotations

import argparse
from dataclasses import replace
import resource
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[2]


def _peak_rss_mb() -> float:
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return max(own, children) / 1024.0  # kilobytes on Linux


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--days", type=float, default=7.0)
    parser.add_argument("--units", type=int, default=1000)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--quick", action="store_true", help="1 day and 100 units (a smoke run)")
    args = parser.parse_args(argv)
    if args.quick:
        args.days, args.units = 1.0, 100

    import control

    from compensator.profiles import load_scenario
    from compensator.sim import FieldPlant, SimOptions, nominal_units, prepare, setup_from_profiles, simulate_units
    from compensator.sim.environment import sun_load_k
    from compensator.sim.montecarlo import monte_carlo

    scenario = load_scenario(REPO / "hardware_profiles" / "hut-week-scenario.yaml")
    setup = prepare(scenario, days=args.days, strategies=("compensated",))
    # The targets are stated at one tick per second, whatever tick the demo scenario uses.
    setup = replace(setup, tick_s=1.0, ticks=int(round(args.days * 86400.0)))
    ticks = setup.ticks
    print(f"scenario {scenario.name}: {args.days:g} days at {1 / setup.tick_s:g} Hz = {ticks} ticks per unit")

    rows = []
    t0 = time.perf_counter()
    simulate_units(setup, nominal_units(1), seed=1)
    one = time.perf_counter() - t0
    rows.append(("compensated, 1 unit (this engine)", ticks, one))

    cpu0 = resource.getrusage(resource.RUSAGE_CHILDREN).ru_utime + time.process_time()
    t0 = time.perf_counter()
    mc = monte_carlo(setup, units=args.units, seed=7, chunk_units=max(1, -(-args.units // (4 * args.workers))),
                     strategies=("compensated",), workers=args.workers)
    many = time.perf_counter() - t0
    many_cpu = resource.getrusage(resource.RUSAGE_CHILDREN).ru_utime + time.process_time() - cpu0
    rows.append((f"compensated, {args.units} units, {mc.executor}", args.units * ticks, many))
    peak_mb = _peak_rss_mb()

    # The linear loop: this engine against python-control on the same continuous system.
    lin = setup_from_profiles(scenario.sipm, scenario.board, overvoltage_v=3.0, law_kind="constant_overvoltage",
                              drop_correction="none", weather=setup.weather, path=setup.path, tick_s=setup.tick_s,
                              duration_s=setup.duration_s, strategies=("compensated",), trace_points=ticks)
    quiet = SimOptions(quantise=False, noise=False, limits=False, drop=False)
    t0 = time.perf_counter()
    ours = simulate_units(lin, nominal_units(1), seed=1, traces=True, options=quiet)
    ours_s = time.perf_counter() - t0
    tr = ours.traces
    comp = tr.strategies["compensated"]
    a = 1e-3 * scenario.sipm.device.breakdown.tempco_mv_per_k
    ov = comp["bias_v"] - scenario.sipm.device.breakdown.breakdown_v(comp["die_temp_c"]) - 3.0
    drive = tr.outdoor_temp_c + lin.path.internal_heat_k + sun_load_k(lin.weather, tr.time_s)
    A, B = lin.path.continuous_matrices()
    sys_ = control.ss(A, B, [[0.0, -a, a]], [[0.0]])
    t0 = time.perf_counter()
    ref = control.forced_response(sys_, tr.time_s, drive, X0=np.full(3, drive[0])).outputs
    pc_s = time.perf_counter() - t0
    rows.append(("linear loop, 1 unit (this engine)", ticks, ours_s))
    rows.append(("linear loop, 1 unit (python-control forced_response)", ticks, pc_s))
    agree_v = float(np.max(np.abs(ov - ref)))

    # A plain per-step Python loop: the one-unit plant, one tick at a time, scalar table lookup.
    span = min(ticks, 20000)
    plant = FieldPlant(setup, cooled=False)
    reading = plant.reading
    t0 = time.perf_counter()
    for _ in range(span):
        dac, _ = setup.table.lookup(reading.sensor_adc_code)
        reading = plant.step(int(dac))
    loop_s = time.perf_counter() - t0
    rows.append((f"plain per-step Python loop (FieldPlant), 1 unit, {span} ticks", span, loop_s))

    width = max(len(r[0]) for r in rows)
    print(f"{'run':<{width}}  {'unit-steps':>12}  {'wall s':>9}  {'unit-steps/s':>13}")
    for name, steps, secs in rows:
        print(f"{name:<{width}}  {steps:>12d}  {secs:>9.2f}  {steps / secs:>13.3g}")
    print(f"peak resident memory (this process or one worker, the larger): {peak_mb:.0f} MB (target <= 2048 MB)")
    print(f"{args.units} units x {args.days:g} days: {many:.1f} s on {args.workers} processes (target <= 60 s for "
          f"1000 x 7 days on 2 cores): {'met' if many <= 60 or (args.units, args.days) != (1000, 7.0) else 'NOT met'}")
    per_step_ns = 1e9 * many_cpu / (args.units * ticks)
    print(f"CPU time of the {args.units}-unit run: {many_cpu:.1f} s, {per_step_ns:.0f} ns per unit-step; on 2 idle "
          f"cores 1000 units x 7 days would take about {per_step_ns * 1e-9 * 1000 * 7 * 86400 / 2:.0f} s "
          "(the wall time above includes the machine's other load)")
    print(f"linear loop: this engine {pc_s / ours_s:.1f}x python-control's forced_response (target >= 5x); "
          f"largest difference of the overvoltage {agree_v:.2e} V")
    print(f"vectorised engine vs the per-step Python loop on 1 unit: {(ticks / one) / (span / loop_s):.0f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
