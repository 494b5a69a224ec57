"""``compensator budget``: the gain error a compensation law leaves on a board."""

from __future__ import annotations

import sys

from compensator.cli._common import (
    EXIT_OK,
    LAW_FLAGS,
    add_json_flag,
    add_law_arguments,
    format_table,
    law_from_args,
    locate_law_error,
    non_negative_float,
    print_json,
    temperature_c,
    usage_error,
)
from compensator.errors import ModelError
from compensator.law import gain_error_budget
from compensator.law.budget import (
    DEFAULT_CURRENT_UNCERTAINTY_PCT,
    DEFAULT_RAMP_K_PER_MIN,
    DEFAULT_SAMPLES,
    DEFAULT_SEED,
)

__all__ = ["HAZARDOUS_DC_V", "ORDER", "register", "run"]

ORDER = 40

#: IEC 61010-1 treats more than 60 V dc as hazardous live in normal dry conditions.
HAZARDOUS_DC_V = 60.0

#: Library argument names of the budget -> the command-line flags that carry them (the law's flags included).
_FLAGS = {**LAW_FLAGS, "calibration_temp_c": "--calibration-temp-c", "samples": "--samples", "seed": "--seed",
          "current_uncertainty_pct": "--current-uncertainty-pct", "ramp_k_per_min": "--ramp-k-per-min"}


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "budget", help="gain-error budget of a compensation law: each term, RSS, worst case, Monte Carlo",
        description="Propagate every error source of the board (sensor, converters, references, resistors and "
                    "their drifts, the sensor's lag at an enclosure ramp) and of the sensor calibration to gain "
                    "error (percent) over the board's operating range, before and after a one-point calibration, "
                    "and check the figures with a seeded Monte Carlo of the whole chain. Exit status 2 when the "
                    "supply cannot follow the law over the whole range. JSON fields: see the README.",
        epilog="Caution: the bias these figures plan can exceed 60 V dc, which IEC 61010-1 treats as hazardous "
               "live; building and installing supplies follows local codes and licensed practice.")
    add_law_arguments(parser)
    parser.add_argument("--calibration-temp-c", type=temperature_c, default=None, metavar="T",
                        help="temperature of the one-point gain calibration, degree Celsius "
                             "(default: the breakdown reference temperature)")
    parser.add_argument("--current-uncertainty-pct", type=non_negative_float, default=None,
                        metavar="P", help="accuracy of the modelled current for --drop-correction modelled, percent "
                                          f"(default {DEFAULT_CURRENT_UNCERTAINTY_PCT:g})")
    parser.add_argument("--ramp-k-per-min", type=non_negative_float, default=DEFAULT_RAMP_K_PER_MIN, metavar="R",
                        help="enclosure temperature ramp for the sensor-lag term, kelvin per minute "
                             f"(default {DEFAULT_RAMP_K_PER_MIN:g}, an assumption: give the instrument's own)")
    parser.add_argument("--samples", type=int, default=DEFAULT_SAMPLES, metavar="N",
                        help=f"Monte Carlo samples (default {DEFAULT_SAMPLES}; 0 skips it)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, metavar="N",
                        help=f"Monte Carlo seed (default {DEFAULT_SEED}; 0 or more)")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def _as_dict(budget, sipm, board, law) -> dict:
    mc = budget.monte_carlo
    return {
        "sipm": sipm.name, "board": board.name, "law": law.kind, "quantity": budget.quantity,
        "overvoltage_v": law.overvoltage_v, "drop_correction": law.drop_correction,
        "photon_rate_hz": law.photon_rate_hz, "temp_range_c": [law.min_temp_c, law.max_temp_c],
        "calibration_temp_c": budget.calibration_temp_c, "current_uncertainty_pct": budget.current_uncertainty_pct,
        "ramp_k_per_min": budget.ramp_k_per_min, "breakdown_offset_v": law.breakdown_offset_v,
        "terms": [{"key": t.key, "name": t.name, "kind": t.kind, "limit_pct": t.limit_pct, "std_pct": t.std_pct,
                   "calibrated_limit_pct": t.calibrated_limit_pct, "calibrated_std_pct": t.calibrated_std_pct,
                   "worst_temp_c": t.worst_temp_c, "note": t.note} for t in budget.terms],
        "rss_pct": budget.rss_pct, "worst_case_pct": budget.worst_case_pct, "systematic_pct": budget.systematic_pct,
        "calibrated_rss_pct": budget.calibrated_rss_pct,
        "calibrated_worst_case_pct": budget.calibrated_worst_case_pct,
        "dominant": budget.dominant, "calibrated_dominant": budget.calibrated_dominant,
        "findings": [{"code": f.code, "severity": f.severity.value, "message": f.message} for f in budget.findings],
        "monte_carlo": None if mc is None else {
            "seed": mc.seed, "samples": mc.samples, "std_pct": mc.std_pct, "mean_abs_pct": mc.mean_abs_pct,
            "p99_abs_pct": mc.p99_abs_pct, "max_abs_pct": mc.max_abs_pct,
            "calibrated_std_pct": mc.calibrated_std_pct, "calibrated_p99_abs_pct": mc.calibrated_p99_abs_pct,
            "std_vs_rss": mc.std_pct / budget.rss_pct if budget.rss_pct else None},
    }


def run(args) -> int:
    if args.seed < 0:
        raise usage_error("--seed", f"must be 0 or more, got {args.seed}")
    sipm, board, law = law_from_args(args)
    if args.current_uncertainty_pct is not None and law.drop_correction != "modelled":
        raise usage_error("--current-uncertainty-pct",
                          f"applies only to --drop-correction modelled, not {law.drop_correction}")
    current_uncertainty_pct = (DEFAULT_CURRENT_UNCERTAINTY_PCT if args.current_uncertainty_pct is None
                               else args.current_uncertainty_pct)
    try:
        budget = gain_error_budget(law, board, calibration_temp_c=args.calibration_temp_c, samples=args.samples,
                                   seed=args.seed, current_uncertainty_pct=current_uncertainty_pct,
                                   ramp_k_per_min=args.ramp_k_per_min)
    except ModelError as exc:
        raise locate_law_error(exc, args.sipm, _FLAGS) from None
    for finding in budget.findings:
        print(f"compensator: {finding}", file=sys.stderr)
    if args.json:
        print_json(_as_dict(budget, sipm, board, law))
        return EXIT_OK
    _print_text(budget, sipm, board, law)
    return EXIT_OK


def _print_text(budget, sipm, board, law) -> None:
    drop = {"none": "not corrected", "modelled": "corrected from the modelled current",
            "measured": "corrected from the measured current"}[law.drop_correction]
    what = "response (gain x PDE x crosstalk x light yield)" if budget.quantity == "response" else "gain"
    print(f"{sipm.name} on {board.name}: {law.kind.replace('_', ' ')} law at {law.overvoltage_v:g} V, drop {drop}, "
          f"{law.min_temp_c:g} to {law.max_temp_c:g} C")
    print(f"{what} error over the range, percent; 'cal' = after a one-point calibration at "
          f"{budget.calibration_temp_c:g} C; limits are tolerance bounds, half an LSB, or 3 sigma; largest over "
          f"the range")
    rows = [(t.name, t.kind, t.limit_pct, t.std_pct, t.calibrated_limit_pct, t.calibrated_std_pct, t.worst_temp_c,
             t.note) for t in budget.terms]
    print(format_table(rows, ["term", "kind", "limit_%", "1sigma_%", "cal_limit_%", "cal_1sigma_%", "worst_at_c",
                              "note"], ["", "", ".4f", ".4f", ".4f", ".4f", ".1f", ""]))
    names = {t.key: t.name for t in budget.terms}
    print(f"root-sum-square (1 sigma): {budget.rss_pct:.4f} %   after calibration: {budget.calibrated_rss_pct:.4f} %")
    print(f"worst case (limits + systematic): {budget.worst_case_pct:.4f} %   after calibration: "
          f"{budget.calibrated_worst_case_pct:.4f} %")
    print(f"dominant term: {names[budget.dominant]}; after calibration: {names[budget.calibrated_dominant]}")
    mc = budget.monte_carlo
    if mc is not None:
        print(f"Monte Carlo (seed {mc.seed}, {mc.samples} samples, full chain with quantisation): "
              f"std {mc.std_pct:.4f} % (first-order RSS {budget.rss_pct:.4f} %), 99th percentile "
              f"{mc.p99_abs_pct:.4f} %, after calibration std {mc.calibrated_std_pct:.4f} %")
    if board.max_bias_v > HAZARDOUS_DC_V:
        print(f"caution: {board.name} may set up to {board.max_bias_v:g} V; above 60 V dc is hazardous live "
              "(IEC 61010-1): follow local codes and licensed practice")
