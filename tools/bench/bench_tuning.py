"""Benchmark: tune and verify the bundled cooler loop with every method; robust tuning target <= 2 s.

Prints, per method (PI and PID): time to tune, time to verify, settling time,
overshoot, Ms, gain and phase margin on ``hardware_profiles/hut-cooler.yaml``
(linearised at its setpoint, 10 Hz firmware rate, ZOH, exact dead time, one
sample of computation delay).

Baselines measured in the same run:

* robust tuning against a plain brute-force (kp, ki) grid under the same Ms
  bound (time and the integral gain it reaches);
* our verification against python-control's plain path on the same loop
  (``sample_system`` of the Pade-free sampled plant, ``feedback``,
  ``step_response``, ``step_info`` and ``stability_margins`` on the transfer
  function).

Usage::

    python tools/bench/bench_tuning.py [--repeat N]
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import numpy as np
from timing import median_of  # tools/bench/timing.py, beside this script

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO))




def _brute_force_pi(plant, T, ms_max):
    from compensator.loops import plants, verify

    w = verify.frequency_grid(T, 2000, 6.0)
    p = plants.discrete_frequency_response(plant, T, w)
    q = np.exp(-1j * w * T)
    sign = np.sign(plant.dc_gain)
    ku, _ = verify.ultimate_point(plant, T)
    best = (0.0, 0.0)
    for kp in np.linspace(0.01, 1.0, 60) * abs(ku):
        kis = np.geomspace(1e-4, 1.0, 300) * abs(ku)
        c = sign * (kp + kis[:, None] * T * q / (1 - q))
        ok = 1 / np.min(np.abs(1 + c * p), axis=1) <= ms_max
        for ki in kis[ok][::-1]:
            if ki <= best[1]:
                break
            a = verify._closed_loop(plant, verify.PidGains(sign * kp, sign * ki), T, 1)[0]
            if np.max(np.abs(np.linalg.eigvals(a))) < 1:
                best = (kp, ki)
                break
    return best


def _python_control_verify(plant, gains, T):
    import control

    from compensator.loops import plants, verify

    P = plants.discretise(plant, T, 1)
    C = verify.controller_tf(gains, T)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        L = control.ss2tf(control.series(control.ss(C), P))
        gm, pm, *_ = control.stability_margins(L)
        cl = control.feedback(L, 1)
        t = np.arange(17500) * T
        y = control.step_response(cl, t).outputs
        info = control.step_info(y, T=t, yfinal=1.0)
    return gm, pm, info["SettlingTime"]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3, help="runs per figure (median reported)")
    args = parser.parse_args(argv)
    from compensator.loops import plants, tuning, verify
    from compensator.profiles import load_thermal

    profile = load_thermal(REPO / "hardware_profiles" / "hut-cooler.yaml")
    c = profile.cooler
    plant = plants.linearise_cooler(c, plants.cooler_operating_point(c))
    T = 1.0 / c.control_rate_hz
    print(f"plant: {profile.name} at {c.setpoint_temp_c:g} C, {c.control_rate_hz:g} Hz; "
          f"repeat {args.repeat} (median)")
    header = (f"{'method':>9} {'ctl':>3} {'tune s':>7} {'verify s':>8} {'settle s':>8} {'overshoot %':>11} "
              f"{'Ms':>6} {'GM':>6} {'PM deg':>6}  kp, ki, kd")
    print(header)
    print("-" * len(header))
    robust_time = {}
    for method in tuning.METHODS:
        for pid in (False, True):
            try:
                t_tune, result = median_of(lambda: tuning.tune(plant, method, T, pid=pid), args.repeat)
            except Exception as exc:  # a rule that does not apply is reported, not fatal
                print(f"{method:>9} {'PID' if pid else 'PI':>3}  not applicable: {exc}")
                continue
            t_ver, rep = median_of(lambda: verify.verify_loop(plant, result.gains, T), args.repeat)
            g, m, s = result.gains, rep.margins, rep.step
            if method == "robust":
                robust_time[pid] = t_tune
            print(f"{method:>9} {'PID' if pid else 'PI':>3} {t_tune:7.3f} {t_ver:8.3f} {s.settling_time_s:8.1f} "
                  f"{s.overshoot_pct:11.1f} {m.ms:6.3f} {m.gain_margin:6.2f} {m.phase_margin_deg:6.1f}  "
                  f"{g.kp:.4g}, {g.ki_per_s:.4g}, {g.kd_s:.4g}{'' if rep.stable else '  UNSTABLE'}")
    print()
    t_brute, (kp_b, ki_b) = median_of(lambda: _brute_force_pi(plant, T, 1.4), 1)
    robust_pi = tuning.robust(plant, T, 1.4)
    print("robust PI against a brute-force (kp, ki) grid, Ms <= 1.4:")
    print(f"  ours:        {robust_time[False]:7.3f} s  ki = {abs(robust_pi.ki_per_s):.5g}")
    print(f"  brute force: {t_brute:7.3f} s  ki = {ki_b:.5g}   (baseline)")
    target = 2.0
    worst = max(robust_time.values())
    print(f"  robust tuning target <= {target:g} s: {'met' if worst <= target else 'MISSED'} (worst {worst:.3f} s)")
    print()
    g = tuning.tune(plant, "simc", T).gains
    t_ours, ours = median_of(lambda: verify.verify_loop(plant, g, T), args.repeat)
    t_theirs, theirs = median_of(lambda: _python_control_verify(plant, g, T), args.repeat)
    print("verification of the SIMC PI loop:")
    print(f"  ours:                  {t_ours:7.3f} s  GM {ours.margins.gain_margin:.3f}  "
          f"PM {ours.margins.phase_margin_deg:.2f} deg  settling {ours.step.settling_time_s:.1f} s")
    print(f"  python-control plain:  {t_theirs:7.3f} s  GM {theirs[0]:.3f}  PM {theirs[1]:.2f} deg  "
          f"settling {theirs[2]:.1f} s   (baseline)")
    print()
    _long_dead_times(args.repeat)
    return 0


def _long_dead_times(repeat):
    """Tune + verify with long dead times at high rates (bounded delay line) against the exact delay line."""
    import dataclasses

    from compensator.loops import design, plants, sampled, tuning, verify
    from compensator.profiles import load_thermal

    print("long dead times at high rates: tune + verify, target every case < 10 s")
    print(f"{'case':>36} {'delay samples':>13} {'simc s':>7} {'robust s':>8} {'Ms robust':>9} {'analysis T s':>12}")
    cooler = load_thermal(REPO / "hardware_profiles" / "hut-cooler.yaml").cooler
    fast = dataclasses.replace(cooler, control_rate_hz=1e4)  # the highest rate the thermal schema allows
    slow_sensor = dataclasses.replace(fast, sensor_dead_time_s=600.0)  # the longest dead time it allows
    cases = [("--fopdt 2 300 60 --rate-hz 100", lambda m: design.design_model_loop(
                 plants.FopdtModel(2.0, 300.0, 60.0), rate_hz=100.0, method=m)),
             ("demo cooler at 1e4 Hz", lambda m: design.design_cooler_loop(fast, method=m)),
             ("demo cooler at 1e4 Hz, 600 s dead time", lambda m: design.design_cooler_loop(slow_sensor, method=m))]
    for label, run in cases:
        t_simc, _ = median_of(lambda: run("simc"), 1)
        t_rob, res = median_of(lambda: run("robust"), 1)
        n = sampled.delay_samples(res.plant.dead_time_s, res.sample_time_s)
        print(f"{label:>36} {n:13d} {t_simc:7.2f} {t_rob:8.2f} {res.report.margins.ms:9.3f} "
              f"{res.report.analysis_period_s:12.4g}")
    # Baseline: the exact (unbounded) delay line where it is still affordable, against the bounded one.
    plant = plants.fopdt_plant(2.0, 300.0, 6.0)
    T = 0.01
    g = tuning.tune(plant, "simc", T).gains
    t_b, bounded = median_of(lambda: verify.verify_loop(plant, g, T), repeat)
    a_exact = verify._closed_loop(plant, g, T, 1)[0]

    def exact():
        import numpy as np

        return float(np.max(np.abs(np.linalg.eigvals(a_exact))))
    t_e, radius = median_of(exact, 1)
    print(f"  --fopdt 2 300 6 at 100 Hz ({a_exact.shape[0]} states exact): bounded verify {t_b:.2f} s, settling "
          f"{bounded.step.settling_time_s:.1f} s; exact eigenvalues alone {t_e:.2f} s (baseline), spectral radius "
          f"{radius:.6f} vs bounded {bounded.spectral_radius ** (T / bounded.analysis_period_s):.6f} (per firmware "
          "period)")


if __name__ == "__main__":
    raise SystemExit(main())
