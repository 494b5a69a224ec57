"""``compensator table``: the law as an integer lookup table in C99, with its sweep."""

from __future__ import annotations

from compensator.cli._common import add_json_flag, add_law_arguments, caution, law_from_args, print_json
from compensator.fileio import write_files_atomic
from compensator.firmware.table_c import (
    DEFAULT_FUNCTION_NAME,
    c_current_function_signature,
    c_function_signature,
    check_function_name,
    render_sweep_csv,
    render_table_c,
)
from compensator.firmware.tables import (
    DEFAULT_FAULT_MARGIN_K,
    LAYOUTS,
    adc_quantisation_gain_pct,
    build_table,
    sweep_table,
)

ORDER = 45

CAUTION = (
    "caution: the generated table sets a SiPM bias of tens of volts; above 60 V dc is hazardous live "
    "(IEC 61010-1). Check the output limits on the bench before fitting a sensor, and follow local codes "
    "and licensed practice."
)


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "table", help="integer lookup table ADC code -> DAC code as C99 source, within a gain-error bound",
        description="Tabulate the compensation law from the raw temperature ADC code to the bias DAC code, "
                    "choose the smallest table that meets --max-gain-error-pct at every ADC code of the "
                    "operating range, and write NAME.h, NAME.c and sweep.csv to --out. With --drop-correction "
                    "measured the table holds the law for zero current and NAME_with_current() also adds the "
                    "series-resistor drop of the SiPM current read by the board's current_sense ADC.")
    add_law_arguments(parser)
    parser.add_argument("--max-gain-error-pct", required=True, type=float, metavar="P",
                        help="bound on the table's gain error at every ADC code of the range, percent")
    parser.add_argument("--out", required=True, metavar="DIR", help="output directory (created if missing)")
    parser.add_argument("--layout", choices=LAYOUTS, default="optimised",
                        help="uniform: power-of-two spacing indexed by shift; optimised: breakpoints placed to "
                             "equalise error, binary search, stored slopes (default)")
    parser.add_argument("--fault-margin-k", type=float, default=DEFAULT_FAULT_MARGIN_K, metavar="K",
                        help="readings this far outside the operating range are sensor faults and get the "
                             f"board's safe_dac_code, kelvin (default {DEFAULT_FAULT_MARGIN_K:g})")
    parser.add_argument("--name", default=DEFAULT_FUNCTION_NAME, metavar="NAME",
                        help=f"C function name and file stem (default {DEFAULT_FUNCTION_NAME})")
    parser.add_argument("--force", action="store_true", help="replace existing output files")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def run(args) -> int:
    caution(CAUTION)  # printed when the command ends, never with a usage error
    name = check_function_name(args.name)
    sipm, board, law = law_from_args(args)
    table = build_table(law, board, args.max_gain_error_pct, args.layout, args.fault_margin_k)
    baseline = table if args.layout == "uniform" else build_table(law, board, args.max_gain_error_pct, "uniform",
                                                                  args.fault_margin_k)
    sweep = sweep_table(table, law, board)
    if not sweep.within_bound:  # build_table verifies every code; this would be a bug
        raise RuntimeError(f"table misses its bound at ADC code {sweep.worst_adc_code}")
    settings = {"law": law.kind, "overvoltage_v": f"{law.overvoltage_v:g}", "layout": table.layout,
                "max_gain_error_pct": f"{args.max_gain_error_pct:g}", "fault_margin_k": f"{args.fault_margin_k:g}",
                "drop_correction": law.drop_correction,
                "photon_rate_hz": f"{law.photon_rate_hz:g}"}
    files = render_table_c(table, [sipm, board], name, settings)
    files["sweep.csv"] = render_sweep_csv(sweep)

    paths = write_files_atomic(args.out, files, overwrite=args.force, what="table output")

    adc_q = float(adc_quantisation_gain_pct(law, board.temperature, sweep.temp_c).max())
    result = {
        "sipm": sipm.name, "board": board.name, "law": law.kind, "overvoltage_v": law.overvoltage_v,
        "layout": table.layout, "bound_pct": args.max_gain_error_pct,
        "entries": table.entries, "table_bytes": table.table_bytes,
        "uniform_entries": baseline.entries, "uniform_table_bytes": baseline.table_bytes,
        "max_gain_error_pct": sweep.max_gain_error_pct, "max_error_dac_lsb": sweep.max_error_dac_lsb,
        "worst_adc_code": sweep.worst_adc_code, "adc_quantisation_gain_error_pct": adc_q,
        "adc_code_range": [table.code_lo, table.code_hi], "adc_fault_band": [table.fault_lo, table.fault_hi],
        "safe_dac_code": table.safe_dac_code, "dac_clamp": [table.dac_min, table.dac_max],
        "c_function": c_function_signature(table, name),
        "drop_correction": law.drop_correction,
        "current_correction": None,
        "files": [str(p) for p in paths],
    }
    cur = table.current
    if cur is not None:
        result["current_correction"] = {
            "c_function": c_current_function_signature(table, name),
            "dac_codes_per_current_code": cur.dac_codes_per_current_code, "factor": cur.factor, "shift": cur.shift,
            "current_code_max": cur.current_code_max, "limited_by": cur.limit_reason,
            "current_lsb_a": cur.lsb_a, "max_correction_v": cur.max_correction_v,
        }
    if args.json:
        print_json(result)
        return 0
    print(f"{sipm.name} on {board.name}: {law.kind.replace('_', ' ')} law at {law.overvoltage_v:g} V, "
          f"{table.layout} layout")
    print(f"table: {table.entries} entries, {table.table_bytes} bytes "
          f"(smallest uniform power-of-two table: {baseline.entries} entries, {baseline.table_bytes} bytes)")
    print(f"gain error at every ADC code {table.code_lo}..{table.code_hi}: at most {sweep.max_gain_error_pct:.4f} % "
          f"(bound {args.max_gain_error_pct:g} %), {sweep.max_error_dac_lsb:.2f} DAC LSB; half an ADC code adds "
          f"up to {adc_q:.4f} %")
    print(f"codes outside {table.fault_lo}..{table.fault_hi} give the safe DAC code {table.safe_dac_code}")
    print(f"function: {c_function_signature(table, name)}")
    if cur is not None:
        print(f"measured drop correction: {c_current_function_signature(table, name)} adds "
              f"{cur.dac_codes_per_current_code:.6g} DAC codes per current code ({1e9 * cur.lsb_a:.4g} nA), "
              f"as {cur.factor} / 2^{cur.shift}; current codes above {cur.current_code_max} ({cur.limit_reason}) "
              f"are limited, so it adds at most {cur.max_correction_v:.3f} V: a wrong current reading cannot take "
              f"the SiPM past its max_overvoltage_v")
    for p in paths:
        print(f"wrote {p}")
    return 0
