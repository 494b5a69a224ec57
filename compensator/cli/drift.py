"""``compensator drift``: gain drift, residual temperature coefficient and Allan deviation of logged runs."""

from __future__ import annotations

import math

from compensator.cli._common import add_json_flag, format_table, positive_float, print_json, usage_error

__all__ = ["register", "run"]

ORDER = 82
COMMAND = "drift"
HELP = "drift per day, residual temperature coefficient and Allan deviation of logbooks (one row per unit)"


def register(subparsers) -> None:
    parser = subparsers.add_parser(COMMAND, help=HELP, description=(
        "Analyse one or more logbooks written by `compensator log`: gain drift per day with its confidence "
        "interval, residual temperature coefficient from a joint fit gain ~ a + b T + c t, overlapping Allan "
        "deviation of gain, bias and temperature, gaps and a fault timeline. Several logbooks give one row "
        "per unit and the fleet's spread. The files are only read, also while a logger writes to them."))
    parser.add_argument("logbooks", nargs="+", metavar="RUN.sqlite", help="logbook files")
    parser.add_argument("--sipm", metavar="FILE", help=(
        "SiPM profile: without a logged dark-peak gain, use bias minus its breakdown voltage as the gain proxy"))
    parser.add_argument("--bin-s", type=positive_float, metavar="S", help="bin width of the drift fit, seconds "
                        "(default 3600, shorter for runs under two days)")
    parser.add_argument("--confidence", type=positive_float, default=0.95, metavar="P",
                        help="two-sided level of the intervals (default 0.95)")
    parser.add_argument("--report", metavar="DIR", help="write PNG figures and a self-contained HTML report here")
    parser.add_argument("--force", action="store_true", help="replace existing report files")
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def _ci(pair) -> str:
    lo, hi = pair
    return "n/a" if not (math.isfinite(lo) and math.isfinite(hi)) else f"[{lo:+.4f}, {hi:+.4f}]"


def _print_unit(report) -> None:
    level = f"{100 * report.confidence_fraction:g} %"
    print(f"{report.unit_id} ({report.logbook}): {report.samples} samples in {report.sessions} session{'' if report.sessions == 1 else 's'} over "
          f"{report.duration_s / 86400:.3f} days, {report.samples_used} used; gain from {report.gain_source}")
    rows = [
        ("drift_pct_per_day", report.drift_pct_per_day, f"{level}: {_ci(report.drift_ci_pct_per_day)}"),
        ("residual_tempco_pct_per_k", report.residual_tempco_pct_per_k,
         f"{level}: {_ci(report.residual_tempco_ci_pct_per_k)}"),
        ("drift_time_only_pct_per_day", report.drift_time_only_pct_per_day,
         f"{level}: {_ci(report.drift_time_only_ci_pct_per_day)}"),
        ("time_temp_correlation", report.time_temp_correlation,
         f"variance inflation {report.variance_inflation:.2f}"),
        ("gain_peak_to_peak_pct", report.gain_peak_to_peak_pct, f"{report.bins} bins of {report.bin_s:g} s"),
    ]
    for curve in report.allan:
        rows.append((f"allan {curve.quantity} minimum", curve.minimum_deviation_in_quantity_unit,
                     f"at tau_s = {curve.minimum_tau_s:g}"))
    rows.append(("gaps", len(report.gaps), f"{report.gap_total_s:.0f} s without telemetry"))
    for fault in report.fault_summary:
        rows.append((f"fault {fault.fault}", fault.intervals, f"{fault.total_s:.0f} s in total"))
    print(format_table(rows, ["figure", "value", "note"], ["", ".5g", ""]))
    for finding in report.findings:
        print(f"{finding.severity.value}: {finding.message}")


def run(args) -> int:
    from compensator.drift.files import analyse_logbooks
    from compensator.drift.report import write_report

    from compensator.cli.export import refuse_repeated_logbooks

    if not 0.5 <= args.confidence <= 0.999:
        raise usage_error("--confidence", f"must be between 0.5 and 0.999, got {args.confidence}")
    refuse_repeated_logbooks(args.logbooks)
    sipm = None
    if args.sipm:
        from compensator.profiles import load_sipm

        sipm = load_sipm(args.sipm)
    analysis = analyse_logbooks(args.logbooks, sipm=sipm, bin_s=args.bin_s, confidence=args.confidence,
                                keep_runs=bool(args.report))
    summary = analysis.summary
    written = []
    if args.report:
        written = write_report(args.report, analysis.runs, summary, breakdown_v=analysis.breakdown_v,
                               overwrite=args.force)
    if args.json:
        print_json(summary.unit_reports[0] if len(summary.unit_reports) == 1 else summary)
    else:
        if len(summary.unit_reports) > 1:
            rows = [(r.unit_id, r.samples, r.duration_s / 86400, r.drift_pct_per_day, _ci(r.drift_ci_pct_per_day),
                     r.residual_tempco_pct_per_k, r.gain_source) for r in summary.unit_reports]
            print(format_table(rows, ["unit", "samples", "days", "drift_pct_per_day", "interval",
                                      "residual_tempco_pct_per_k", "gain_source"],
                               ["", "d", ".2f", "+.4f", "", "+.4f", ""]))
            print()
            print(format_table([(s.quantity, s.unit_count, s.mean_in_quantity_unit, s.std_in_quantity_unit, s.minimum_in_quantity_unit, s.maximum_in_quantity_unit, s.largest_abs_unit)
                                for s in summary.spread],
                               ["fleet", "units", "mean", "std_1sigma", "min", "max", "largest_abs_unit"],
                               ["", "d", "+.4g", ".4g", "+.4g", "+.4g", ""]))
            for finding in summary.findings:
                print(f"{finding.severity.value}: {finding.message}")
            print()
        for report in summary.unit_reports:
            _print_unit(report)
            print()
        if written:
            print(f"report: {written[-1]}")
    return 0
