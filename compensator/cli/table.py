"""``compensator table``: the law as an integer lookup table in C99, with its sweep."""

from __future__ import annotations

import sys
from pathlib import Path

from compensator.cli._common import (
    add_json_flag,
    add_law_arguments,
    caution,
    format_table,
    law_from_args,
    non_negative_float,
    positive_float,
    print_json,
    usage_error,
)
from compensator.errors import InputError, Problem
from compensator.fileio import write_files_atomic
from compensator.findings import Severity
from compensator.firmware.layouts import LAYOUT_CHOICES
from compensator.firmware.table_c import (
    DEFAULT_FUNCTION_NAME,
    SWEEP_MODES,
    c_current_function_signature,
    c_function_signature,
    check_function_name,
    check_prefix,
    default_sweep_mode,
)
from compensator.firmware.table_files import SWEEP_FILE, prepare_table_files
from compensator.firmware.tables import DEFAULT_FAULT_MARGIN_K

__all__ = ["CAUTION", "ORDER", "register", "run"]

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
                    "build each layout (uniform, segmented, optimised, polynomial), check each at every ADC code "
                    "of the operating range, keep the smallest that meets --max-gain-error-pct, and write "
                    "NAME.h, NAME.c and sweep.csv to --out (all of them or none). With --drop-correction "
                    "measured the table holds the law for zero current and NAME_with_current() also adds the "
                    "series-resistor drop of the SiPM current read by the board's current_sense ADC. "
                    "JSON fields: layouts (every layout tried with table_bytes, entries and its largest "
                    "absolute gain error over every ADC code of the range), max_gain_error_pct (the chosen "
                    "table's largest absolute gain error over every ADC code of the range), safe_state (what "
                    "the sensor-fault DAC code does to the SiPM) and findings.")
    add_law_arguments(parser)
    parser.add_argument("--max-gain-error-pct", required=True, type=positive_float, metavar="P",
                        help="bound on the table's gain error at every ADC code of the range, percent")
    parser.add_argument("--out", required=True, metavar="DIR", help="output directory (created if missing)")
    parser.add_argument("--layout", choices=LAYOUT_CHOICES, default="smallest",
                        help="smallest (default): build every layout and keep the one with the fewest bytes; "
                             "uniform: power-of-two spacing indexed by shift; segmented: power-of-two segment "
                             "widths, values only; optimised: breakpoints placed to equalise error, binary "
                             "search, stored slopes; polynomial: integer Horner's rule (64-bit products)")
    parser.add_argument("--fault-margin-k", type=non_negative_float, default=DEFAULT_FAULT_MARGIN_K, metavar="K",
                        help="readings this far outside the operating range are sensor faults and get the "
                             f"safe DAC code, kelvin (default {DEFAULT_FAULT_MARGIN_K:g})")
    parser.add_argument("--name", default=DEFAULT_FUNCTION_NAME, metavar="NAME",
                        help=f"C function name and file stem (default {DEFAULT_FUNCTION_NAME}); not a C keyword "
                             "or a C standard-library name")
    parser.add_argument("--prefix", default="", metavar="PREFIX",
                        help="namespace prefix of every generated C symbol and of the file stem, e.g. hut_")
    parser.add_argument("--sweep", choices=SWEEP_MODES, default=None,
                        help="what sweep.csv holds: full (one row per ADC code; default up to 16-bit ADCs), "
                             "summary (blocks of codes with their largest error; default above) or none; every "
                             "code is checked whatever is written")
    parser.add_argument("--force", action="store_true", help="replace existing output files")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def _check_arguments(args) -> None:
    for flag, check, value in (("--name", check_function_name, args.name), ("--prefix", check_prefix, args.prefix)):
        try:
            check(value)
        except Exception as exc:  # ModelError: say which option
            raise usage_error(flag, getattr(exc, "reason", str(exc))) from None
    drop = args.drop_correction or ("none" if args.no_drop_correction else "modelled")
    if args.photon_rate_hz != 0.0 and drop != "modelled":
        raise usage_error("--photon-rate-hz", f"applies to the modelled drop correction only, not to {drop} "
                                              "(the table holds the zero-current law)")


def _refuse_existing(out: Path, names, force: bool) -> None:
    """Refuse before any work when a target exists (the writer checks again, atomically)."""
    if out.exists() and not out.is_dir():
        raise InputError(Problem(str(out), 0, "", "is not a directory (wanted for the table output)"))
    existing = [out / n for n in names if (out / n).exists()]
    if existing and not force:
        raise InputError([Problem(str(p), 0, "", "already exists; not overwriting (use --force to replace it)")
                          for p in existing])


def run(args) -> int:
    _check_arguments(args)
    caution(CAUTION)  # printed when the command ends, never with a usage error
    sipm, board, law = law_from_args(args)
    sym = args.prefix + args.name
    mode = args.sweep or default_sweep_mode(board.temperature.front_end.adc_bits)
    out = Path(args.out)
    _refuse_existing(out, [f"{sym}.h", f"{sym}.c", f"{sym}.image.json"] + ([SWEEP_FILE] if mode != "none" else []),
                     args.force)
    settings = {"law": law.kind, "overvoltage_v": f"{law.overvoltage_v:g}", "layout": args.layout,
                "max_gain_error_pct": f"{args.max_gain_error_pct:g}", "fault_margin_k": f"{args.fault_margin_k:g}",
                "drop_correction": law.drop_correction, "photon_rate_hz": f"{law.photon_rate_hz:g}"}
    if args.prefix:
        settings["prefix"] = args.prefix
    built = prepare_table_files(law, board, profiles=[sipm, board], max_gain_error_pct=args.max_gain_error_pct,
                                layout=args.layout, fault_margin_k=args.fault_margin_k, name=args.name,
                                prefix=args.prefix, sweep=mode, settings=settings)
    files = dict(built.files)
    files.update(_upload_image(built.table, sym))
    for finding in built.findings:
        if finding.severity != Severity.INFO:
            print(f"compensator: {finding.severity.value.upper()}: {finding.message}", file=sys.stderr, flush=True)
    paths = write_files_atomic(out, files, overwrite=args.force, what="table output")
    result = _result(args, sipm, board, law, built, paths)
    if args.json:
        print_json(result)
    else:
        _print_text(args, result, built)
    return 0


def _upload_image(table, sym: str) -> dict[str, str]:
    """The image `compensator board upload-table` sends to a board, as a file; none when the table has no image."""
    from compensator.link.images import ImageError, table_image

    try:
        return {f"{sym}.image.json": table_image(table).decode("ascii")}
    except ImageError as exc:
        print(f"compensator: note: no upload image: {exc}", file=sys.stderr)
        return {}


def _result(args, sipm, board, law, built, paths) -> dict:
    table, sweep, uniform = built.table, built.sweep, built.uniform_table
    safe = table.safe_state
    result = {
        "sipm": sipm.name, "board": board.name, "law": law.kind, "overvoltage_v": law.overvoltage_v,
        "layout": table.layout, "bound_pct": args.max_gain_error_pct,
        "entries": table.entries, "table_bytes": table.table_bytes,
        "uniform_entries": uniform.entries, "uniform_table_bytes": uniform.table_bytes,
        "layouts": [{"layout": c.layout, "table_bytes": c.table_bytes, "entries": c.entries,
                     "max_gain_error_pct": c.max_gain_error_pct, "within_bound": c.within_bound,
                     "reason": c.reason} for c in built.candidates],
        "codes_verified": int(sweep.adc_code.size),
        "max_gain_error_pct": sweep.max_gain_error_pct, "max_error_dac_lsb": sweep.max_error_dac_lsb,
        "worst_adc_code": sweep.worst_adc_code,
        "adc_quantisation_gain_error_pct": built.adc_quantisation_gain_error_pct,
        "adc_code_range": [table.code_lo, table.code_hi], "adc_fault_band": [table.fault_lo, table.fault_hi],
        "safe_dac_code": table.safe_dac_code, "dac_clamp": [table.dac_min, table.dac_max],
        "safe_state": None if safe is None else {
            "safe_dac_code": safe.dac_code, "profile_dac_code": safe.profile_dac_code,
            "max_output_v": safe.max_output_v, "min_temp_c": safe.coldest_temp_c,
            "min_breakdown_v": safe.min_breakdown_v, "margin_v": safe.margin_v,
            "below_breakdown": safe.below_breakdown, "needs_shutdown_line": safe.needs_shutdown_line},
        "c_function": c_function_signature(table, args.name, prefix=args.prefix),
        "sweep": built.sweep_mode,
        "drop_correction": law.drop_correction,
        "current_correction": None,
        "findings": [{"code": f.code, "severity": f.severity.value, "message": f.message} for f in built.findings],
        "files": [str(p) for p in paths],
    }
    cur = table.current
    if cur is not None:
        result["current_correction"] = {
            "c_function": c_current_function_signature(table, args.name, prefix=args.prefix),
            "dac_codes_per_current_code": cur.dac_codes_per_current_code, "factor": cur.factor, "shift": cur.shift,
            "current_code_max": cur.current_code_max, "limited_by": cur.limit_reason,
            "current_lsb_a": cur.lsb_a, "max_correction_v": cur.max_correction_v,
        }
    return result


def _print_text(args, result: dict, built) -> None:
    table, cur = built.table, built.table.current
    print(f"{result['sipm']} on {result['board']}: {result['law'].replace('_', ' ')} law at "
          f"{result['overvoltage_v']:g} V, {table.layout} layout")
    if result["layouts"]:
        rows = [(c["layout"], "-" if c["table_bytes"] is None else str(c["table_bytes"]),
                 "-" if c["entries"] is None else str(c["entries"]),
                 "-" if c["max_gain_error_pct"] is None else f"{c['max_gain_error_pct']:.4f}",
                 "chosen" if c["layout"] == table.layout else (c["reason"] or "")) for c in result["layouts"]]
        print(format_table(rows, ["layout", "table_bytes", "entries", "max_abs_gain_error_pct", ""]))
    print(f"table: {table.entries} entries, {table.table_bytes} bytes "
          f"(smallest uniform power-of-two table: {result['uniform_entries']} entries, "
          f"{result['uniform_table_bytes']} bytes)")
    print(f"largest absolute gain error over every ADC code {table.code_lo}..{table.code_hi}: "
          f"{result['max_gain_error_pct']:.4f} % (bound {args.max_gain_error_pct:g} %), "
          f"{result['max_error_dac_lsb']:.2f} DAC LSB; half an ADC code adds up to "
          f"{result['adc_quantisation_gain_error_pct']:.4f} %")
    print(f"codes outside {table.fault_lo}..{table.fault_hi} give the safe DAC code {table.safe_dac_code}")
    safe = table.safe_state
    if safe is not None and safe.below_breakdown:
        print(f"safe state: at most {safe.max_output_v:.3f} V, {safe.margin_v:.3f} V below the SiPM breakdown at "
              f"{safe.coldest_temp_c:g} C with every tolerance against it")
    elif safe is not None:
        print(f"safe state: NOT SAFE: up to {safe.max_output_v:.3f} V, {-safe.margin_v:.3f} V above the SiPM "
              f"breakdown at {safe.coldest_temp_c:g} C: the board needs a hardware enable/shutdown line (see stderr "
              f"and the header)")
    for finding in built.findings:
        if finding.severity == Severity.INFO:
            print(f"note: {finding.message}")
    print(f"function: {result['c_function']}")
    if cur is not None:
        print(f"measured drop correction: {result['current_correction']['c_function']} adds "
              f"{cur.dac_codes_per_current_code:.6g} DAC codes per current code ({1e9 * cur.lsb_a:.4g} nA), "
              f"as {cur.factor} / 2^{cur.shift}; current codes above {cur.current_code_max} ({cur.limit_reason}) "
              f"are limited, so it adds at most {cur.max_correction_v:.3f} V: a wrong current reading cannot take "
              f"the SiPM past its max_overvoltage_v")
    for p in result["files"]:
        print(f"wrote {p}")
