"""``compensator calibrate``: breakdown, gain, gain scans and temperature coefficients from bench data."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import NamedTuple

import numpy as np

from compensator.cli._calibrate_scan import run_gain_scan
from compensator.cli._calibrate_shared import _jobs, _report_errors, _exit_status, _fmt, _plot_targets, _plot_spectra
from compensator.cli._common import (
    COMMAND_LINE,
    EXIT_FAILURE,
    EXIT_NOTHING_ANALYSED,
    EXIT_OK,
    add_json_flag,
    caution,
    finite_float,
    format_table,
    non_negative_int,
    positive_float,
    print_json,
    significance_level,
    temperature_c,
    usage_error,
)

__all__ = ["CAUTION", "COMMAND", "EXIT_NONE_ANALYSED", "HELP", "ORDER", "PLAUSIBLE_BREAKDOWN_V", "register",
           "run_gain_scan", "run_iv", "run_spectrum", "run_tempco"]

ORDER = 30
COMMAND = "calibrate"
HELP = "breakdown, gain and temperature coefficients from bench measurements"

#: Kept for old imports: "nothing could be analysed" is the shared EXIT_NOTHING_ANALYSED (3).
EXIT_NONE_ANALYSED = EXIT_NOTHING_ANALYSED
#: Breakdown voltages outside this range (volt) are warned about: SiPMs break down between about 10 and 200 V.
PLAUSIBLE_BREAKDOWN_V = (10.0, 200.0)

CAUTION = ("caution: a calibrated profile sets the bias law; check it against a measurement before it drives "
           "hardware. SiPM bias supplies reach tens of volts (more than 60 V dc is hazardous live under IEC 61010-1); "
           "follow local codes and licensed practice.")


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        COMMAND, help=HELP,
        description="Turn bench measurements (CSV) into breakdown voltages, gains, temperature coefficients "
                    "and a calibrated sipm profile, with uncertainties.")
    sub = parser.add_subparsers(dest="calibrate_command", metavar="WHAT")
    sub.required = True

    from compensator.calibration.iv import DEFAULT_METHOD, METHODS
    from compensator.calibration.spectrum import AMPLITUDE_MODELS

    iv = sub.add_parser("iv", help="breakdown voltage from I-V curves (CSV bias_v,current_a[,temp_c])",
                        description="Breakdown voltage from reverse-bias I-V curves, one result per file.")
    iv.add_argument("files", nargs="+", metavar="FILE", help="I-V curves: CSV with bias_v,current_a[,temp_c]")
    iv.add_argument("--method", choices=METHODS, default=DEFAULT_METHOD,
                    help=f"breakdown method (default {DEFAULT_METHOD})")
    iv.add_argument("--temp-c", type=temperature_c, metavar="T",
                    help="temperature for files without a temp_c column, degree Celsius")
    iv.add_argument("--columns", metavar="MAP",
                    help="map unusual headers: bias=COL,current=COL[:UNIT][,temp=COL[:UNIT]][,channel=COL]")
    iv.add_argument("--channel-from-name", metavar="REGEX",
                    help="the channel (device) of each file: the first group of REGEX searched in its file name")
    _batch_flags(iv)
    iv.set_defaults(handler=run_iv)

    sp = sub.add_parser("spectrum", help="gain, pedestal, mean photoelectrons and crosstalk from charge spectra",
                        description="Fit charge spectra: histogram charge,counts or an event list with one charge column "
                                    "(any charge unit; results come back in the same unit).", epilog=CAUTION)
    sp.add_argument("files", nargs="+", metavar="FILE", help="spectra: CSV with charge[_UNIT],counts or charge[_UNIT]")
    sp.add_argument("--amplitudes", choices=AMPLITUDE_MODELS, default="gpoisson",
                    help="peak amplitudes: generalised Poisson with crosstalk (default), free, or borel for "
                         "self-triggered dark-count spectra without a pedestal")
    sp.add_argument("--fit-range", type=finite_float, nargs=2, metavar=("LO", "HI"),
                    help="fit only charges in [LO, HI] (in the file's charge unit), e.g. to leave out an overflow bin")
    sp.add_argument("--write-profile", metavar="NEW.yaml",
                    help="write a sipm profile with the measured crosstalk (needs --base and the overvoltage): "
                         "crosstalk.probability = 1 - exp(-lambda) at the profile's reference overvoltage, "
                         "model branching_poisson")
    sp.add_argument("--base", metavar="BASE.yaml", help="sipm profile whose other sections the new profile keeps")
    sp.add_argument("--name", help="name of the new profile (default: BASE name + '-calibrated')")
    sp.add_argument("--overvoltage-v", type=positive_float, nargs="+", metavar="V",
                    help="overvoltage of the spectra, volt: one for all or one per file (with --write-profile)")
    sp.add_argument("--bias-v", type=positive_float, nargs="+", metavar="V",
                    help="bias of the spectra, volt, one for all or one per file, with --temp-c: the overvoltage "
                         "is the bias minus BASE's breakdown at that temperature")
    sp.add_argument("--temp-c", type=temperature_c, metavar="T", help="temperature of the spectra, degree Celsius "
                                                                       "(with --bias-v)")
    sp.add_argument("--ref-overvoltage-v", type=positive_float, metavar="V",
                    help="overvoltage the profile states the crosstalk at (default: BASE's crosstalk.ref_overvoltage_v)")
    _batch_flags(sp, force_help="replace existing plots in DIR and an existing --write-profile file")
    sp.set_defaults(handler=run_spectrum)

    gs = sub.add_parser("gain-scan", help="breakdown voltage and cell capacitance from gain against bias",
                        description="Weighted line fit of gain against bias: breakdown = zero crossing, "
                                    "capacitance = slope * q. Input: gain tables (CSV bias_v,gain[,gain_err][,temp_c]), "
                                    "spectra with --spectra and one --bias-v per file, or a --manifest.")
    gs.add_argument("files", nargs="*", metavar="FILE", help="gain tables, or spectra with --spectra")
    gs.add_argument("--spectra", action="store_true", help="FILEs are charge spectra taken at the biases given by --bias-v")
    gs.add_argument("--bias-v", type=positive_float, nargs="+", metavar="V", help="bias of each spectrum, volt (with --spectra)")
    gs.add_argument("--manifest", metavar="FILE", help="CSV file,bias_v[,temp_c] listing spectra (one scan per temperature)")
    gs.add_argument("--charge-per-unit-c", type=positive_float, metavar="C",
                    help="coulomb per charge unit of the spectra (e.g. 1e-12 for pC), for the capacitance")
    gs.add_argument("--temp-c", type=temperature_c, metavar="T", help="temperature of scans without one, degree Celsius")
    add_json_flag(gs)
    gs.add_argument("--jobs", type=non_negative_int, default=1, metavar="N", help="worker processes for spectrum fits (default 1)")
    gs.add_argument("--plot", metavar="DIR", help="write spectrum plots into DIR")
    gs.add_argument("--force", action="store_true", help="replace existing plots in DIR")
    gs.set_defaults(handler=run_gain_scan)

    tc = sub.add_parser("tempco", help="temperature coefficient of the breakdown; write a calibrated sipm profile",
                        description="Weighted linear and quadratic fits of breakdown against temperature. FILE is a CSV "
                                    "temp_c,breakdown_v[,breakdown_err_v] or the JSON of 'calibrate iv' or "
                                    "'calibrate gain-scan'.",
                        epilog=CAUTION)
    tc.add_argument("file", metavar="FILE", help="breakdown scan (CSV or calibrate JSON)")
    tc.add_argument("--ref-temp-c", type=temperature_c, metavar="T",
                    help="reference temperature, degree Celsius (default: the base profile's, else 25)")
    tc.add_argument("--overvoltage-v", type=positive_float, default=3.0, metavar="V",
                    help="overvoltage that sets the gain held for the constant-gain bias slope (default 3)")
    tc.add_argument("--alpha", type=significance_level, default=0.05, metavar="P",
                    help="significance level for keeping the quadratic term (default 0.05)")
    tc.add_argument("--write-profile", metavar="NEW.yaml", help="write a calibrated sipm profile (needs --base)")
    tc.add_argument("--base", metavar="BASE.yaml", help="sipm profile whose other sections the new profile keeps")
    tc.add_argument("--name", help="name of the new profile (default: BASE name + '-calibrated')")
    tc.add_argument("--force", action="store_true", help="replace an existing --write-profile file or plot")
    tc.add_argument("--channel", metavar="NAME", help="fit only the points of this channel (device)")
    tc.add_argument("--offset-from", metavar="OTHER",
                    help="breakdowns of another definition measured on the same device (usually the JSON of "
                         "'calibrate gain-scan'): their offset from FILE at matched temperatures is reported and "
                         "the breakdown (and a written profile) moved onto OTHER's definition")
    tc.add_argument("--pool", action="store_true",
                    help="fit the points of several channels as one device (default: refuse to lump them "
                         "into one profile)")
    add_json_flag(tc)
    tc.add_argument("--plot", metavar="DIR", help="write the breakdown-vs-temperature plot into DIR")
    tc.set_defaults(handler=run_tempco)


def _batch_flags(parser, force_help="replace existing plots in DIR") -> None:
    add_json_flag(parser)
    parser.add_argument("--plot", metavar="DIR", help="write one plot per file into DIR (created if missing)")
    parser.add_argument("--force", action="store_true", help=force_help)
    parser.add_argument("--jobs", type=non_negative_int, default=1, metavar="N",
                        help="worker processes (default 1; 0 = one per CPU)")
    parser.add_argument("--progress", action=argparse.BooleanOptionalAction, default=None,
                        help="progress bar on stderr (default: on a terminal, for more than one file)")


def run_iv(args) -> int:
    from compensator.calibration.batch import Progress, analyse_iv_files
    from compensator.calibration.iv import DEFINITIONS
    from compensator.csvio import parse_columns_option

    jobs = _jobs(args.jobs)
    columns = parse_columns_option(args.columns) if args.columns else None
    if args.channel_from_name:
        import re
        try:
            re.compile(args.channel_from_name)
        except re.error as exc:
            raise usage_error("--channel-from-name", f"not a regular expression: {exc}") from None
    plot = _plot_targets(args.plot, args.files, "-iv.png", args.force) if args.plot else None
    with Progress(len(args.files), "calibrate iv", enabled=args.progress) as bar:
        records = analyse_iv_files(args.files, method=args.method, temp_c=args.temp_c, jobs=jobs,
                                   keep_arrays=plot is not None, progress=bar,
                                   channel_pattern=args.channel_from_name, columns=columns)
    _report_errors(records)
    for rec in records:
        for note in rec.notes:
            print(f"compensator: note: {rec.file}: {note}", file=sys.stderr)
        lo, hi = PLAUSIBLE_BREAKDOWN_V
        if rec.ok and not lo <= rec.breakdown_v <= hi:
            print(f"compensator: warning: {rec.file}: breakdown {rec.breakdown_v:.4g} V lies outside the SiPM range "
                  f"{lo:g} to {hi:g} V: check the units of the bias column", file=sys.stderr)
    if plot is not None:
        from compensator.calibration.plots import plot_iv
        for rec, name in zip(records, plot[1]):
            if rec.bias_v is not None:
                plot_iv(rec, plot[0] / name)
    ok = [r for r in records if r.ok]
    if args.json:
        print_json({"method": args.method, "definition": DEFINITIONS[args.method],
                    "curves": [r.summary() for r in records]})
    elif ok:
        print(format_table(
            [(r.file, r.channel or "-", _fmt(r.temp_c, ".2f"), r.breakdown_v, 1e3 * r.breakdown_err_v,
              1e3 * r.breakdown_sys_err_v, _fmt(r.exponent, ".2f"), _fmt(100 * r.leakage_fraction, ".0f"),
              "yes" if r.leakage_limited else "no") for r in ok],
            ["file", "channel", "temp_c", "breakdown_v", "err_mv", "sys_mv", "exponent", "leak_pct", "leak_limited"],
            ["", "", "", ".4f", ".1f", ".1f", "", "", ""]))
        print(f"{len(ok)} of {len(records)} curves analysed ({args.method}: breakdown definition "
              f"{DEFINITIONS[args.method]})")
    return _exit_status(records)


class _CrosstalkTarget(NamedTuple):
    """What ``calibrate spectrum --write-profile`` needs, checked before any fit."""

    path: Path
    base: object
    overvoltage_v: np.ndarray
    ref_overvoltage_v: float


def _crosstalk_target(args) -> _CrosstalkTarget | None:
    """Check the --write-profile options of ``calibrate spectrum`` (before any work); None without it."""
    given = [flag for flag, value in (("--base", args.base), ("--name", args.name),
                                      ("--overvoltage-v", args.overvoltage_v), ("--bias-v", args.bias_v),
                                      ("--temp-c", args.temp_c), ("--ref-overvoltage-v", args.ref_overvoltage_v))
             if value is not None]
    if not args.write_profile:
        if given:
            raise usage_error(given[0], "applies only with --write-profile")
        return None
    if not args.base:
        raise usage_error("--write-profile", "needs --base BASE.yaml (the sipm profile to calibrate)")
    if args.amplitudes == "free":
        raise usage_error("--write-profile", "free peak amplitudes measure no crosstalk; use --amplitudes gpoisson "
                                             "or borel")
    if (args.overvoltage_v is None) == (args.bias_v is None):
        raise usage_error("--write-profile", "give the overvoltage of the spectra: --overvoltage-v V..., or "
                                             "--bias-v V... with --temp-c T")
    if (args.bias_v is None) != (args.temp_c is None):
        raise usage_error("--bias-v" if args.bias_v is not None else "--temp-c", "--bias-v and --temp-c go together")
    values = args.overvoltage_v if args.overvoltage_v is not None else args.bias_v
    flag = "--overvoltage-v" if args.overvoltage_v is not None else "--bias-v"
    if len(values) not in (1, len(args.files)):
        raise usage_error(flag, f"give one value for all spectra or one per file ({len(args.files)} files, "
                                f"{len(values)} values)")
    from compensator.calibration.profilefile import check_profile_target
    from compensator.physics.sipm import breakdown_v
    from compensator.profiles import load_sipm

    path = check_profile_target(args.write_profile, force=args.force)
    base = load_sipm(args.base)
    values = np.broadcast_to(np.asarray(values, dtype=float), (len(args.files),))
    overvoltage = values if args.bias_v is None else values - float(breakdown_v(base.device, args.temp_c))
    if not np.all(np.isfinite(overvoltage) & (overvoltage > 0)):
        bad = float(overvoltage[~(np.isfinite(overvoltage) & (overvoltage > 0))][0])
        where = "" if args.bias_v is None else f" ({args.base} puts the breakdown at " \
                                               f"{float(breakdown_v(base.device, args.temp_c)):.3f} V at {args.temp_c:g} C)"
        raise usage_error(flag, f"an overvoltage of {bad:.3f} V is not above breakdown{where}")
    ref = args.ref_overvoltage_v if args.ref_overvoltage_v is not None else base.device.crosstalk_ref_overvoltage_v
    if not (np.isfinite(ref) and ref > 0):
        raise usage_error("--ref-overvoltage-v", f"must be positive, got {ref:g}")
    return _CrosstalkTarget(path, base, overvoltage.copy(), float(ref))


def _write_crosstalk_profile(args, target: _CrosstalkTarget, records):
    """Convert the fitted branching ratios and write the profile; (calibration, written profile)."""
    from compensator.calibration.crosstalk import calibrate_crosstalk, crosstalk_values
    from compensator.calibration.profilefile import write_sipm_profile
    from compensator.errors import ModelError

    fits = [r.fit for r in records]
    try:
        cal = calibrate_crosstalk([f.crosstalk_branching_ratio for f in fits], target.overvoltage_v,
                                  branching_ratio_err=[f.crosstalk_branching_ratio_err for f in fits],
                                  ref_overvoltage_v=target.ref_overvoltage_v,
                                  overvoltage_exponent=target.base.device.crosstalk_overvoltage_exponent)
    except ModelError as exc:
        raise exc.at(records[0].file if len(records) == 1 else COMMAND_LINE,
                     key=None if len(records) == 1 else "--write-profile") from None
    values = crosstalk_values(target.base.values, cal, name=args.name)
    exponent = (f"{cal.overvoltage_exponent:.3f} +- {cal.overvoltage_exponent_err:.3f} fitted over the spectra"
                if cal.exponent_fitted else f"{cal.overvoltage_exponent:g} kept from the base profile")
    settings = {
        "charge spectra": ", ".join(Path(r.file).name for r in records), "amplitudes": args.amplitudes,
        "branching ratio lambda at the reference": f"{cal.branching_ratio_at_ref:.5f} +- "
                                                   f"{cal.branching_ratio_err_at_ref:.5f} (1 sigma)",
        "crosstalk.probability": f"1 - exp(-lambda) = {cal.probability_at_ref:.5f} +- {cal.probability_err_at_ref:.5f} "
                                 "(1 sigma; Vinogradov, NIM A 695, 247, 2012)",
        "reference overvoltage": f"{cal.ref_overvoltage_v:g} V", "overvoltage exponent": exponent,
        "crosstalk.model": f"{cal.model} (the model of the spectrum fit)",
    }
    profile = write_sipm_profile(target.path, target.base, values, title="sipm profile with crosstalk calibrated "
                                 "from charge spectra", settings=settings, force=args.force)
    caution(CAUTION)
    return cal, profile


def run_spectrum(args) -> int:
    from compensator.calibration.batch import Progress, analyse_spectrum_files

    jobs = _jobs(args.jobs)
    target = _crosstalk_target(args)
    plot_dir = _plot_targets(args.plot, args.files, "-spectrum.png", args.force)[0] if args.plot else None
    with Progress(len(args.files), "calibrate spectrum", enabled=args.progress) as bar:
        records = analyse_spectrum_files(args.files, amplitudes=args.amplitudes, fit_range=args.fit_range,
                                         jobs=jobs, progress=bar)
    _report_errors(records)
    if plot_dir is not None:
        _plot_spectra(records, plot_dir)
    ok = [r for r in records if r.ok]
    cal = profile = None
    if target is not None and ok:
        if len(ok) < len(records):  # a profile from part of the data would hide the failures
            print(f"compensator: {target.path}: not written: {len(records) - len(ok)} of {len(records)} spectra "
                  "could not be fitted", file=sys.stderr)
        else:
            cal, profile = _write_crosstalk_profile(args, target, records)
    if args.json:
        doc = {"spectra": [r.summary() for r in records]}
        if target is not None:
            doc["profile_crosstalk"] = None if cal is None else {
                "overvoltage_v": cal.ref_overvoltage_v, "crosstalk_branching_ratio": cal.branching_ratio_at_ref,
                "crosstalk_branching_ratio_err": cal.branching_ratio_err_at_ref,
                "crosstalk_fraction": cal.probability_at_ref, "crosstalk_fraction_err": cal.probability_err_at_ref,
                "crosstalk_overvoltage_exponent": cal.overvoltage_exponent,
                "crosstalk_overvoltage_exponent_err": cal.overvoltage_exponent_err if cal.exponent_fitted else None,
                "model": cal.model, "n_points": cal.points, "chi2": cal.chi2, "ndf": cal.ndf}
            doc["written_profile"] = None if profile is None else {"file": str(target.path), "name": profile.name}
        print_json(doc)
    elif ok:
        print(format_table(
            [(r.file, r.charge_unit or "-", r.fit.gain, r.fit.gain_err, r.fit.pedestal, r.fit.mean_pe,
              r.fit.crosstalk_branching_ratio, r.fit.crosstalk_probability, f"{r.fit.chi2:.1f}/{r.fit.ndf}")
             for r in ok],
            ["file", "unit", "gain", "gain_err", "pedestal", "mean_pe", "xt_lambda", "xt_fraction", "chi2/ndf"],
            ["", "", ".5g", ".2g", ".4g", ".4f", ".4f", ".4f", ""]))
        print(f"{len(ok)} of {len(records)} spectra fitted (xt_lambda: crosstalk branching ratio; xt_fraction: "
              "probability of at least one crosstalk avalanche, 1 - exp(-xt_lambda), the profile's crosstalk.probability)")
        if cal is not None:
            how = (f"exponent {cal.overvoltage_exponent:.3f} +- {cal.overvoltage_exponent_err:.3f} fitted"
                   if cal.exponent_fitted else f"exponent {cal.overvoltage_exponent:g} of the base profile")
            print(f"crosstalk at {cal.ref_overvoltage_v:g} V overvoltage: lambda {cal.branching_ratio_at_ref:.4f} +- "
                  f"{cal.branching_ratio_err_at_ref:.4f}, crosstalk.probability = 1 - exp(-lambda) = "
                  f"{cal.probability_at_ref:.4f} +- {cal.probability_err_at_ref:.4f} ({how}; model {cal.model})")
            print(f"wrote {target.path} (profile {profile.name})")
    if target is not None and ok and profile is None:
        return EXIT_FAILURE
    return _exit_status(records)


def _definition_offset(args, scan):
    """The offset of --offset-from's breakdowns from FILE's (one device, matched temperatures)."""
    from compensator.calibration.definitions import definition_offset
    from compensator.calibration.measurements import read_breakdown_scan
    from compensator.errors import ModelError

    if len(set(scan.channels or ())) > 1:
        raise usage_error("--offset-from", f"{args.file} holds {len(set(scan.channels))} channels; name the one "
                                           "measured in OTHER with --channel")
    other = read_breakdown_scan(args.offset_from)
    if other.definition is None:
        raise usage_error("--offset-from", f"{args.offset_from} does not say which breakdown definition it holds; "
                                           "give the JSON of 'calibrate gain-scan' or 'calibrate iv'")
    if args.channel is not None and other.channels is not None:
        try:
            other = other.for_channel(args.channel)
        except ModelError as exc:
            raise exc.at(args.offset_from) from None
    if len(set(other.channels or ())) > 1:
        raise usage_error("--offset-from", f"{args.offset_from} holds several channels; name one with --channel")
    try:
        return definition_offset(scan.temp_c, scan.breakdown_v,
                                 scan.breakdown_err_v if scan.breakdown_err_v is not None else np.zeros(0),
                                 other.temp_c, other.breakdown_v,
                                 other.breakdown_err_v if other.breakdown_err_v is not None else np.zeros(0),
                                 from_definition=scan.definition, to_definition=other.definition)
    except ModelError as exc:
        raise exc.at(args.offset_from) from None


def run_tempco(args) -> int:
    from compensator.calibration.measurements import read_breakdown_scan
    from compensator.calibration.tempco import calibrate_tempco, write_calibrated_profile
    from compensator.errors import ModelError

    if args.write_profile and not args.base:
        raise usage_error("--write-profile", "needs --base BASE.yaml (the sipm profile to calibrate)")
    base = None
    if args.base:
        from compensator.profiles import load_sipm
        base = load_sipm(args.base)
    ref = args.ref_temp_c if args.ref_temp_c is not None else (
        base.device.breakdown.ref_temp_c if base is not None else 25.0)
    if not 0.0 < args.alpha < 1.0:
        raise usage_error("--alpha", f"must lie between 0 and 1, got {args.alpha:g}")
    if not args.overvoltage_v > 0:
        raise usage_error("--overvoltage-v", f"must be positive, got {args.overvoltage_v:g}")
    scan = read_breakdown_scan(args.file)
    if args.channel is not None:
        try:
            scan = scan.for_channel(args.channel)
        except ModelError as exc:
            raise usage_error("--channel", exc.reason) from None
    offset = _definition_offset(args, scan) if args.offset_from else None
    plot_path = None
    if args.plot:
        plot_dir, names = _plot_targets(args.plot, [args.file], "-tempco.png", args.force)
        plot_path = plot_dir / names[0]
    channels = None if args.pool else scan.channels
    try:
        result = calibrate_tempco(scan.temp_c, scan.breakdown_v, scan.breakdown_err_v, channels=channels,
                                  ref_temp_c=ref, alpha=args.alpha, slope_per_v=scan.slope_per_v,
                                  capacitance_f=scan.capacitance_f, overvoltage_v=args.overvoltage_v,
                                  definition=scan.definition, common_err_v=scan.breakdown_sys_err_v,
                                  definition_offset=offset)
    except ModelError as exc:
        # The file was read: a fit it cannot carry is "nothing analysed" (3), as for the batch subcommands.
        print(f"compensator: {exc.at(args.file)}", file=sys.stderr)
        return EXIT_NOTHING_ANALYSED
    fit, cg, cap_at_ref = result.fit, result.constant_gain, result.capacitance_f_at_ref
    for finding in result.findings:
        print(f"compensator: warning: {args.file}: {finding.message}", file=sys.stderr)
    written = []
    if args.write_profile:
        targets = [(None, fit)]
        if len(result.channels) > 1:
            if "{channel}" not in args.write_profile:
                raise usage_error("--write-profile", f"the data hold {len(result.channels)} channels: put "
                                                     "{channel} in the file name for one profile per channel, "
                                                     "or give --pool to fit them as one device")
            targets = [(c.channel, c.fit) for c in result.channels]
        paths = [args.write_profile.replace("{channel}", ch) if ch is not None else args.write_profile
                 for ch, _ in targets]
        for (ch, f), path in zip(targets, paths):
            name = args.name or (f"{base.name}-{ch}" if ch is not None else None)
            written.append((path, write_calibrated_profile(
                path, base, f, data_file=args.file, force=args.force, name=name, capacitance_f=cap_at_ref,
                capacitance_tempco_ppm_per_k=cg.capacitance_tempco_ppm_per_k if cg is not None else None,
                definition=result.definition)))
        caution(CAUTION)  # printed when the command ends
    if plot_path is not None:
        from compensator.calibration.plots import plot_tempco
        plot_tempco(scan.temp_c, scan.breakdown_v, scan.breakdown_err_v, fit, plot_path, title=Path(args.file).name)
    resid = result.residuals_v
    out = {
        "file": args.file, "ref_temp_c": fit.ref_temp_c, "breakdown_v_at_ref": fit.breakdown_v_at_ref,
        "breakdown_err_v_at_ref": fit.breakdown_err_v, "tempco_mv_per_k": fit.tempco_mv_per_k,
        "tempco_err_mv_per_k": fit.tempco_err_mv_per_k, "curvature_mv_per_k2": fit.curvature_mv_per_k2,
        "curvature_err_mv_per_k2": fit.curvature_err_mv_per_k2, "model": fit.model,
        "tempco_relative_per_k": 1e-3 * fit.tempco_mv_per_k / fit.breakdown_v_at_ref,
        "quadratic": {"curvature_mv_per_k2": fit.quadratic_curvature_mv_per_k2,
                      "curvature_err_mv_per_k2": fit.quadratic_curvature_err_mv_per_k2,
                      "p_value": fit.quadratic_p_value, "significant": fit.quadratic_significant,
                      "alpha": args.alpha, "test": fit.test},
        "n_points": fit.n_points, "chi2": fit.chi2, "ndf": fit.ndf, "weighted": scan.breakdown_err_v is not None,
        "points": [{"temp_c": t, "breakdown_v": v, "residual_mv": 1e3 * r}
                   for t, v, r in zip(scan.temp_c.tolist(), scan.breakdown_v.tolist(), resid.tolist())],
        "constant_gain": None if cg is None else {
            "bias_slope_mv_per_k": cg.slope_mv_per_k, "bias_slope_err_mv_per_k": cg.slope_err_mv_per_k,
            "target_gain": cg.target_gain, "overvoltage_v": args.overvoltage_v,
            "capacitance_tempco_ppm_per_k": cg.capacitance_tempco_ppm_per_k,
            "capacitance_tempco_err_ppm_per_k": cg.capacitance_tempco_err_ppm_per_k},
        "capacitance_f_at_ref": cap_at_ref,
        "written_profile": {"file": written[0][0], "name": written[0][1].name} if len(written) == 1 else None,
        "written_profiles": [{"file": path, "name": prof.name} for path, prof in written],
        "definition": result.definition, "chi2_p_value": result.chi2_p_value,
        "channels": [{"channel": c.channel, "tempco_mv_per_k": c.tempco_mv_per_k,
                      "tempco_err_mv_per_k": c.tempco_err_mv_per_k, "breakdown_v_at_ref": c.breakdown_v_at_ref,
                      "breakdown_err_v_at_ref": c.breakdown_err_v, "chi2_ndf": c.chi2_ndf, "chi2_p_value": c.chi2_p_value,
                      "points": c.points} for c in result.channels],
        "tempco_spread_mv_per_k": result.tempco_spread_mv_per_k,
        "definition_offset": None if offset is None else {
            "definition_offset_v": offset.offset_v, "definition_offset_err_v": offset.offset_err_v,
            "from_definition": offset.from_definition, "definition": offset.to_definition,
            "matched_points": offset.matched_points, "chi2": offset.chi2, "ndf": offset.ndf,
            "chi2_p_value": offset.chi2_p_value},
        "warnings": [{"code": f.code, "severity": f.severity.value, "message": f.message} for f in result.findings],
    }
    if args.json:
        print_json(out)
        return EXIT_OK
    print(f"{args.file}: {fit.n_points} points, {fit.model} model ({'weighted' if out['weighted'] else 'unweighted'})")
    print(f"  breakdown at {fit.ref_temp_c:g} C: {fit.breakdown_v_at_ref:.4f} +- {fit.breakdown_err_v:.4f} V"
          + (f" ({result.definition})" if result.definition else ""))
    if offset is not None:
        print(f"  moved onto {offset.to_definition} by the offset measured at {offset.matched_points} temperature(s): "
              f"{1e3 * offset.offset_v:+.1f} +- {1e3 * offset.offset_err_v:.1f} mV from {offset.from_definition}")
    print(f"  tempco: {fit.tempco_mv_per_k:.3f} +- {fit.tempco_err_mv_per_k:.3f} mV/K "
          f"({1e3 * out['tempco_relative_per_k']:.3f} per mille per K)")
    q = fit.quadratic_curvature_mv_per_k2
    if np.isfinite(q):
        print(f"  quadratic term: {q:.4f} +- {fit.quadratic_curvature_err_mv_per_k2:.4f} mV/K^2, "
              f"p = {fit.quadratic_p_value:.3g} ({fit.test}): {'significant' if fit.quadratic_significant else 'not significant'}")
    if cg is not None:
        print(f"  constant-gain bias slope: {cg.slope_mv_per_k:.3f} +- {cg.slope_err_mv_per_k:.3f} mV/K "
              f"(capacitance {cg.capacitance_tempco_ppm_per_k:+.0f} ppm/K)")
    for c in result.channels:
        print(f"  channel {c.channel}: {c.tempco_mv_per_k:.3f} +- {c.tempco_err_mv_per_k:.3f} mV/K, breakdown "
              f"{c.breakdown_v_at_ref:.4f} V, chi2/ndf {c.chi2_ndf:.2f}, {c.points} points")
    if len(result.channels) > 1:
        print(f"  spread of tempco across {len(result.channels)} channels: {result.tempco_spread_mv_per_k:.3f} mV/K "
              "(sample standard deviation)")
    for path, prof in written:
        print(f"  wrote {path} (profile {prof.name})")
    return EXIT_OK
