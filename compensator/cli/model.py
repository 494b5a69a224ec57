"""``compensator model``: the SiPM model over temperature, at fixed bias or fixed overvoltage."""

from __future__ import annotations

import sys
from dataclasses import dataclass

import numpy as np

from compensator.cli._common import (
    EXIT_OK,
    add_json_flag,
    finite_float,
    format_table,
    non_negative_float,
    print_json,
    temperature_c,
)
from compensator.findings import Finding
from compensator.profiles import load_sipm

__all__ = ["register", "run", "ModelPoint"]

ORDER = 20


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "model", help="evaluate the SiPM model over temperature",
        description="Breakdown voltage, gain, PDE, dark count rate, crosstalk, current and the gain's temperature "
                    "coefficient at fixed bias, for a list of temperatures, at a fixed bias or at a fixed "
                    "overvoltage (the bias then follows the breakdown voltage).")
    parser.add_argument("--sipm", required=True, metavar="FILE", help="sipm profile")
    parser.add_argument("--temp-c", required=True, nargs="+", type=temperature_c, metavar="T",
                        help="temperatures, degree Celsius")
    group = parser.add_mutually_exclusive_group(required=True)
    group.add_argument("--bias-v", type=finite_float, metavar="V", help="fixed bias across the SiPM, volt")
    group.add_argument("--overvoltage-v", type=finite_float, metavar="V",
                       help="fixed overvoltage, volt (bias follows breakdown)")
    parser.add_argument("--photon-rate-hz", type=non_negative_float, default=0.0, metavar="R",
                        help="steady photon rate on the sensor for the current, hertz (default 0)")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


@dataclass(frozen=True, kw_only=True)
class ModelPoint:
    """The SiPM at one temperature (the fields of ``compensator model --json``)."""

    temp_c: float
    bias_v: float
    breakdown_v: float
    overvoltage_v: float
    gain: float
    pde_fraction: float
    dark_rate_hz: float
    crosstalk_fraction: float
    current_a: float
    fixed_bias_gain_change_pct_per_k: float


def run(args) -> int:
    from compensator.instrument import sipm_operating_findings
    from compensator.physics.sipm import evaluate

    profile = load_sipm(args.sipm)
    state = evaluate(profile.device, np.asarray(args.temp_c), bias_v=args.bias_v, overvoltage_v=args.overvoltage_v,
                     photon_rate_hz=args.photon_rate_hz)
    findings: tuple[Finding, ...] = sipm_operating_findings(profile.device, state)
    columns = [np.atleast_1d(a).tolist() for a in (
        state.temp_c, state.bias_v, state.breakdown_v, state.overvoltage_v, state.gain, state.pde_fraction,
        state.dark_rate_hz, state.crosstalk_probability, state.current_a, state.gain_change_pct_per_k)]
    points = [ModelPoint(temp_c=t, bias_v=b, breakdown_v=vbd, overvoltage_v=ov, gain=g, pde_fraction=p,
                         dark_rate_hz=d, crosstalk_fraction=x, current_a=i, fixed_bias_gain_change_pct_per_k=c)
              for t, b, vbd, ov, g, p, d, x, i, c in zip(*columns)]
    mode = "bias" if args.bias_v is not None else "overvoltage"
    if args.json:
        print_json({"sipm": profile.name, "file": args.sipm, "mode": mode, "points": points,
                    "findings": findings, "warnings": [f.message for f in findings]})
    else:
        print(f"{profile.name}: {profile.description}".rstrip(": "))
        held = "bias held fixed" if mode == "bias" else "overvoltage held fixed (the bias follows the breakdown)"
        print(f"{held}; dgain_fixed_bias: the gain's change per kelvin if the bias stayed where it is")
        print(format_table(
            [(p.temp_c, p.bias_v, p.breakdown_v, p.overvoltage_v, p.gain, 100 * p.pde_fraction, p.dark_rate_hz / 1e3,
              100 * p.crosstalk_fraction, p.current_a * 1e6, p.fixed_bias_gain_change_pct_per_k) for p in points],
            ["temp_c", "bias_v", "breakdown_v", "overvoltage_v", "gain", "pde_%", "dark_khz", "crosstalk_%",
             "current_ua", "dgain_fixed_bias_%_per_k"],
            [".1f", ".3f", ".3f", ".3f", ".4g", ".1f", ".1f", ".2f", ".3f", "+.3f"]))
    for finding in findings:
        print(f"compensator: warning: {finding.message}", file=sys.stderr)
    return EXIT_OK
