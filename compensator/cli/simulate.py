"""``compensator simulate``: the instrument in the loop over weeks of weather; strategies side by side; yield."""

from __future__ import annotations

from pathlib import Path

from compensator.cli._common import add_json_flag, caution, format_table, print_json, usage_error

__all__ = ["ORDER", "COMMAND", "HELP", "register", "run", "render_json", "render_text", "simulated_week",
           "simulated_days"]

ORDER = 70
COMMAND = "simulate"
HELP = "simulate the instrument in its weather, strategy by strategy, with the firmware in the loop; Monte Carlo yield"

CAUTION = ("caution: this is a model for planning. SiPM bias supplies deliver tens of volts (above 60 V dc is hazardous "
           "live under IEC 61010-1); a cooler with an unsinked hot side runs away, and a cold plate below the dew point "
           "wets the electronics. Building and installing follows local codes and licensed practice.")


def register(subparsers) -> None:
    from compensator.profiles.scenario import STRATEGIES

    p = subparsers.add_parser(
        COMMAND, help=HELP,
        description=(
            "Run a scenario file (kind: scenario; see hardware_profiles/README.md) tick by tick: weather -> "
            "enclosure -> die -> temperature sensor -> ADC code -> the firmware's integer path exactly as "
            "generated -> DAC -> supply -> series resistor -> SiPM gain, for the strategies uncompensated, "
            "compensated, compensated_cooled and gain_trimmed on the same weather, then a Monte Carlo over units "
            "with tolerances drawn from the profiles. " + CAUTION))
    p.add_argument("scenario", metavar="SCENARIO", help="scenario YAML file")
    p.add_argument("--days", type=simulated_days(), metavar="D",
                   help="simulated days (default: the scenario's run.duration_days)")
    p.add_argument("--units", type=_units, metavar="N",
                   help="Monte Carlo units (default: the scenario's monte_carlo.units; 0: none)")
    p.add_argument("--strategy", action="append", choices=STRATEGIES, metavar="NAME",
                   help=f"run only this strategy (repeatable; one of {', '.join(STRATEGIES)})")
    p.add_argument("--firmware", metavar="DIR",
                   help="write the generated C (table and cooler PID) into DIR, compile it with cc into a shared "
                        "library and run the loop through it")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the Monte Carlo chunks on this running Dask scheduler (needs compensator[cluster])")
    p.add_argument("--workers", type=_workers, metavar="N",
                   help="local processes for the Monte Carlo (default: the CPUs available)")
    p.add_argument("--plot", metavar="DIR", help="write the figures (PNG) into DIR; never overwrites")
    p.add_argument("--report", metavar="DIR", help="write a self-contained report.html into DIR; never overwrites")
    add_json_flag(p)
    p.set_defaults(handler=run)


def simulated_days():
    """The argparse type of ``--days``: positive, at most the longest run a scenario may ask for (a year and a day)."""
    from compensator.cli._common import bounded_float
    from compensator.profiles.scenario import MAX_DURATION_DAYS

    return bounded_float(0.0, MAX_DURATION_DAYS, above=True, unit="days")


def _units(text):
    import argparse

    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if not 0 <= value <= 10_000_000:
        raise argparse.ArgumentTypeError(f"must be 0 to 10000000, got {text!r}")
    return value


def _workers(text):
    import argparse

    value = _units(text)
    if not 1 <= value <= 1024:
        raise argparse.ArgumentTypeError(f"must be 1 to 1024, got {text!r}")
    return value


def _refuse_existing(args):
    """Refuse before the run (not after minutes of work) when an output would overwrite a file."""
    from compensator.errors import InputError, Problem
    from compensator.sim.report import FIGURES

    taken = []
    for flag, names in (("plot", FIGURES), ("report", ("report.html",))):
        directory = getattr(args, flag)
        if directory is None:
            continue
        d = Path(directory)
        if d.exists() and not d.is_dir():
            raise usage_error(f"--{flag}", f"{directory} is not a directory")
        taken += [Problem(str(d / n), 0, "", "already exists; not overwriting") for n in names if (d / n).exists()]
    if taken:
        raise InputError(taken)
    if args.firmware is not None and Path(args.firmware).exists() and not Path(args.firmware).is_dir():
        raise usage_error("--firmware", f"{args.firmware} is not a directory")


def run(args) -> int:
    from compensator.calibration.batch import Progress
    from compensator.profiles import load_scenario
    from compensator.sim.report import render_figures, write_plots, write_report
    from compensator.sim.run import simulate_scenario

    if args.scheduler is not None and args.workers is not None:
        raise usage_error("--workers", "give either --scheduler (a Dask cluster) or --workers (local processes)")
    _refuse_existing(args)
    scenario = load_scenario(args.scenario)
    caution(CAUTION)  # printed when the command ends, never with a usage error
    days = args.days if args.days is not None else scenario.section("run")["duration_days"]
    rate = scenario.section("run")["control_rate_hz"] or scenario.board.control_rate_hz
    ticks = int(round(days * 86400.0 * rate))
    units = args.units if args.units is not None else scenario.section("monte_carlo")["units"]
    with Progress(ticks, "nominal unit") as bar_run, Progress(units, "Monte Carlo units") as bar_mc:
        report = simulate_scenario(scenario, days=args.days, units=args.units, strategies=args.strategy,
                                   firmware_dir=args.firmware, scheduler=args.scheduler, workers=args.workers,
                                   progress=bar_run.update, mc_progress=bar_mc.update)
    files = []
    figures = render_figures(report) if (args.plot or args.report) else None
    if args.plot:
        files += [str(p) for p in write_plots(report, args.plot) if p]
    if args.report:
        files += [str(p) for p in write_report(report, args.report, figures)]
    if args.json:
        print_json(render_json(report, files))
    else:
        print(render_text(report, files))
    return 0


def render_json(report, files=()) -> dict:
    """The JSON document of a :class:`~compensator.sim.run.SimulationReport` (names in :mod:`compensator.vocabulary`).

    Parameters
    ----------
    report : SimulationReport
    files : sequence of str
        Files written.
    """
    from dataclasses import asdict

    y = report.yield_
    return {
        "name": report.scenario, "file": str(report.source), "sha256": report.sha256,
        "duration_days": report.duration_days, "tick_s": report.tick_s, "ticks": report.ticks,
        "band_pct": report.band_pct, "settle_s": report.settle_s, "firmware": report.firmware,
        "entries": report.table_entries, "table_bytes": report.table_bytes,
        "table_bound_pct": report.table_bound_pct,
        "cooler_controller": None if report.cooler_kp_a_per_k is None else {
            "kp": report.cooler_kp_a_per_k, "ki_per_s": report.cooler_ki_a_per_k_s},
        "runs": [asdict(r) for r in report.runs],
        "comparison": {"uncompensated_over_compensated": report.uncompensated_over_compensated,
                       "published_dark_pulse_feedback_pct": 2.0,
                       "trim_vs_published_factor": report.trim_vs_published_factor},
        "yield": None if y is None else {
            "units": y.units, "band_pct": y.band_pct, "strategy": y.strategy, "fraction_within": y.fraction_within,
            "worst": [{"unit_index": w.unit, "gain_dev_max_abs_pct": w.gain_dev_max_abs_pct,
                       "gain_dev_pk_pk_pct": w.gain_dev_pk_pk_pct,
                       "draws": [{"parameter": k, "deviation": v} for k, v in w.draws.items()]} for w in y.worst],
            "strategies": [{"name": s.name, "fraction_within": s.fraction_within,
                            "gain_dev_max_abs_median_pct": s.gain_dev_max_abs_median_pct,
                            "gain_dev_max_abs_p95_pct": s.gain_dev_max_abs_p95_pct} for s in y.strategies],
            "seed": y.seed, "chunks": y.chunks, "executor": y.executor, "groups": list(y.groups)},
        "files": list(files),
    }


def render_text(report, files=()) -> str:
    """The table for people.

    Parameters
    ----------
    report : SimulationReport
    files : sequence of str
        Files written.
    """
    lines = [f"scenario {report.scenario}: {report.duration_days:g} days, tick {report.tick_s:g} s, firmware by the "
             f"{report.firmware}; metrics over every tick after {report.settle_s:g} s",
             format_table([(r.name, r.gain_dev_max_abs_pct, r.gain_dev_pk_pk_pct, r.gain_dev_rms_pct,
                            r.time_outside_band_pct, 1e3 * r.overvoltage_dev_max_abs_v, r.sensor_fault_ticks,
                            r.out_of_range_ticks, r.cooler_mean_power_w) for r in report.runs],
                          ["strategy", "gain_max_abs_%", "gain_pk_pk_%", "gain_rms_%",
                           f"outside_{report.band_pct:g}%_time_%", "ov_max_abs_mv", "fault_ticks",
                           "out_of_range_ticks", "cooler_w"],
                          ["", ".3f", ".3f", ".3f", ".2f", ".2f", "d", "d", ".3f"])]
    for r in report.runs:
        if r.dew_risk_ticks:
            lines.append(f"warning: {r.name}: the cold plate sat below the dew point of the enclosure air plus the "
                         f"margin for {r.dew_risk_ticks * report.tick_s / 3600:.1f} h: condensation would wet the "
                         "electronics; raise the setpoint or dry the enclosure")
    if report.uncompensated_over_compensated is not None:
        lines.append(f"uncompensated / compensated, largest absolute gain deviation: "
                     f"{report.uncompensated_over_compensated:.0f}x")
    for r in report.runs:
        if r.name == "gain_trimmed":
            conv = "never" if r.trim_converged_s is None else f"after {r.trim_converged_s / 3600:.2f} h"
            resid = "-" if r.trim_residual_rms_pct is None else f"{r.trim_residual_rms_pct:.3f} %"
            lines.append(f"gain trim: converged {conv}; RMS residual after that {resid}; final trim "
                         f"{1e3 * r.trim_v:+.1f} mV")
    if report.trim_vs_published_factor is not None:
        lines.append(f"gain trim vs about 2 % published for analog dark-pulse feedback over 20-30 C (Licciulli et al., "
                     f"IEEE TNS 60, 2013): {report.trim_vs_published_factor:.0f}x tighter")
    y = report.yield_
    if y is not None:
        lines.append(f"Monte Carlo: {y.units} units ({y.executor}, {y.chunks} chunks, seed {y.seed}); share of units "
                     f"whose largest absolute gain deviation stays within +-{y.band_pct:g} %:")
        lines.append(format_table([(s.name, 100 * s.fraction_within, s.gain_dev_max_abs_median_pct,
                                    s.gain_dev_max_abs_p95_pct) for s in y.strategies],
                                  ["strategy", "within_%", "median_max_abs_%", "p95_max_abs_%"],
                                  ["", ".1f", ".3f", ".3f"]))
        if y.worst:
            lines.append(f"worst units ({y.strategy}):")
            lines.append(format_table([(w.unit, w.gain_dev_max_abs_pct, ", ".join(
                f"{k} {v:.3g}" for k, v in sorted(w.draws.items(), key=lambda kv: -abs(kv[1]))[:3]))
                for w in y.worst], ["unit", "max_abs_%", "largest draws"], ["d", ".3f", ""]))
    lines += [f"wrote {f}" for f in files]
    return "\n".join(lines)


def simulated_week(profiles_dir, out_dir=None, say=print, *, days=None):
    """The last step of ``compensator demo``: the bundled scenario's week, printed, with its figures and report.

    Nothing is written here: the files come back so the demo writes them with
    its own, all or nothing.

    Parameters
    ----------
    profiles_dir : str or path-like
        Folder holding the demo scenario and the profiles it names.
    out_dir : str or path-like, optional
        Where the figures and ``report.html`` are to go (``None``: no files).
    say : callable
        Prints a line for people (a no-op under ``--json``).
    days : float, optional
        Simulated days (default: the scenario's ``run.duration_days``).

    Returns
    -------
    document : dict
        The JSON document of the run (as ``compensator simulate --json``).
    files : dict
        Path -> content (PNG bytes, HTML text); empty without ``out_dir``.
    """
    from compensator.errors import InputError, Problem
    from compensator.profiles import load_scenario
    from compensator.profiles.bundled import DEMO_SCENARIO
    from compensator.sim.report import render_figures, render_html
    from compensator.sim.run import simulate_scenario

    path = Path(profiles_dir) / DEMO_SCENARIO
    if not path.is_file():
        raise InputError(Problem(str(path), 0, "", "demo scenario not found (pass --profiles DIR)"))
    report = simulate_scenario(load_scenario(path), days=days)
    files = {}
    if out_dir is not None:
        figures = render_figures(report)
        files = {Path(out_dir) / name: data for name, data in figures.items()}
        files[Path(out_dir) / "report.html"] = render_html(report, figures)
    say(render_text(report))
    return render_json(report, [str(p) for p in files]), files
