"""``compensator tune``: PI/PID gains for the cooler or bias loop, verified on the sampled loop."""

from __future__ import annotations

import math
import sys
from pathlib import Path

from compensator.cli._common import (
    EXIT_FAILURE,
    EXIT_OK,
    add_json_flag,
    bounded_float,
    bounded_int,
    caution,
    finite_float,
    format_table,
    positive_float,
    print_json,
    temperature_c,
    usage_error,
)
from compensator.errors import InputError, ModelError, Problem
from compensator.fileio import output_dir

__all__ = ["ORDER", "COMMAND", "HELP", "COOLER_INPUT_PER_COUNT_K", "COOLER_OUTPUT_PER_COUNT_A", "register", "run"]

ORDER = 50
COMMAND = "tune"
HELP = "tune a PI/PID loop (cooler or bias supply) and verify it on the sampled loop"

#: Default fixed-point scales for --emit-c (documented in --help).
COOLER_INPUT_PER_COUNT_K = 0.01
COOLER_OUTPUT_PER_COUNT_A = 0.001

_THERMAL_ONLY = ("setpoint_temp_c", "ambient_temp_c", "current_a", "ambient_range", "relative_humidity_pct")
_EMIT_ONLY = ("name", "input_per_count", "output_per_count", "out_min", "out_max")


def _flag(dest: str) -> str:
    return "--" + dest.replace("_", "-")


#: argparse type: relative humidity, above 0 and at most 100 percent.
_humidity_pct = bounded_float(0.0, 100.0, above=True, unit="%")


def register(subparsers) -> None:
    from compensator.loops.choices import DEFAULT_MS, METHODS

    p = subparsers.add_parser(
        COMMAND,
        help=HELP,
        description=(
            "Tune PI (or PID with --pid) gains in parallel form u = kp e + ki integral(e) + kd de/dt for the "
            "thermoelectric-cooler loop (--plant THERMAL_PROFILE, linearised at its setpoint), the bias supply "
            "loop (--plant BOARD_PROFILE with a bias_readback channel), a given model (--fopdt / --sopdt) or a "
            "relay result (--ultimate KU PU), then verify gain and phase margin, Ms and the closed-loop step on "
            "the loop discretised at the firmware rate (zero-order hold, exact dead time, one sample of "
            "computation delay). --verify checks gains you already have instead of tuning. Gains carry units: "
            "A/K, A/(K s), A s/K for the cooler; DAC code/V ... for the bias loop. Exit status 1 when the "
            "verified loop is unstable (at any ambient of --ambient-range) or misses the Ms bound there. JSON "
            "fields: kp, ki_per_s, kd_s with kp_unit, ki_unit, kd_unit; margins; step; ambient_check (one record "
            "per ambient with dew_point_c and hot_temp_c); findings (code, severity, message); ok."),
    )
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--plant", metavar="FILE", help="a thermal profile (cooler loop) or board profile (bias loop)")
    src.add_argument("--fopdt", nargs=3, type=finite_float, metavar=("K", "TAU_S", "DEAD_TIME_S"),
                     help="first order plus dead time: gain, time constant (s), dead time (s)")
    src.add_argument("--sopdt", nargs=4, type=finite_float, metavar=("K", "TAU1_S", "TAU2_S", "DEAD_TIME_S"),
                     help="second order plus dead time (needed for SIMC PID)")
    src.add_argument("--ultimate", nargs=2, type=finite_float, metavar=("KU", "PU_S"),
                     help="ultimate gain (signed like the process) and period (s) from a relay experiment "
                          "(identify --model relay)")
    p.add_argument("--method", choices=METHODS,
                   help="simc, amigo, imc, zn (step-response rule), zn-cycle (ultimate-cycle rule) or robust "
                        "(largest integral gain with Ms <= --ms); required unless --verify")
    p.add_argument("--pid", action="store_true", help="tune a PID instead of a PI")
    p.add_argument("--ms", type=finite_float, help=f"Ms bound for --method robust (default {DEFAULT_MS})")
    p.add_argument("--rate-hz", type=positive_float,
                   help="firmware loop rate, hertz (default: the profile's control.rate_hz)")
    p.add_argument("--tau-c", type=positive_float, metavar="SECONDS",
                   help="closed-loop time constant: tau_c for simc (default: the dead time), lambda for imc")
    p.add_argument("--ignore-sampling-delay", action="store_true",
                   help="apply the rules to the continuous model as given (no 1.5-sample allowance)")
    p.add_argument("--static-gain", type=finite_float, metavar="K",
                   help="with --ultimate: the process's static gain, to build an FOPDT with the same ultimate "
                        "point and verify on it")
    ver = p.add_argument_group("verify gains you already have (--verify)")
    ver.add_argument("--verify", action="store_true", help="verify --kp/--ki/--kd instead of tuning")
    ver.add_argument("--kp", type=finite_float, help="proportional gain (signed like the plant gain)")
    ver.add_argument("--ki", type=finite_float, metavar="KI_PER_S", help="integral gain, per second")
    ver.add_argument("--kd", type=finite_float, metavar="KD_S", default=None, help="derivative gain, second")
    op = p.add_argument_group("operating point (thermal profiles)")
    op.add_argument("--setpoint-temp-c", type=temperature_c, help="cold-plate setpoint, degree C (default: the "
                                                                  "profile's)")
    op.add_argument("--ambient-temp-c", type=temperature_c, help="ambient, degree C (default: the profile's)")
    op.add_argument("--current-a", type=finite_float,
                    help="linearise at this current instead of the setpoint's (to study other operating points)")
    op.add_argument("--ambient-range", nargs=2, type=temperature_c, metavar=("MIN_C", "MAX_C"),
                    help="tune for the worst case over this ambient range (field enclosures: -25 45): the robust "
                         "method holds its Ms bound at every ambient checked; every method is reported per ambient "
                         "with the dew point and hot-side temperature")
    op.add_argument("--relative-humidity-pct", type=_humidity_pct,
                    help="relative humidity of the ambient air for the dew point, percent (default: the profile's "
                         "ambient.relative_humidity_pct)")
    p.add_argument("--regulator-tau-s", type=positive_float,
                   help="bias regulator time constant, s (board profiles; default: the profile's "
                        "supply.regulator_time_constant_s)")
    em = p.add_argument_group("C emission (--emit-c)")
    em.add_argument("--emit-c", metavar="DIR", help="write the fixed-point PID as C99 header and source into DIR")
    em.add_argument("--name", help="C symbol prefix and file stem (default: cooler_pid, bias_pid or loop_pid)")
    em.add_argument("--input-per-count", type=finite_float,
                    help=f"measurement units per input count (cooler default {COOLER_INPUT_PER_COUNT_K} K; "
                         "board default one read-back ADC code, volt)")
    em.add_argument("--output-per-count", type=finite_float,
                    help=f"actuator units per output count (cooler default {COOLER_OUTPUT_PER_COUNT_A} A; "
                         "board default 1 DAC code)")
    em.add_argument("--out-min", type=finite_float, help="lowest actuator value (default: the strongest stable "
                                                         "heating current, or DAC code 0)")
    em.add_argument("--out-max", type=finite_float,
                    help="highest actuator value (default: the current of maximum cooling, or the full-scale code)")
    em.add_argument("--c-word-bits", type=bounded_int(0, 64), choices=(64, 32), default=64,
                    help="64 (default): 64-bit products (library calls on cores without a 64-bit multiply); "
                         "32: 32-bit operations only, when the Q formats allow it (else exit 2 with the figure "
                         "that does not fit); inputs then saturate at --c-input-limit-count")
    em.add_argument("--c-input-limit-count", type=bounded_int(1, 1 << 24), default=None, metavar="N",
                    help="inputs are saturated to +-N counts (default 2^24; 2^16 with --c-word-bits 32)")
    p.add_argument("--plot", metavar="DIR", help="write Bode, sensitivity and step figures (PNG) into DIR")
    p.add_argument("--force", action="store_true", help="replace existing plot and C files")
    add_json_flag(p)
    p.set_defaults(handler=run)


def _check_arguments(args, kind):
    from compensator.loops.choices import DEFAULT_MS

    if args.verify:
        if args.kp is None or args.ki is None:
            raise usage_error("--verify", "needs --kp and --ki (and --kd for a PID)")
        if args.kind_source == "ultimate" and args.static_gain is None:
            raise usage_error("--verify", "Ku and Pu alone give no model to verify on: add --static-gain")
    else:
        for flag in ("kp", "ki", "kd"):
            if getattr(args, flag) is not None:
                raise usage_error(_flag(flag), "applies with --verify only")
        if args.method is None:
            raise usage_error("--method", "required (or --verify with --kp and --ki)")
    if args.ms is not None and (args.verify or args.method != "robust"):
        raise usage_error("--ms", "applies to --method robust only")
    args.ms = DEFAULT_MS if args.ms is None else args.ms
    if args.tau_c is not None and (args.verify or args.method not in ("simc", "imc")):
        raise usage_error("--tau-c", "applies to --method simc or imc only")
    if args.static_gain is not None and kind != "ultimate":
        raise usage_error("--static-gain", "applies with --ultimate only")
    if kind != "thermal":
        for dest in _THERMAL_ONLY:
            if getattr(args, dest) is not None:
                raise usage_error(_flag(dest), "applies to a thermal profile only")
    if kind != "board" and args.regulator_tau_s is not None:
        raise usage_error("--regulator-tau-s", "applies to a board profile only")
    if args.setpoint_temp_c is not None and args.current_a is not None:
        raise usage_error("--current-a", "linearises at a current, so --setpoint-temp-c would be ignored: give one")
    if not args.emit_c:
        for dest in _EMIT_ONLY:
            if getattr(args, dest) is not None:
                raise usage_error(_flag(dest), "applies with --emit-c only")
    for dest in ("input_per_count", "output_per_count"):
        if getattr(args, dest) == 0:
            raise usage_error(_flag(dest), "must be nonzero")
    if args.ms is not None and not 1 < args.ms <= 10:
        raise usage_error("--ms", f"must exceed 1 and be at most 10 (1.4 is robust, 2 aggressive; a larger bound no "
                                  f"longer restrains the loop), got {args.ms:g}")


def _source_kind(args, profile):
    from compensator.profiles import BoardProfile, ThermalProfile

    if args.fopdt is not None:
        return "fopdt"
    if args.sopdt is not None:
        return "sopdt"
    if args.ultimate is not None:
        return "ultimate"
    if isinstance(profile, ThermalProfile):
        return "thermal"
    if isinstance(profile, BoardProfile):
        return "board"
    raise InputError(Problem(args.plant, 0, "kind", "tune needs a thermal or board profile, got a sipm profile"))


_OPTION_OF_KEY = {"setpoint_temp_c": "--setpoint-temp-c", "current_a": "--current-a", "ambient_temp_c":
                  "--ambient-temp-c", "ms_max": "--ms", "rate_hz": "--rate-hz", "pid": "--pid", "method": "--method",
                  "static_gain": "--static-gain", "ultimate_gain": "--ultimate", "ultimate_period_s": "--ultimate",
                  "ambient_range_c": "--ambient-range", "relative_humidity_pct": "--relative-humidity-pct",
                  "kp": "--kp", "ki_per_s": "--ki", "kd_s": "--kd"}


def _design(args, profile, kind):
    """Call the one library function for this loop; locate its errors at the option or profile key at fault."""
    from compensator.loops import design, plants
    from compensator.loops.verify import PidGains

    gains = PidGains(args.kp, args.ki, args.kd or 0.0) if args.verify else None
    common = dict(method=None if args.verify else args.method, gains=gains, rate_hz=args.rate_hz, pid=args.pid,
                  ms_max=args.ms, tau_c_s=args.tau_c, include_sampling_delay=not args.ignore_sampling_delay)
    try:
        if kind == "thermal":
            return design.design_cooler_loop(
                profile.cooler, setpoint_temp_c=args.setpoint_temp_c, ambient_temp_c=args.ambient_temp_c,
                current_a=args.current_a, ambient_range_c=args.ambient_range,
                relative_humidity_pct=args.relative_humidity_pct, **common)
        if kind == "board":
            return design.design_bias_loop(profile, regulator_time_constant_s=args.regulator_tau_s, **common)
        if args.rate_hz is None:
            raise usage_error("--rate-hz", f"required with --{kind}")
        if kind == "ultimate":
            common.pop("gains")
            if gains is not None:
                from compensator.loops.tuning import fopdt_from_ultimate

                model = fopdt_from_ultimate(args.static_gain, *args.ultimate)
                common.pop("rate_hz")
                return design.design_model_loop(model, rate_hz=args.rate_hz, gains=gains, kind="ultimate", **common)
            return design.design_ultimate_loop(*args.ultimate, static_gain=args.static_gain, **common)
        try:
            if kind == "fopdt":
                model = plants.FopdtModel(*args.fopdt)
            else:
                k, t1, t2, theta = args.sopdt
                model = plants.SopdtModel(k, max(t1, t2), min(t1, t2), theta)
            plants.model_plant(model)
        except ModelError as exc:
            raise exc.at("<command line>", key=f"--{kind}") from None
        common.pop("rate_hz")
        return design.design_model_loop(model, rate_hz=args.rate_hz, **common)
    except ModelError as exc:
        option = _OPTION_OF_KEY.get(exc.key)
        if option is not None and (option != "--setpoint-temp-c" or args.setpoint_temp_c is not None):
            raise exc.at("<command line>", key=option) from None
        if args.plant and kind in ("thermal", "board"):
            key = {"setpoint_temp_c": "control.setpoint_temp_c", "": ""}.get(exc.key, exc.key)
            raise exc.at(args.plant, key=key) from None
        raise exc.at("<command line>", key=f"--{kind}" if kind in ("fopdt", "sopdt", "ultimate") else "") from None


def _caution(result) -> str:
    if result.kind == "board":
        return ("caution: SiPM bias supplies deliver tens of volts; above 60 V dc a circuit counts as hazardous live "
                "(IEC 61010-1). Test the loop at low voltage first, keep the output limits in hardware, and follow "
                "local codes and licensed practice.")
    c = result.conditions
    if c is None:
        return ""
    return (f"caution: a thermoelectric cooler whose hot side is not on its heat sink heats without limit (thermal "
            f"runaway) and can burn people and parts: never power it unsinked, and cut the current above "
            f"{c.max_hot_temp_c:g} C on the hot side. Keep the cold plate above the dew point plus a margin (dew "
            f"point {c.dew_point_c:.1f} C at {c.point.ambient_temp_c:g} C and {c.relative_humidity_pct:g} % RH; "
            f"margin {c.dew_margin_k:g} K) or condensation will wet the electronics. Local codes and licensed "
            f"practice take precedence over these notes.")


def _emit_defaults(result, profile):
    if result.kind == "thermal":
        return dict(name="cooler_pid", input_per_count=COOLER_INPUT_PER_COUNT_K,
                    output_per_count=COOLER_OUTPUT_PER_COUNT_A, out_min=result.conditions.out_min_a,
                    out_max=result.conditions.out_max_a)
    if result.kind == "board":
        return dict(name="bias_pid", input_per_count=profile.bias_readback.lsb_v, output_per_count=1.0,
                    out_min=0.0, out_max=float(profile.supply.dac.full_scale_code))
    return dict(name="loop_pid")


def _emit_settings(args, result, profile):
    """The scales and limits for --emit-c, refused when they leave no output range."""
    emit = _emit_defaults(result, profile)
    pick = {k: (getattr(args, k) if getattr(args, k) is not None else emit.get(k))
            for k in ("input_per_count", "output_per_count", "out_min", "out_max")}
    for key, value in pick.items():
        if value is None:
            raise usage_error(_flag(key), f"required with --emit-c for a --{result.kind} model")
    lo, hi = sorted((pick["out_min"] / pick["output_per_count"], pick["out_max"] / pick["output_per_count"]))
    if math.floor(hi) - math.ceil(lo) < 1:
        raise usage_error("--output-per-count", (
            f"at {pick['output_per_count']:g} per count the output range {pick['out_min']:g}..{pick['out_max']:g} "
            f"spans fewer than two whole output counts: the PID could only output one value"))
    pick["name"] = args.name or emit["name"]
    return pick


def _targets(args, emit_name, stem):
    out = []
    if args.emit_c:
        out += [Path(args.emit_c) / f"{emit_name}.h", Path(args.emit_c) / f"{emit_name}.c",
                Path(args.emit_c) / f"{emit_name}.image.json"]
    if args.plot:
        out += [Path(args.plot) / f"{stem}-{k}.png" for k in ("bode", "sensitivity", "step")]
    return out


def run(args) -> int:
    profile = None
    if args.plant:
        from compensator.profiles import load_profile

        profile = load_profile(args.plant)
    kind = _source_kind(args, profile)
    args.kind_source = kind
    _check_arguments(args, kind)
    if args.emit_c:
        output_dir(args.emit_c, "C output")
    result = _design(args, profile, kind)
    method = "verify" if result.tuning is None else result.tuning.method
    stem = f"{(result.plant.name if result.plant else 'ultimate').replace(' ', '-')}-{method}{'-pid' if args.pid else ''}"
    emit = _emit_settings(args, result, profile) if args.emit_c else None
    if result.plant is None and args.plot:
        raise usage_error("--plot", "Ku and Pu alone give no model to plot: add --static-gain")
    if not args.force:
        for target in _targets(args, emit["name"] if emit else "", stem):
            if target.exists():
                raise InputError(Problem(str(target), 0, "", "already exists; not overwriting (use --force to "
                                                             "replace it)"))
    caution_text = _caution(result)
    if caution_text:
        caution(f"compensator: {caution_text}")  # printed when the command ends, never with a usage error
    files = []
    if emit:
        files += _emit(args, result, emit, profile)
    if args.plot:
        from compensator.loops.plots import plot_loop

        files += [str(f) for f in plot_loop(args.plot, stem, result.plant, result.gains, result.report,
                                            overwrite=args.force)]
    out = _summary(result, profile, files)
    for f in result.findings:
        print(f"compensator: {f.severity.value}: {f.message}", file=sys.stderr)
    if args.json:
        print_json(out)
    else:
        _print_human(out)
    if result.report is None:
        return EXIT_OK
    return EXIT_OK if result.ok else EXIT_FAILURE


def _emit(args, result, pick, profile):
    from compensator.fileio import write_files_atomic
    from compensator.firmware.pid import PidSettings, quantise_pid
    from compensator.firmware.pid_c import render_pid_c
    from compensator.link.images import pid_image

    g, T = result.gains, result.sample_time_s
    settings = PidSettings.from_gains(g, sample_time_s=T, out_min=pick["out_min"], out_max=pick["out_max"])
    try:
        coeffs = quantise_pid(settings, input_per_count=pick["input_per_count"],
                              output_per_count=pick["output_per_count"], word_bits=args.c_word_bits,
                              input_limit_count=args.c_input_limit_count)
    except ModelError as exc:
        key = exc.key.split("/")[0] if exc.key else ""
        flag = {"word_bits": "--c-word-bits", "input_limit_count": "--c-input-limit-count"}.get(key)
        raise exc.at("<command line>", key=flag or (_flag(key) if key else "--emit-c")) from None
    method = "verify" if result.tuning is None else result.tuning.method
    banner = {"method": method, "controller": "PID" if g.kd_s else "PI", "rate_hz": f"{1.0 / T:g}",
              "kp": f"{g.kp:.6g} {result.units.kp_unit}", "ki_per_s": f"{g.ki_per_s:.6g} {result.units.ki_unit}",
              "kd_s": f"{g.kd_s:.6g} {result.units.kd_unit}",
              "input_per_count": f"{pick['input_per_count']:.6g}",
              "output_per_count": f"{pick['output_per_count']:.6g}",
              "out_min": f"{pick['out_min']:.6g}", "out_max": f"{pick['out_max']:.6g}"}
    name = pick["name"]
    files = render_pid_c(coeffs, name=name, profiles=(profile,) if profile else (), settings=banner)
    files[f"{name}.image.json"] = pid_image(coeffs).decode("ascii")  # what `compensator board upload-pid` sends
    written = write_files_atomic(args.emit_c, files, overwrite=args.force, what="C output")
    return [str(p) for p in written]


def _summary(result, profile, files) -> dict:
    """The JSON record of a :class:`~compensator.loops.design.LoopDesign`."""
    from dataclasses import asdict

    g, r, t, u = result.gains, result.report, result.tuning, result.units
    plant = result.plant
    plant_info = {"kind": result.kind, "name": profile.name if profile else (plant.name if plant else "ultimate"),
                  "source": profile.source if profile else None}
    if plant is not None:
        plant_info.update({"input": plant.input_label, "output": plant.output_label, "dc_gain": plant.dc_gain,
                           "dead_time_s": plant.dead_time_s})
        if plant.operating_point is not None:
            plant_info["operating_point"] = asdict(plant.operating_point)
    if t is not None and t.model is not None:
        plant_info["process_model"] = _process_model(t.model)
    out = {
        "method": "verify" if t is None else t.method, "controller": "PID" if g.kd_s else "PI",
        "kp": g.kp, "ki_per_s": g.ki_per_s, "kd_s": g.kd_s,
        "kp_unit": u.kp_unit, "ki_unit": u.ki_unit, "kd_unit": u.kd_unit,
        "derivative_filter_n": g.derivative_filter_n, "setpoint_weight": g.setpoint_weight,
        "rate_hz": 1.0 / result.sample_time_s, "sample_time_s": result.sample_time_s,
        "rule_dead_time_s": t.rule_dead_time_s if t is not None and t.method not in ("robust", "zn-cycle") else None,
        "tau_c_s": t.closed_loop_time_constant_s if t is not None else None,
        "ultimate_gain": t.ultimate_gain if t is not None else None,
        "ultimate_period_s": t.ultimate_period_s if t is not None else None,
        "ms_target": t.ms_target if t is not None else None,
        "plant": plant_info, "ok": result.ok, "verified": r is not None,
        "findings": [{"code": f.code, "severity": f.severity.value, "message": f.message} for f in result.findings],
        "files": files,
    }
    if r is not None:
        m, s = r.margins, r.step
        out.update({
            "margins": {"gain_margin": m.gain_margin, "phase_margin_deg": m.phase_margin_deg, "ms": m.ms,
                        "crossover_rad_s": m.crossover_rad_s, "phase_crossover_rad_s": m.phase_crossover_rad_s,
                        "delay_margin_s": m.delay_margin_s},
            "step": {"rise_time_s": s.rise_time_s, "settling_time_s": s.settling_time_s,
                     "overshoot_pct": s.overshoot_pct, "peak_time_s": s.peak_time_s,
                     "peak_actuator_per_setpoint_unit": s.peak_actuator_per_setpoint_unit, "load_iae": s.load_iae},
            "stable": r.stable, "analysis_period_s": r.analysis_period_s,
        })
    if result.conditions is not None:
        c = result.conditions
        out["conditions"] = {"relative_humidity_pct": c.relative_humidity_pct, "dew_point_c": c.dew_point_c,
                             "hot_temp_c": c.point.hot_temp_c, "out_min_a": c.out_min_a, "out_max_a": c.out_max_a}
    if result.ambient is not None:
        out["ambient_check"] = [asdict(c) for c in result.ambient.checks]
        out["worst_ms"] = result.ambient.worst_ms
    return out


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
    what = f"{p['name']} ({p['input']} -> {p['output']})" if "input" in p else p["name"]
    print(f"{out['controller']} by {out['method']} for {what}, {out['rate_hz']:g} Hz")
    rows = [("kp", _fmt(out["kp"]), out["kp_unit"]), ("ki_per_s", _fmt(out["ki_per_s"]), out["ki_unit"]),
            ("kd_s", _fmt(out["kd_s"]), out["kd_unit"])]
    print(format_table(rows, ["gain", "value", "unit"]))
    if out["ultimate_gain"] is not None:
        print(f"from Ku {out['ultimate_gain']:.4g}, Pu {out['ultimate_period_s']:.4g} s")
    if not out["verified"]:
        print("not verified: Ku and Pu alone give no model (add --static-gain K)")
    else:
        m, s = out["margins"], out["step"]
        print(f"margins: gain {_fmt(m['gain_margin'], '.3g')}, phase {_fmt(m['phase_margin_deg'], '.1f')} deg, "
              f"Ms {_fmt(m['ms'], '.3f')}, crossover {_fmt(m['crossover_rad_s'], '.3g')} rad/s")
        if out["stable"]:
            print(f"setpoint step: rise {_fmt(s['rise_time_s'], '.3g')} s, settling "
                  f"{_fmt(s['settling_time_s'], '.3g')} s, overshoot {_fmt(s['overshoot_pct'], '.1f')} %, peak "
                  f"actuator {_fmt(s['peak_actuator_per_setpoint_unit'])} {out['kp_unit']} per unit step")
        else:
            print("closed loop UNSTABLE: do not use these gains")
    if out.get("ambient_check"):
        rows = [(f"{c['ambient_temp_c']:g}", "yes" if c["reachable"] else "no", _fmt(c["current_a"], ".3f"),
                 _fmt(c["hot_temp_c"], ".1f"), _fmt(c["dew_point_c"], ".1f"), "YES" if c["condensation"] else "no",
                 _fmt(c["ms"], ".3f"), _fmt(c["gain_margin"], ".3g"), _fmt(c["phase_margin_deg"], ".1f"),
                 "yes" if c["stable"] else "NO") for c in out["ambient_check"]]
        print(format_table(rows, ["ambient C", "reachable", "current A", "hot side C", "dew point C", "condensation",
                                  "Ms", "GM", "PM deg", "stable"]))
        print(f"worst Ms over the range: {_fmt(out['worst_ms'], '.3f')}")
    for f in out["files"]:
        print(f"wrote {f}")
