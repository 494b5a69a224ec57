"""Helpers shared by the ``calibrate`` subcommands: worker count, error lines, exit status, plot targets."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from compensator.cli._common import EXIT_NOTHING_ANALYSED, EXIT_OK, EXIT_USAGE, usage_error

__all__: list[str] = []  # internal to the calibrate command


def _jobs(n: int) -> int:
    from compensator.calibration.batch import default_jobs

    return default_jobs() if n == 0 else min(n, default_jobs())


def _report_errors(records) -> None:
    for rec in records:
        if not rec.ok:
            print(f"compensator: {rec.error_line}", file=sys.stderr)


def _exit_status(records) -> int:
    """0 when anything was analysed; 2 when nothing was and a file failed on input; 3 when every input was valid."""
    from compensator.calibration.batch import BatchStatus, batch_status

    return {BatchStatus.ANALYSED: EXIT_OK, BatchStatus.BAD_INPUT: EXIT_USAGE,
            BatchStatus.NOTHING_ANALYSED: EXIT_NOTHING_ANALYSED}[batch_status(records)]


def _fmt(x, spec):
    return "-" if x is None or not np.isfinite(x) else format(x, spec)


def _plot_targets(directory, files, suffix, force):
    """The plot directory and file names; existing figures are refused without ``--force`` (before any work)."""
    from compensator.calibration.plots import plot_dir, unique_names

    names = unique_names(files, suffix)
    target = Path(directory)
    if not force:
        taken = [n for n in names if (target / n).exists()]
        if taken:
            raise usage_error("--plot", f"{target / taken[0]} already exists ({len(taken)} figure(s)); "
                                        "use --force to replace them")
    return plot_dir(directory), names


def _plot_spectra(records, plot_dir):
    from compensator.calibration.plots import plot_spectrum, unique_names

    for rec, name in zip(records, unique_names([r.file for r in records], "-spectrum.png")):
        if rec.ok:
            plot_spectrum(rec.fit, plot_dir / name, title=Path(rec.file).name, charge_unit=rec.charge_unit)
