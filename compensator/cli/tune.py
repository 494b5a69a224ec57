"""``compensator tune``: PI/PID gains for the cooler or bias loop, verified on the sampled loop."""

from __future__ import annotations

import sys
from pathlib import Path

from compensator.cli._common import add_json_flag, format_table, print_json
from compensator.errors import InputError, ModelError, Problem
from compensator.fileio import output_dir

ORDER = 50
COMMAND = "tune"
HELP = "tune a PI/PID loop (cooler or bias supply) and verify it on the sampled loop"

#: Default fixed-point scales for --emit-c (documented in --help).
COOLER_INPUT_PER_COUNT_K = 0.01
COOLER_OUTPUT_PER_COUNT_A = 0.001


def register(subparsers) -> None:
    from compensator.loops.tuning import DEFAULT_MS, METHODS

    p = subparsers.add_parser(
        COMMAND,
        help=HELP,
        description=(
            "Tune PI (or PID with --pid) gains in parallel form u = kp e + ki integral(e) + kd de/dt for the "
            "thermoelectric-cooler loop (--plant THERMAL_PROFILE, linearised at its setpoint), the bias supply "
            "loop (--plant BOARD_PROFILE) or a given model (--fopdt / --sopdt), then verify gain and phase "
            "margin, Ms and the closed-loop step on the loop discretised at the firmware rate (zero-order "
            "hold, exact dead time, one sample of computation delay). The rules see the model's dead time "
            "plus 1.5 samples for the hold and computation delay unless --ignore-sampling-delay. Exit status "
            "1 when the verified loop is unstable."),
    )
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--plant", metavar="FILE", help="a thermal profile (cooler loop) or board profile (bias loop)")
    src.add_argument("--fopdt", nargs=3, type=float, metavar=("K", "TAU_S", "DEAD_TIME_S"),
                     help="first order plus dead time: gain, time constant (s), dead time (s)")
    src.add_argument("--sopdt", nargs=4, type=float, metavar=("K", "TAU1_S", "TAU2_S", "DEAD_TIME_S"),
                     help="second order plus dead time (needed for SIMC PID)")
    p.add_argument("--method", required=True, choices=METHODS,
                   help="simc, amigo, imc, zn (step-response rule), zn-cycle (ultimate-cycle rule) or robust "
                        "(largest integral gain with Ms <= --ms)")
    p.add_argument("--pid", action="store_true", help="tune a PID instead of a PI")
    p.add_argument("--ms", type=float, default=DEFAULT_MS, help=f"Ms bound for --method robust (default {DEFAULT_MS})")
    p.add_argument("--rate-hz", type=float, help="firmware loop rate, hertz (default: the profile's control.rate_hz)")
    p.add_argument("--tau-c", type=float, metavar="SECONDS",
                   help="closed-loop time constant: tau_c for simc (default: the dead time), lambda for imc")
    p.add_argument("--ignore-sampling-delay", action="store_true",
                   help="apply the rules to the continuous model as given (no 1.5-sample allowance)")
    op = p.add_argument_group("operating point (thermal profiles)")
    op.add_argument("--setpoint-temp-c", type=float, help="cold-plate setpoint, degree C (default: the profile's)")
    op.add_argument("--ambient-temp-c", type=float, help="ambient, degree C (default: the profile's)")
    op.add_argument("--current-a", type=float,
                    help="linearise at this current instead of the setpoint's (to study other operating points)")
    op.add_argument("--ambient-range", nargs=2, type=float, metavar=("MIN_C", "MAX_C"),
                    help="re-verify the gains with the cooler linearised at ambients across this range (field "
                         "enclosures: -25 45); with --method robust the Ms bound must hold at every one")
    p.add_argument("--regulator-tau-s", type=float,
                   help="bias regulator time constant, s (board profiles; default: the profile's "
                        "supply.regulator_time_constant_s)")
    em = p.add_argument_group("C emission (--emit-c)")
    em.add_argument("--emit-c", metavar="DIR", help="write the fixed-point PID as C99 header and source into DIR")
    em.add_argument("--name", help="C symbol prefix and file stem (default: cooler_pid, bias_pid or loop_pid)")
    em.add_argument("--input-per-count", type=float,
                    help=f"measurement units per input count (cooler default {COOLER_INPUT_PER_COUNT_K} K; "
                         "board default one DAC step of bias, volt)")
    em.add_argument("--output-per-count", type=float,
                    help=f"actuator units per output count (cooler default {COOLER_OUTPUT_PER_COUNT_A} A; "
                         "board default 1 DAC code)")
    em.add_argument("--out-min", type=float, help="lowest actuator value (default: -max current, or DAC code 0)")
    em.add_argument("--out-max", type=float,
                    help="highest actuator value (default: the current of maximum cooling, or the full-scale code)")
    p.add_argument("--plot", metavar="DIR", help="write Bode, sensitivity and step figures (PNG) into DIR")
    p.add_argument("--force", action="store_true", help="replace existing plot and C files")
    add_json_flag(p)
    p.set_defaults(handler=run)


def _check_arguments(args):
    def bad(flag, reason):
        raise InputError(Problem("<command line>", 0, flag, reason))

    if not args.ms > 1:
        bad("--ms", f"must exceed 1, got {args.ms:g}")
    for name in ("rate_hz", "tau_c", "regulator_tau_s"):
        value = getattr(args, name)
        if value is not None and not value > 0:
            bad(f"--{name.replace('_', '-')}", f"must be positive, got {value:g}")
    for name in ("input_per_count", "output_per_count"):
        if getattr(args, name) == 0:
            bad(f"--{name.replace('_', '-')}", "must be nonzero")


def _caution_thermal(cooler, point) -> str:
    from compensator.physics.thermal import dew_point_c

    dew = float(dew_point_c(point.ambient_temp_c, cooler.ambient_relative_humidity_pct))
    return (f"caution: a thermoelectric cooler whose hot side is not on its heat sink heats without limit "
            f"(thermal runaway) and can burn people and parts: never power it unsinked, and cut the current above "
            f"{cooler.max_hot_temp_c:g} C on the hot side. Keep the cold plate above the dew point plus a margin "
            f"(dew point {dew:.1f} C at {point.ambient_temp_c:g} C and {cooler.ambient_relative_humidity_pct:g} % RH; "
            f"margin {cooler.dew_margin_k:g} K) or condensation will wet the electronics. Local codes and licensed "
            f"practice take precedence over these notes.")


CAUTION_BIAS = ("caution: SiPM bias supplies deliver tens of volts; above 60 V dc a circuit counts as hazardous live "
                "(IEC 61010-1). Test the loop at low voltage first, keep the output limits in hardware, and follow "
                "local codes and licensed practice.")


def _load_plant(args):
    """Return (plant, profile or None, kind, defaults dict for emission, extra warnings, caution text)."""
    from compensator.loops import plants

    if args.fopdt is not None or args.sopdt is not None:
        flag = "--fopdt" if args.fopdt is not None else "--sopdt"
        try:
            if args.fopdt is not None:
                k, tau, theta = args.fopdt
                model = plants.FopdtModel(k, tau, theta)
            else:
                k, t1, t2, theta = args.sopdt
                model = plants.SopdtModel(k, max(t1, t2), min(t1, t2), theta)
            plant = plants.model_plant(model)
        except ModelError as exc:
            raise InputError(Problem("<command line>", 0, flag, str(exc))) from None
        return plant, None, flag[2:], model, {}, [], None
    from compensator.profiles import BoardProfile, ThermalProfile, load_profile

    profile = load_profile(args.plant)
    if isinstance(profile, ThermalProfile):
        from compensator.loops.verify import cooler_operating_warnings

        c = profile.cooler
        try:
            point = plants.cooler_operating_point(c, args.setpoint_temp_c, args.current_a, args.ambient_temp_c)
        except ModelError as exc:
            key = "--current-a" if args.current_a is not None else "control.setpoint_temp_c"
            raise InputError(Problem(args.plant, 0, key, str(exc))) from None
        plant = plants.linearise_cooler(c, point)
        out_min, out_max = plants.cooler_current_limits_a(c, point.ambient_temp_c)
        emit = dict(name="cooler_pid", input_per_count=COOLER_INPUT_PER_COUNT_K,
                    output_per_count=COOLER_OUTPUT_PER_COUNT_A, out_min=out_min, out_max=out_max,
                    rate_hz=c.control_rate_hz)
        return plant, profile, "thermal", None, emit, cooler_operating_warnings(c, point), _caution_thermal(c, point)
    if isinstance(profile, BoardProfile):
        sup = profile.supply
        plant = plants.bias_supply_plant(sup, args.regulator_tau_s)  # None: the profile's own
        emit = dict(name="bias_pid", input_per_count=sup.lsb_v, output_per_count=1.0, out_min=0.0,
                    out_max=float(sup.dac.full_scale_code), rate_hz=profile.control_rate_hz)
        return plant, profile, "board", None, emit, [], CAUTION_BIAS
    raise InputError(Problem(args.plant, 0, "kind", "tune needs a thermal or board profile, got a sipm profile"))


def _targets(args, emit_name, stem):
    out = []
    if args.emit_c:
        out += [Path(args.emit_c) / f"{emit_name}.h", Path(args.emit_c) / f"{emit_name}.c"]
    if args.plot:
        out += [Path(args.plot) / f"{stem}-{k}.png" for k in ("bode", "sensitivity", "step")]
    return out


def run(args) -> int:
    from compensator.loops import tuning, verify

    _check_arguments(args)
    plant, profile, kind, model, emit, extra_warnings, caution = _load_plant(args)
    if args.ambient_range is not None and kind != "thermal":
        raise InputError(Problem("<command line>", 0, "--ambient-range", "applies to a thermal profile only"))
    rate = args.rate_hz or emit.get("rate_hz")
    if rate is None:
        raise InputError(Problem("<command line>", 0, "--rate-hz", "required with --fopdt or --sopdt"))
    if caution:
        print(f"compensator: {caution}", file=sys.stderr)
    T = 1.0 / rate
    emit_name = args.name or emit.get("name", "loop_pid")
    stem = f"{plant.name.replace(' ', '-')}-{args.method}{'-pid' if args.pid else ''}"
    if args.emit_c:
        output_dir(args.emit_c, "C output")
        for key in ("input_per_count", "output_per_count", "out_min", "out_max"):
            if getattr(args, key) is None and key not in emit:
                raise InputError(Problem("<command line>", 0, f"--{key.replace('_', '-')}",
                                         "required with --emit-c for a --fopdt/--sopdt model"))
    if not args.force:
        for target in _targets(args, emit_name, stem):
            if target.exists():
                raise InputError(Problem(str(target), 0, "", "already exists; not overwriting (use --force to "
                                                             "replace it)"))
    ambients, others = _ambient_plants(args, profile, extra_warnings) if args.ambient_range else ([], [])
    result = tuning.tune(plant, args.method, T, pid=args.pid, ms_max=args.ms, tau_c_s=args.tau_c, model=model,
                         include_sampling_delay=not args.ignore_sampling_delay, also_plants=others)
    report = verify.verify_loop(plant, result.gains, T, ms_limit=args.ms if args.method == "robust" else None)
    warnings = list(extra_warnings) + list(report.warnings)
    checks = []
    if ambients:
        checks = verify.check_cooler_ambient_range(profile.cooler, result.gains, T, ambients, args.setpoint_temp_c)
        for c in checks:
            if not c.reachable:
                continue
            if not c.stable:
                warnings.append(f"at ambient {c.ambient_temp_c:g} C the loop is UNSTABLE with these gains")
            elif c.ms > verify.POOR_MS:
                warnings.append(f"at ambient {c.ambient_temp_c:g} C Ms is {c.ms:.2f}: fragile")
    files = []
    if args.emit_c:
        files += _emit(args, result, T, emit, emit_name, profile)
    if args.plot:
        from compensator.loops.plots import plot_loop

        files += [str(f) for f in plot_loop(args.plot, stem, plant, result.gains, report, overwrite=args.force)]
    out = _summary(args, plant, profile, kind, result, report, rate, warnings, files)
    if checks:
        from dataclasses import asdict

        out["ambient_check"] = [asdict(c) for c in checks]
    for w in warnings:
        print(f"compensator: warning: {w}", file=sys.stderr)
    if args.json:
        print_json(out)
    else:
        _print_human(out)
    return 0 if report.stable and all(c.stable for c in checks if c.reachable) else 1


def _ambient_plants(args, profile, warnings):
    """Ambient temperatures to check (the range in 5 steps plus the nominal) and the reachable plants there."""
    import numpy as np

    from compensator.loops.plants import linearise_cooler_over_ambient

    lo, hi = sorted(args.ambient_range)
    c = profile.cooler
    nominal = c.ambient_temp_c if args.ambient_temp_c is None else args.ambient_temp_c
    ambients = sorted({*(float(v) for v in np.linspace(lo, hi, 5)), float(nominal)})
    others, unreachable = linearise_cooler_over_ambient(c, [t for t in ambients if t != nominal], args.setpoint_temp_c)
    warnings.extend(unreachable)
    return ambients, others


def _emit(args, result, T, emit, name, profile):
    from compensator.firmware.pid import PidSettings, quantise_pid
    from compensator.firmware.pid_c import write_pid_c

    g = result.gains
    pick = {k: (getattr(args, k) if getattr(args, k) is not None else emit.get(k))
            for k in ("input_per_count", "output_per_count", "out_min", "out_max")}
    settings = PidSettings(kp=g.kp, ki_per_s=g.ki_per_s, kd_s=g.kd_s, sample_time_s=T, out_min=pick["out_min"],
                           out_max=pick["out_max"], derivative_filter_n=g.derivative_filter_n,
                           setpoint_weight=g.setpoint_weight)
    coeffs = quantise_pid(settings, input_per_count=pick["input_per_count"],
                          output_per_count=pick["output_per_count"])
    banner = {"method": result.method, "controller": "PID" if result.pid else "PI", "rate_hz": f"{1.0 / T:g}",
              "kp": f"{g.kp:.6g}", "ki_per_s": f"{g.ki_per_s:.6g}", "kd_s": f"{g.kd_s:.6g}",
              "input_per_count": f"{pick['input_per_count']:.6g}",
              "output_per_count": f"{pick['output_per_count']:.6g}",
              "out_min": f"{pick['out_min']:.6g}", "out_max": f"{pick['out_max']:.6g}"}
    written = write_pid_c(coeffs, args.emit_c, name=name, profiles=(profile,) if profile else (), settings=banner,
                          overwrite=args.force)
    return [str(p) for p in written]


def _summary(args, plant, profile, kind, result, report, rate, warnings, files):
    from dataclasses import asdict

    g, m, s = result.gains, report.margins, report.step
    plant_info = {"kind": kind, "name": profile.name if profile else plant.name,
                  "source": profile.source if profile else None, "input": plant.input_label,
                  "output": plant.output_label, "dc_gain": plant.dc_gain, "dead_time_s": plant.dead_time_s}
    if plant.operating_point is not None:
        plant_info["operating_point"] = asdict(plant.operating_point)
    if result.model is not None:
        plant_info["process_model"] = _process_model(result.model)
    return {
        "method": result.method, "controller": "PID" if result.pid else "PI",
        "kp": g.kp, "ki_per_s": g.ki_per_s, "kd_s": g.kd_s,
        "derivative_filter_n": g.derivative_filter_n, "setpoint_weight": g.setpoint_weight,
        "rate_hz": rate, "sample_time_s": 1.0 / rate,
        "rule_dead_time_s": result.rule_dead_time_s if result.method not in ("robust", "zn-cycle") else None,
        "tau_c_s": result.closed_loop_time_constant_s,
        "ultimate_gain": result.ultimate_gain, "ultimate_period_s": result.ultimate_period_s,
        "ms_target": result.ms_target,
        "margins": {"gain_margin": m.gain_margin, "phase_margin_deg": m.phase_margin_deg, "ms": m.ms,
                    "crossover_rad_s": m.crossover_rad_s, "phase_crossover_rad_s": m.phase_crossover_rad_s,
                    "delay_margin_s": m.delay_margin_s},
        "step": {"rise_time_s": s.rise_time_s, "settling_time_s": s.settling_time_s,
                 "overshoot_pct": s.overshoot_pct, "peak_time_s": s.peak_time_s,
                 "peak_actuator_per_unit": s.peak_actuator, "load_iae": s.load_iae},
        "stable": report.stable, "plant": plant_info, "warnings": warnings, "files": files,
    }


def _process_model(model) -> dict:
    """The process model's fields under their output names (``gain`` is the ``process_gain``)."""
    from dataclasses import asdict

    return {("process_gain" if k == "gain" else k): v for k, v in asdict(model).items()}


def _fmt(v, spec=".4g"):
    if v is None:
        return "-"
    return format(v, spec)


def _print_human(out):
    p = out["plant"]
    print(f"{out['controller']} by {out['method']} for {p['name']} ({p['input']} -> {p['output']}), "
          f"{out['rate_hz']:g} Hz")
    rows = [("kp", _fmt(out["kp"]), "per output unit"), ("ki", _fmt(out["ki_per_s"]), "per output unit per s"),
            ("kd", _fmt(out["kd_s"]), "per output unit times s")]
    print(format_table(rows, ["gain", "value", "unit (actuator units)"]))
    m, s = out["margins"], out["step"]
    print(f"margins: gain {_fmt(m['gain_margin'], '.3g')}, phase {_fmt(m['phase_margin_deg'], '.1f')} deg, "
          f"Ms {_fmt(m['ms'], '.3f')}, crossover {_fmt(m['crossover_rad_s'], '.3g')} rad/s")
    if out["stable"]:
        print(f"setpoint step: rise {_fmt(s['rise_time_s'], '.3g')} s, settling {_fmt(s['settling_time_s'], '.3g')} s, "
              f"overshoot {_fmt(s['overshoot_pct'], '.1f')} %, peak actuator {_fmt(s['peak_actuator_per_unit'])} "
              "per unit step")
    else:
        print("closed loop UNSTABLE: do not use these gains")
    if out.get("ambient_check"):
        rows = [(f"{c['ambient_temp_c']:g}", "yes" if c["reachable"] else "no", _fmt(c["current_a"], ".3f"),
                 _fmt(c["ms"], ".3f"), _fmt(c["gain_margin"], ".3g"), _fmt(c["phase_margin_deg"], ".1f"),
                 "yes" if c["stable"] else "NO") for c in out["ambient_check"]]
        print(format_table(rows, ["ambient C", "reachable", "current A", "Ms", "GM", "PM deg", "stable"]))
    for f in out["files"]:
        print(f"wrote {f}")
