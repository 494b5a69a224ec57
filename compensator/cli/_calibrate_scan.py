"""``compensator calibrate gain-scan``: breakdown and cell capacitance from gain against bias."""

from __future__ import annotations

import sys
from typing import NamedTuple

from compensator.cli._calibrate_shared import _jobs, _exit_status, _fmt, _plot_spectra
from compensator.cli._common import format_table, print_json

__all__ = ["run_gain_scan"]


def _scan_summary(file, fit, extra=None) -> dict:
    out = {"file": file, "ok": True, "reason": None, "temp_c": fit.temp_c, "breakdown_v": fit.breakdown_v,
           "breakdown_err_v": fit.breakdown_err_v, "capacitance_f": fit.capacitance_f,
           "capacitance_err_f": fit.capacitance_err_f, "slope_per_v": fit.slope_per_v,
           "slope_err_per_v": fit.slope_err_per_v, "gain_unit": fit.gain_unit, "chi2": fit.chi2, "ndf": fit.ndf,
           "n_points": fit.n_points, "definition": "gain_intercept"}
    out.update(extra or {})
    return out


class _ScanOutcome(NamedTuple):
    """Whether one gain scan was analysed, and if not, whether its input was at fault."""

    ok: bool
    failed_on_input: bool


def run_gain_scan(args) -> int:
    from compensator.calibration.gainscan import fit_gain_scan
    from compensator.calibration.measurements import read_gain_scan
    from compensator.errors import CompensatorError, InputError

    scans, outcomes, errors = [], [], []
    if args.manifest or args.spectra:
        if args.manifest and (args.files or args.spectra):
            raise InputError("--manifest: give either a manifest or spectrum files with --spectra, not both")
        groups = _spectrum_groups(args)
        for label, temp_c, entries in groups:
            records = _fit_spectra(args, [f for f, _ in entries], errors)
            try:
                scans.append(_scan_from_spectra(args, temp_c, entries, records, label))
                outcomes.append(_ScanOutcome(True, False))
            except CompensatorError as exc:
                msg = str(exc).splitlines()[0]
                errors.append(f"{label}: {msg}")
                scans.append({"file": label, "ok": False, "reason": msg, "temp_c": temp_c})
                # A scan is the user's mistake only when every one of its spectra failed on input.
                outcomes.append(_ScanOutcome(False, all(r.failed_on_input for r in records)))
    else:
        if not args.files:
            raise InputError("gain-scan: give gain tables (FILE...), spectra with --spectra --bias-v, or --manifest")
        for path in args.files:
            on_input = True
            try:
                data = read_gain_scan(path, args.temp_c)
                on_input = False
                fit = fit_gain_scan(data.bias_v, data.gain, data.gain_err, temp_c=data.temp_c)
                scans.append(_scan_summary(path, fit))
                outcomes.append(_ScanOutcome(True, False))
            except CompensatorError as exc:
                msg = str(exc).splitlines()[0]
                line = msg if msg.startswith(str(path)) else f"{path}: {msg}"
                errors.append(line)
                scans.append({"file": path, "ok": False, "reason": line, "temp_c": None})
                outcomes.append(_ScanOutcome(False, on_input))
    for line in errors:
        print(f"compensator: {line}", file=sys.stderr)
    ok = [s for s in scans if s["ok"]]
    if args.json:
        print_json({"scans": scans})
    elif ok:
        print(format_table(
            [(s["file"], _fmt(s["temp_c"], ".2f"), s["breakdown_v"], 1e3 * s["breakdown_err_v"],
              _fmt(1e15 * s["capacitance_f"], ".2f"), _fmt(1e15 * s["capacitance_err_f"], ".2f"),
              f"{s['chi2']:.1f}/{s['ndf']}") for s in ok],
            ["file", "temp_c", "breakdown_v", "err_mv", "capacitance_ff", "err_ff", "chi2/ndf"],
            ["", "", ".4f", ".1f", "", "", ""]))
    return _exit_status(outcomes)


def _spectrum_groups(args):
    """(label, temp_c, [(file, bias_v)]) per scan."""
    from compensator.calibration.measurements import read_manifest
    from compensator.errors import InputError

    if args.manifest:
        entries = read_manifest(args.manifest)
        temps = sorted({e.temp_c if e.temp_c is not None else args.temp_c for e in entries},
                       key=lambda t: (t is None, t if t is not None else 0.0))
        groups = []
        for t in temps:
            members = [(e.file, e.bias_v) for e in entries if (e.temp_c if e.temp_c is not None else args.temp_c) == t]
            label = args.manifest if len(temps) == 1 else f"{args.manifest}@{t:g}C"
            groups.append((label, t, members))
        return groups
    if not args.files or not args.bias_v or len(args.bias_v) != len(args.files):
        n_b = len(args.bias_v or [])
        raise InputError(f"--bias-v: give one bias per spectrum file ({len(args.files)} files, {n_b} biases)")
    # A scan from loose spectra is named by its first file (every file is listed under "spectra").
    return [(args.files[0], args.temp_c, list(zip(args.files, args.bias_v)))]


def _fit_spectra(args, files, errors):
    """Fit the spectra of one scan (their failures go to ``errors``; plots when asked)."""
    from compensator.calibration.batch import Progress, analyse_spectrum_files

    with Progress(len(files), "spectra", enabled=None) as bar:
        records = analyse_spectrum_files(files, jobs=_jobs(args.jobs), progress=bar)
    errors.extend(rec.error_line for rec in records if not rec.ok)
    if args.plot:
        from compensator.calibration.plots import plot_dir
        _plot_spectra(records, plot_dir(args.plot))
    return records


def _scan_from_spectra(args, temp_c, entries, records, label):
    from compensator.calibration.gainscan import gain_scan_from_fits

    units = {rec.charge_unit for rec in records if rec.ok}
    result = gain_scan_from_fits([b for _, b in entries], [rec.fit if rec.ok else None for rec in records],
                                 [rec.reason or "" for rec in records], temp_c=temp_c,
                                 charge_per_unit_c=args.charge_per_unit_c,
                                 charge_unit=units.pop() if len(units) == 1 else "")
    per = [{"file": rec.file, "bias_v": b, "gain_in_charge_unit": rec.fit.gain if rec.ok else None,
            "gain_err_in_charge_unit": rec.fit.gain_err if rec.ok else None, "reason": rec.reason or None}
           for rec, (_, b) in zip(records, entries)]
    return _scan_summary(label, result.scan, {"spectra": per})
