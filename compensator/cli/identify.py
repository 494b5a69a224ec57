"""``compensator identify``: FOPDT/SOPDT from a step test, or ultimate gain and period from a relay experiment."""

from __future__ import annotations

import sys
from dataclasses import asdict
from pathlib import Path

from compensator.cli._common import EXIT_OK, add_json_flag, format_table, non_negative_float, print_json, usage_error

__all__ = ["ORDER", "COMMAND", "HELP", "register", "run"]

ORDER = 55
COMMAND = "identify"
HELP = "fit FOPDT/SOPDT to a step test, or read Ku and Pu from a relay experiment"


def register(subparsers) -> None:
    p = subparsers.add_parser(
        COMMAND,
        help=HELP,
        description=(
            "Read a CSV with columns time_s,input,output ('#' lines are comments). For a step test (fopdt, "
            "sopdt) the two-point method of Smith (1972) gives the start and least squares over the whole record "
            "finishes, with standard errors. For a relay-feedback experiment (relay) the describing function "
            "gives the ultimate gain Ku = 4 d / (pi a) and the period Pu (Astrom and Hagglund 1984)."),
    )
    p.add_argument("file", metavar="FILE", help="CSV with time_s,input,output")
    p.add_argument("--model", choices=("fopdt", "sopdt", "relay"), default="fopdt",
                   help="what to identify (default fopdt)")
    p.add_argument("--hysteresis", type=non_negative_float, default=0.0,
                   help="relay hysteresis in output units (relay only; default 0)")
    p.add_argument("--plot", metavar="DIR", help="write a figure of the data and the fit (PNG) into DIR")
    p.add_argument("--force", action="store_true", help="replace an existing figure")
    add_json_flag(p)
    p.set_defaults(handler=run)


def run(args) -> int:
    from compensator.errors import ModelError
    from compensator.loops import identify
    from compensator.loops.measurements import read_loop_csv

    if args.hysteresis and args.model != "relay":
        raise usage_error("--hysteresis", "applies to --model relay only")
    record = read_loop_csv(args.file)
    stem = Path(args.file).stem
    try:
        if args.model == "relay":
            result = identify.relay_experiment(record, args.hysteresis)
        else:
            result = identify.fit_step(record, args.model)
    except ModelError as exc:
        raise exc.at(args.file) from None
    files = []
    if args.model == "relay":
        out = {"model": "relay", "file": args.file, **asdict(result)}
        out["signed_ultimate_gain"] = result.signed_ultimate_gain
        out["warnings"] = list(result.warnings)
        out["tune_args"] = ["--ultimate", f"{result.signed_ultimate_gain:.6g}", f"{result.ultimate_period_s:.6g}"]
        if args.plot:
            from compensator.loops.plots import plot_relay

            files = [str(f) for f in plot_relay(args.plot, stem, record, result, overwrite=args.force)]
    else:
        model = result.model
        out = {"model": args.model, "file": args.file, **_named(asdict(model)),
               "standard_errors": _named(result.standard_errors), "smith_start": _named(asdict(result.start)),
               "baseline": result.baseline, "step_time_s": result.step_time_s, "input_step": result.input_step,
               "residual_rms": result.residual_rms, "r_squared": result.r_squared,
               "standard_error_scale": result.standard_error_scale,
               "warnings": list(result.warnings)}
        if args.model == "fopdt":
            out["tune_args"] = ["--fopdt", f"{model.gain:.6g}", f"{model.time_constant_s:.6g}",
                                f"{model.dead_time_s:.6g}"]
        else:
            out["tune_args"] = ["--sopdt", f"{model.gain:.6g}", f"{model.time_constant_s:.6g}",
                                f"{model.time_constant2_s:.6g}", f"{model.dead_time_s:.6g}"]
        if args.plot:
            from compensator.loops.plots import plot_step_fit

            fitted = identify.model_response(model, record, result.baseline)
            title = (f"{args.model.upper()} fit: K = {model.gain:.4g}, tau = {model.time_constant_s:.4g} s, "
                     f"theta = {model.dead_time_s:.4g} s, R^2 = {result.r_squared:.4f}")
            files = [str(f) for f in plot_step_fit(args.plot, stem, record, fitted, title, overwrite=args.force)]
    out["files"] = files
    for w in out["warnings"]:
        print(f"compensator: warning: {w}", file=sys.stderr)
    if args.json:
        print_json(out)
    else:
        _print_human(out)
    return EXIT_OK


def _named(params: dict) -> dict:
    """Model parameters under their output names (``gain`` is the ``process_gain``)."""
    return {("process_gain" if k == "gain" else k): v for k, v in params.items()}


def _print_human(out):
    if out["model"] == "relay":
        rows = [("ultimate gain Ku", out["signed_ultimate_gain"], "input per output unit"),
                ("ultimate period Pu", out["ultimate_period_s"], "s"),
                ("relay amplitude d", out["relay_amplitude"], "input units"),
                ("oscillation amplitude a", out["oscillation_amplitude"], "output units")]
        print(format_table(rows, ["quantity", "value", "unit"], ["", ".5g", ""]))
        print(f"{out['cycles']} cycles; period spread {out['period_std_s']:.3g} s; Ku from the output's fundamental "
              f"{out['fundamental_ultimate_gain']:.5g}: the describing function's sine assumption moves Ku by "
              f"{out['describing_function_error_pct']:.2g} % here (sign from the data: "
              f"{'reverse' if out['process_sign'] < 0 else 'direct'} acting)")
        print("next: compensator tune " + " ".join(out["tune_args"]) + " --method zn-cycle --rate-hz R "
              "(or --method robust; add --static-gain K to verify on a model)")
    else:
        se = out["standard_errors"]
        keys = [k for k in ("process_gain", "time_constant_s", "time_constant2_s", "dead_time_s") if k in out]
        rows = [(k, out[k], se.get(k, float("nan")), out["smith_start"].get(k, float("nan"))) for k in keys]
        print(format_table(rows, ["parameter", "fit", "std error", "Smith start"], ["", ".5g", ".2g", ".5g"]))
        print(f"R^2 {out['r_squared']:.5f}, residual rms {out['residual_rms']:.3g}; standard errors scaled by "
              f"{out['standard_error_scale']:.3g} for correlated residuals (lack of fit)")
        print("next: compensator tune " + " ".join(out["tune_args"]) + " --method simc --rate-hz R")
    for f in out["files"]:
        print(f"wrote {f}")
