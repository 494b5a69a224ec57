"""``compensator sensor``: what the board's temperature channel reads."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from compensator.cli._common import EXIT_OK, add_json_flag, code, format_table, print_json, temperature_c, usage_error
from compensator.errors import ModelError
from compensator.profiles import load_board

__all__ = ["register", "run", "SensorPoint"]

ORDER = 25


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "sensor", help="convert between temperature and the board's ADC code",
        description="Temperature -> ADC code, or ADC code -> temperature, through the board's sensor "
                    "(platinum RTD by IEC 60751, NTC by the Beta model or Steinhart-Hart), divider and ADC, "
                    "with the resistance, the kelvin per code and the sensor's tolerance.")
    parser.add_argument("--board", required=True, metavar="FILE", help="board profile")
    group = parser.add_mutually_exclusive_group(required=True)
    group.add_argument("--adc-code", nargs="+", type=code, metavar="N", help="raw temperature ADC codes")
    group.add_argument("--temp-c", nargs="+", type=temperature_c, metavar="T", help="temperatures, degree Celsius")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


@dataclass(frozen=True, kw_only=True)
class SensorPoint:
    """One reading of the temperature channel (the fields of ``compensator sensor --json``)."""

    adc_code: int
    resistance_ohm: float
    temp_c: float
    read_temp_c: float
    k_per_code: float
    sensor_tolerance_k: float
    status: str


def run(args) -> int:
    from compensator.instrument import describe_temperature_channel

    board = load_board(args.board)
    channel = board.temperature
    fe = channel.front_end
    if args.adc_code is not None:
        codes = np.asarray(args.adc_code, dtype=np.int64)
        bad = codes[codes > fe.full_scale_code]
        if bad.size:
            raise usage_error("--adc-code", f"{int(bad[0])} is outside the {fe.adc_bits}-bit ADC range "
                                            f"0..{fe.full_scale_code}")
        temps = channel.temp_c(codes)
    else:
        temps = np.asarray(args.temp_c, dtype=float)
        try:
            codes = channel.adc_code(temps)
        except ModelError as exc:
            raise usage_error("--temp-c", exc.reason) from None
        except ValueError as exc:
            raise usage_error("--temp-c", str(exc)) from None
    read_c = channel.temp_c(codes)
    resistance = fe.resistance_ohm(codes)
    valid = np.isfinite(temps) & (codes > 0) & (codes < fe.full_scale_code)
    in_range = valid & (temps >= board.min_temp_c) & (temps <= board.max_temp_c)
    with np.errstate(invalid="ignore"):
        safe_t = np.where(valid, temps, 25.0)
        per_code = np.where(valid, channel.temp_per_code_k(safe_t), np.nan)
        tol = np.where(valid, channel.sensor.tolerance_k(safe_t), np.nan)
    status = np.where(~valid, "invalid (open/short or rail)", np.where(in_range, "ok", "outside operating range"))
    points = [SensorPoint(adc_code=int(c), resistance_ohm=float(r), temp_c=float(t), read_temp_c=float(rt),
                          k_per_code=float(k), sensor_tolerance_k=float(s), status=str(st))
              for c, r, t, rt, k, s, st in zip(codes, resistance, temps, read_c, per_code, tol, status)]
    if args.json:
        print_json({"board": board.name, "file": args.board, "points": points})
        return EXIT_OK
    print(f"{board.name}: {describe_temperature_channel(channel)}")
    print(format_table([(p.adc_code, p.resistance_ohm, p.temp_c, p.read_temp_c, 1e3 * p.k_per_code,
                         p.sensor_tolerance_k, p.status) for p in points],
                       ["adc_code", "resistance_ohm", "temp_c", "read_temp_c", "mk_per_code", "tolerance_k", "status"],
                       ["d", ".2f", ".3f", ".3f", ".2f", ".3f", ""]))
    return EXIT_OK
