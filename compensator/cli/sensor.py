"""``compensator sensor``: what the board's temperature channel reads."""

from __future__ import annotations

import numpy as np

from compensator.cli._common import add_json_flag, format_table, print_json, temperature_c
from compensator.errors import InputError
from compensator.profiles import load_board

ORDER = 25


def register(subparsers) -> None:
    parser = subparsers.add_parser("sensor", help="convert between temperature and the board's ADC code")
    parser.add_argument("--board", required=True, metavar="FILE", help="board profile")
    group = parser.add_mutually_exclusive_group(required=True)
    group.add_argument("--adc-code", nargs="+", type=int, metavar="N", help="raw temperature ADC codes")
    group.add_argument("--temp-c", nargs="+", type=temperature_c, metavar="T", help="temperatures, degree Celsius")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def run(args) -> int:
    board = load_board(args.board)
    channel = board.temperature
    fe = channel.front_end
    if args.adc_code is not None:
        codes = np.asarray(args.adc_code, dtype=np.int64)
        bad = codes[(codes < 0) | (codes > fe.full_scale_code)]
        if bad.size:
            raise InputError(f"--adc-code: {int(bad[0])} is outside the {fe.adc_bits}-bit ADC range 0..{fe.full_scale_code}")
        temps = channel.temp_c(codes)
    else:
        temps = np.asarray(args.temp_c, dtype=float)
        try:
            codes = channel.adc_code(temps)
        except ValueError as exc:
            raise InputError(f"--temp-c: {exc}") from None
    read_c = channel.temp_c(codes)
    resistance = fe.resistance_ohm(codes)
    valid = np.isfinite(temps) & (codes > 0) & (codes < fe.full_scale_code)
    in_range = valid & (temps >= board.min_temp_c) & (temps <= board.max_temp_c)
    with np.errstate(invalid="ignore"):
        safe_t = np.where(valid, temps, 25.0)
        per_code = np.where(valid, channel.temp_per_code_k(safe_t), np.nan)
        tol = np.where(valid, channel.sensor.tolerance_k(safe_t), np.nan)
    status = np.where(~valid, "invalid (open/short or rail)", np.where(in_range, "ok", "outside operating range"))
    if args.json:
        print_json({"board": board.name, "file": args.board, "points": [
            {"adc_code": int(c), "resistance_ohm": float(r), "temp_c": float(t), "read_temp_c": float(rt),
             "k_per_code": float(k), "sensor_tolerance_k": float(s), "status": str(st)}
            for c, r, t, rt, k, s, st in zip(codes, resistance, temps, read_c, per_code, tol, status)]})
        return 0
    print(f"{board.name}: {type(channel.sensor).__name__}, {fe.adc_bits}-bit ADC "
          f"({'ratiometric' if fe.ratiometric else 'absolute reference'})")
    print(format_table(list(zip(codes.tolist(), resistance, temps, read_c, per_code * 1e3, tol, status)),
                       ["adc_code", "resistance_ohm", "temp_c", "read_temp_c", "mk_per_code", "tolerance_k", "status"],
                       ["d", ".2f", ".3f", ".3f", ".2f", ".3f", ""]))
    return 0
