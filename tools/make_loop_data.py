"""Write seeded demo loop experiments of the mountain-hut monitor's cooler, with known truth.

Invented demo data (for examples and tests, never a reference):

* ``hut-cooler-step.csv`` -- open-loop step test of the demo cooler
  (``hardware_profiles/hut-cooler.yaml``), simulated with the nonlinear
  Peltier heat balance at the profile's setpoint, current stepped by +0.3 A,
  sensor noise 5 mK. Truth: the linearised plant's gain (dTc/dI).
* ``hut-cooler-relay.csv`` -- relay-feedback experiment on the same cooler:
  the relay adds or removes 0.2 A around the setpoint current, sampled at
  the profile's rate. Truth: the ultimate gain and period of the linear plant
  with one more sample of dead time (hold and relay timing, see make_relay).
* ``fopdt-step.csv`` -- an exact FOPDT step response (K = -2.5 K/A, tau = 40 s,
  theta = 3 s) with 2 mK noise: the two-point method and the fit recover it.

Usage::

    python tools/make_loop_data.py OUTPUT_DIR [--force]

Importable: :func:`simulate_cooler`, :func:`make_step`, :func:`make_relay` and
:func:`make_fopdt_step` return the arrays and the truth, and write CSV only
when given a path.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
COOLER_PROFILE = REPO / "hardware_profiles" / "hut-cooler.yaml"
SEED = 20261202


def _rk4_cooler(params, state, current_a, ambient_c, dt, steps):
    from compensator.loops.plants import cooler_derivatives

    tc, th, ts = state
    for _ in range(steps):
        k1 = cooler_derivatives(params, tc, th, ts, current_a, ambient_c)
        k2 = cooler_derivatives(params, tc + 0.5 * dt * k1[0], th + 0.5 * dt * k1[1], ts + 0.5 * dt * k1[2],
                                current_a, ambient_c)
        k3 = cooler_derivatives(params, tc + 0.5 * dt * k2[0], th + 0.5 * dt * k2[1], ts + 0.5 * dt * k2[2],
                                current_a, ambient_c)
        k4 = cooler_derivatives(params, tc + dt * k3[0], th + dt * k3[1], ts + dt * k3[2], current_a, ambient_c)
        tc = tc + dt / 6.0 * (k1[0] + 2 * k2[0] + 2 * k3[0] + k4[0])
        th = th + dt / 6.0 * (k1[1] + 2 * k2[1] + 2 * k3[1] + k4[1])
        ts = ts + dt / 6.0 * (k1[2] + 2 * k2[2] + 2 * k3[2] + k4[2])
    return float(tc), float(th), float(ts)


def simulate_cooler(params, controller, duration_s, rate_hz=None, substeps=2, noise_k=0.0, seed=SEED):
    """Simulate the nonlinear cooler under a sampled controller.

    Parameters
    ----------
    params : CoolerParams
    controller : callable
        ``controller(k, time_s, measured_temp_c) -> current_a``, called once per sample.
    duration_s : float
    rate_hz : float, optional
        Sample rate (default: the profile's control rate).
    substeps : int
        RK4 steps per sample.
    noise_k : float
        Standard deviation of white sensor noise, kelvin.
    seed : int

    Returns
    -------
    time_s, current_a, measured_temp_c : ndarray
    """
    from compensator.loops.plants import cooler_operating_point

    rate = params.control_rate_hz if rate_hz is None else rate_hz
    T = 1.0 / rate
    n = int(round(duration_s * rate)) + 1
    rng = np.random.default_rng(seed)
    op = cooler_operating_point(params)
    state = (op.cold_temp_c, op.hot_temp_c, op.cold_temp_c)
    delay = params.sensor_dead_time_s
    d_whole = int(np.floor(delay / T + 1e-9))
    frac = delay / T - d_whole
    sensor = np.empty(n)
    measured = np.empty(n)
    current = np.empty(n)
    t = np.arange(n) * T
    for k in range(n):
        sensor[k] = state[2]
        # Reading at k: the sensor state delay seconds ago (linear interpolation between samples).
        i0 = k - d_whole
        a = sensor[max(i0, 0)]
        b = sensor[max(i0 - 1, 0)]
        measured[k] = (1 - frac) * a + frac * b + noise_k * rng.standard_normal()
        current[k] = controller(k, t[k], measured[k])
        state = _rk4_cooler(params, state, current[k], params.ambient_temp_c, T / substeps, substeps)
    return t, current, measured


def _write_csv(path, t, u, y, header_lines, overwrite):
    from compensator.fileio import write_file_atomic

    lines = [f"# {h}" for h in header_lines] + ["time_s,input,output"]
    lines += [f"{a:.3f},{b:.6f},{c:.6f}" for a, b, c in zip(t, u, y)]
    return write_file_atomic(path, "\n".join(lines) + "\n", overwrite=overwrite)


def _load():
    from compensator.profiles import load_thermal

    return load_thermal(COOLER_PROFILE).cooler


def make_step(path=None, step_a=0.3, step_time_s=20.0, duration_s=900.0, noise_k=0.005, overwrite=False):
    """Step test of the demo cooler. Returns ``(time_s, current_a, temp_c, truth)``.

    ``truth`` holds ``gain_k_per_a`` (linearised steady-state slope between the
    two operating points, by the exact steady-state solution) and the
    operating current.
    """
    from compensator.loops.plants import cooler_operating_point, cooler_steady_state

    from scipy.integrate import solve_ivp

    from compensator.loops.plants import cooler_derivatives

    params = _load()
    op = cooler_operating_point(params)
    i0 = op.current_a
    rate = params.control_rate_hz
    t = np.arange(int(round(duration_s * rate)) + 1) / rate
    u = np.where(t >= step_time_s, i0 + step_a, i0)
    # The input is constant after the step, so one adaptive integration covers the record exactly.
    sol = solve_ivp(lambda _t, x: cooler_derivatives(params, x[0], x[1], x[2], i0 + step_a), (step_time_s, t[-1]),
                    [op.cold_temp_c, op.hot_temp_c, op.cold_temp_c], rtol=1e-8, atol=1e-9, method="DOP853",
                    dense_output=True)
    seen = t - params.sensor_dead_time_s
    y = np.full(t.size, op.cold_temp_c)
    after = seen > step_time_s
    y[after] = sol.sol(seen[after])[2]
    y = y + noise_k * np.random.default_rng(SEED).standard_normal(t.size)
    tc0 = float(cooler_steady_state(params, i0)[0])
    tc1 = float(cooler_steady_state(params, i0 + step_a)[0])
    truth = {"gain_k_per_a": (tc1 - tc0) / step_a, "current_a": i0, "step_a": step_a}
    if path is not None:
        _write_csv(path, t, u, y, ["invented demo data: step test of the hut-cooler demo profile (simulated)",
                                   f"current {i0:.4f} A stepped by {step_a} A at {step_time_s} s; "
                                   f"sensor noise {noise_k} K; seed {SEED}",
                                   f"truth: steady gain {truth['gain_k_per_a']:.5f} K/A"], overwrite)
    return t, u, y, truth


def make_relay(path=None, relay_a=0.2, duration_s=150.0, noise_k=0.0, overwrite=False):
    """Relay experiment on the demo cooler. Returns ``(time_s, current_a, temp_c, truth)``.

    ``truth`` holds the ultimate gain and period of the linearised plant as
    the sampled relay sees it: the continuous plant with one more sample of
    dead time, half for the zero-order hold and half because the relay can
    only switch at the first sample after the output crosses the setpoint
    (on average half a period late; common practice). The relay acts on the
    sample it reads (no computation delay).
    """
    import dataclasses

    from compensator.loops.plants import cooler_operating_point, linearise_cooler
    from compensator.loops.verify import ultimate_point

    params = _load()
    op = cooler_operating_point(params)
    i0, sp = op.current_a, params.setpoint_temp_c
    # The cooler is reverse acting: too warm -> more current. Start by cooling.

    def controller(k, t, y):
        return i0 + relay_a if y > sp else i0 - relay_a

    t, u, y = simulate_cooler(params, controller, duration_s, noise_k=noise_k, seed=SEED + 1)
    plant = linearise_cooler(params, op)
    sampled = dataclasses.replace(plant, dead_time_s=plant.dead_time_s + 1.0 / params.control_rate_hz)
    ku, pu = ultimate_point(sampled, None)
    truth = {"ultimate_gain": abs(ku), "ultimate_period_s": pu, "relay_a": relay_a, "current_a": i0}
    if path is not None:
        _write_csv(path, t, u, y, ["invented demo data: relay experiment on the hut-cooler demo profile (simulated)",
                                   f"relay {i0:.4f} +- {relay_a} A around setpoint {sp} C; seed {SEED + 1}",
                                   f"truth (linearised, one sample more dead time): Ku {abs(ku):.5f} A/K, Pu {pu:.4f} s"], overwrite)
    return t, u, y, truth


def make_fopdt_step(path=None, gain=-2.5, time_constant_s=40.0, dead_time_s=3.0, step=0.5, step_time_s=10.0,
                    duration_s=400.0, rate_hz=10.0, noise=0.002, seed=SEED + 2, overwrite=False):
    """Exact FOPDT step response with white noise. Returns ``(time_s, input, output, truth)``."""
    t = np.arange(int(round(duration_s * rate_hz)) + 1) / rate_hz
    u = np.where(t >= step_time_s, step, 0.0)
    s = np.clip(t - step_time_s - dead_time_s, 0.0, None)
    y = 20.0 + gain * step * -np.expm1(-s / time_constant_s)
    y = y + noise * np.random.default_rng(seed).standard_normal(t.size)
    truth = {"gain": gain, "time_constant_s": time_constant_s, "dead_time_s": dead_time_s}
    if path is not None:
        _write_csv(path, t, u, y, ["invented demo data: exact first-order-plus-dead-time step response",
                                   f"truth: K {gain}, tau {time_constant_s} s, theta {dead_time_s} s; "
                                   f"noise {noise}; seed {seed}"], overwrite)
    return t, u, y, truth


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="write the demo loop experiments (invented data)")
    parser.add_argument("directory", help="output directory (created when missing)")
    parser.add_argument("--force", action="store_true", help="replace existing files")
    args = parser.parse_args(argv)
    from compensator.errors import CompensatorError
    from compensator.fileio import output_dir

    try:
        out = output_dir(args.directory, "demo loop data")
        for name, maker in (("hut-cooler-step.csv", make_step), ("hut-cooler-relay.csv", make_relay),
                            ("fopdt-step.csv", make_fopdt_step)):
            *_, truth = maker(out / name, overwrite=args.force)
            print(f"wrote {out / name}: truth {truth}")
    except CompensatorError as exc:
        print(f"make_loop_data: {exc}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(REPO))
    raise SystemExit(main())
