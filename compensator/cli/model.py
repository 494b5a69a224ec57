"""``compensator model``: the SiPM model over temperature, at fixed bias or fixed overvoltage."""

from __future__ import annotations

import sys

import numpy as np

from compensator.cli._common import add_json_flag, finite_float, format_table, non_negative_float, print_json, temperature_c
from compensator.physics.sipm import evaluate
from compensator.profiles import load_sipm

ORDER = 20


def register(subparsers) -> None:
    parser = subparsers.add_parser("model", help="evaluate the SiPM model over temperature")
    parser.add_argument("--sipm", required=True, metavar="FILE", help="sipm profile")
    parser.add_argument("--temp-c", required=True, nargs="+", type=temperature_c, metavar="T",
                        help="temperatures, degree Celsius")
    group = parser.add_mutually_exclusive_group(required=True)
    group.add_argument("--bias-v", type=finite_float, metavar="V", help="fixed bias across the SiPM, volt")
    group.add_argument("--overvoltage-v", type=finite_float, metavar="V", help="fixed overvoltage, volt (bias follows breakdown)")
    parser.add_argument("--photon-rate-hz", type=non_negative_float, default=0.0, metavar="R",
                        help="steady photon rate on the sensor for the current, hertz (default 0)")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def run(args) -> int:
    profile = load_sipm(args.sipm)
    device = profile.device
    state = evaluate(device, np.asarray(args.temp_c), bias_v=args.bias_v, overvoltage_v=args.overvoltage_v,
                     photon_rate_hz=args.photon_rate_hz)
    warnings = []
    if np.any(state.overvoltage_v > device.max_overvoltage_v):
        warnings.append(f"overvoltage above the profile's max_overvoltage_v {device.max_overvoltage_v:g} V")
    if np.any(state.current_a > device.max_current_a):
        warnings.append(f"current above the profile's max_current_a {device.max_current_a:g} A")
    if np.any(state.overvoltage_v <= 0):
        warnings.append("bias at or below breakdown at some temperatures: gain is zero there")
    if args.json:
        print_json({"sipm": profile.name, "file": args.sipm, "mode": "bias" if args.bias_v is not None else "overvoltage",
                    "points": [
                        {"temp_c": t, "bias_v": b, "breakdown_v": vbd, "overvoltage_v": ov, "gain": g, "pde_fraction": p,
                         "dark_rate_hz": d, "crosstalk_fraction": x, "current_a": i, "gain_change_pct_per_k": c}
                        for t, b, vbd, ov, g, p, d, x, i, c in zip(
                            *(np.atleast_1d(a).tolist() for a in (
                                state.temp_c, state.bias_v, state.breakdown_v, state.overvoltage_v, state.gain,
                                state.pde_fraction, state.dark_rate_hz, state.crosstalk_probability, state.current_a,
                                state.gain_change_pct_per_k)))],
                    "warnings": warnings})
    else:
        print(f"{profile.name}: {profile.description}".rstrip(": "))
        rows = zip(state.temp_c, state.bias_v, state.breakdown_v, state.overvoltage_v, state.gain,
                   100 * state.pde_fraction, state.dark_rate_hz / 1e3, 100 * state.crosstalk_probability,
                   state.current_a * 1e6, state.gain_change_pct_per_k)
        print(format_table(
            list(rows),
            ["temp_c", "bias_v", "breakdown_v", "overvoltage_v", "gain", "pde_%", "dark_khz", "crosstalk_%",
             "current_ua", "dgain_%_per_k"],
            [".1f", ".3f", ".3f", ".3f", ".4g", ".1f", ".1f", ".2f", ".3f", "+.3f"],
        ))
    for warning in warnings:
        print(f"warning: {warning}", file=sys.stderr)
    return 0
