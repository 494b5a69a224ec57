"""Running calibrations over many files: vectorised where the maths allows, a process pool where not.

I-V curves that share a bias grid are analysed together in one vectorised
call of :func:`~compensator.calibration.iv.find_breakdown`; with ``jobs > 1``
the files are split into chunks that worker processes read and analyse.
Charge-spectrum fits are independent non-linear fits, so they go to the pool
one file at a time. A file that cannot be read or analysed becomes a record
with a reason; the rest of the batch goes on.
"""

from __future__ import annotations

import os
import re
import sys
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field
from enum import IntEnum
from pathlib import Path

import numpy as np

from compensator.calibration.iv import DEFAULT_METHOD, DEFINITIONS, find_breakdown
from compensator.calibration.measurements import read_iv, read_spectrum
from compensator.errors import CompensatorError, InputError, Problem

__all__ = ["Progress", "IvRecord", "BatchStatus", "batch_status", "SpectrumRecord", "analyse_iv_files",
           "analyse_spectrum_files", "channel_from_name", "default_jobs"]


class Progress:
    """A small text progress bar on stderr (shown only on a terminal unless ``enabled``).

    Parameters
    ----------
    total : int
        Number of items.
    label : str
        Text before the bar.
    stream : file, optional
        Defaults to ``sys.stderr``.
    enabled : bool, optional
        Force the bar on or off; by default it shows when ``stream`` is a terminal
        and there is more than one item.
    """

    def __init__(self, total, label="", stream=None, enabled=None):
        self.total = max(int(total), 0)
        self.label = label
        self.stream = stream or sys.stderr
        if enabled is None:
            enabled = self.total > 1 and hasattr(self.stream, "isatty") and self.stream.isatty()
        self.enabled = bool(enabled)
        self.done = 0

    def update(self, n=1):
        """Advance by ``n`` items and redraw."""
        self.done = min(self.done + n, self.total)
        if self.enabled:
            width = 30
            filled = int(width * self.done / self.total) if self.total else width
            self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (width - filled)}] {self.done}/{self.total}")
            self.stream.flush()

    def __enter__(self):
        if self.enabled:
            self.update(0)
        return self

    def __exit__(self, *exc):
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()
        return False


@dataclass(frozen=True)
class IvRecord:
    """Outcome for one I-V file.

    ``reason`` is empty for an analysed curve; ``error_line`` is the one-line
    message for a failed one (``FILE[:LINE]: [column: ]reason``);
    ``failed_on_input`` tells a file that could not be read (the user's
    mistake: not a CSV, a bad cell, a missing column) from a curve that was
    read but could not be analysed. Arrays are kept for plots.
    """

    file: str
    temp_c: float | None
    method: str
    breakdown_v: float = float("nan")
    breakdown_err_v: float = float("nan")
    exponent: float = float("nan")
    window_points: int = 0
    fit_lo_v: float = float("nan")
    fit_hi_v: float = float("nan")
    n_points: int = 0
    breakdown_stat_err_v: float = float("nan")
    breakdown_sys_err_v: float = float("nan")
    leakage_current_a: float = float("nan")
    leakage_slope_per_v: float = float("nan")
    leakage_fraction: float = float("nan")
    leakage_limited: bool = False
    joint_fit: bool = False
    decimation: int = 1
    channel: str | None = None
    notes: tuple = ()
    reason: str = ""
    error_line: str = ""
    failed_on_input: bool = False
    bias_v: np.ndarray = field(default=None, repr=False)
    current_a: np.ndarray = field(default=None, repr=False)
    grid_v: np.ndarray = field(default=None, repr=False)
    log_derivative_per_v: np.ndarray = field(default=None, repr=False)

    @property
    def ok(self) -> bool:
        return not self.reason

    def summary(self) -> dict:
        """JSON-ready fields (no arrays)."""
        return {
            "file": self.file, "temp_c": self.temp_c, "breakdown_v": self.breakdown_v,
            "breakdown_err_v": self.breakdown_err_v, "method": self.method, "ok": self.ok,
            "reason": self.reason or None, "exponent": self.exponent, "window_points": self.window_points,
            "fit_lo_v": self.fit_lo_v, "fit_hi_v": self.fit_hi_v, "n_points": self.n_points,
            "definition": DEFINITIONS[self.method], "channel": self.channel,
            "breakdown_stat_err_v": self.breakdown_stat_err_v, "breakdown_sys_err_v": self.breakdown_sys_err_v,
            "leakage_current_a": self.leakage_current_a, "leakage_slope_per_v": self.leakage_slope_per_v,
            "leakage_fraction": self.leakage_fraction, "leakage_limited": bool(self.leakage_limited),
            "joint_fit": bool(self.joint_fit), "decimation": self.decimation, "notes": list(self.notes),
        }


class BatchStatus(IntEnum):
    """What a batch of files gave, as a whole (the command maps it to its exit status)."""

    #: At least one file was analysed (failures among them are reported per file).
    ANALYSED = 0
    #: Nothing was analysed and at least one file failed on input (the user's mistake).
    BAD_INPUT = 1
    #: Every file was read, but no analysis succeeded.
    NOTHING_ANALYSED = 2


def batch_status(records) -> BatchStatus:
    """Classify a batch: analysed, bad input, or read but not analysable.

    Parameters
    ----------
    records : iterable
        Records with ``ok`` and ``failed_on_input`` attributes
        (:class:`IvRecord`, :class:`SpectrumRecord`, or any such record).

    Returns
    -------
    BatchStatus
        ``ANALYSED`` when any record is ``ok``; otherwise ``NOTHING_ANALYSED``
        only when every input was valid (each record failed in the analysis),
        and ``BAD_INPUT`` when any file failed on input (or there were none).

    Examples
    --------
    >>> from types import SimpleNamespace as R
    >>> batch_status([R(ok=False, failed_on_input=True), R(ok=True, failed_on_input=False)]).name
    'ANALYSED'
    >>> batch_status([R(ok=False, failed_on_input=False)]).name
    'NOTHING_ANALYSED'
    """
    records = list(records)
    if any(r.ok for r in records):
        return BatchStatus.ANALYSED
    if records and not any(r.failed_on_input for r in records):
        return BatchStatus.NOTHING_ANALYSED
    return BatchStatus.BAD_INPUT


def channel_from_name(path, pattern) -> str | None:
    """The channel named by a file: the first group of ``pattern`` (or its whole match) searched in the file name.

    Parameters
    ----------
    path : str
        File as given.
    pattern : str or None
        Regular expression; None gives None.

    Returns
    -------
    str or None
        The channel, or None when the pattern does not match.
    """
    if pattern is None:
        return None
    match = re.search(pattern, Path(path).name)
    if match is None:
        return None
    return match.group(1) if match.groups() else match.group(0)


def _iv_chunk(paths, method, temp_c, keep_arrays, channel_pattern=None, columns=None):
    """Read and analyse a list of I-V files (runs in a worker process or in-line)."""
    records = [None] * len(paths)
    channels = [None] * len(paths)
    curves = {}
    for i, path in enumerate(paths):
        try:
            data = read_iv(path, temp_c, columns=columns)
            channels[i] = data.channel
            if channel_pattern is not None:
                channels[i] = channel_from_name(path, channel_pattern)
                if channels[i] is None:
                    raise InputError(Problem(path, 0, "", f"the file name does not match --channel-from-name "
                                                         f"{channel_pattern!r}"))
        except CompensatorError as exc:
            msg = str(exc).splitlines()[0]
            records[i] = IvRecord(path, None, method, reason=msg, error_line=msg, failed_on_input=True)
            continue
        bias = data.bias_v
        key = (bias.size, bias.tobytes())
        curves.setdefault(key, []).append((i, data))
    for group in curves.values():
        bias = group[0][1].bias_v
        currents = np.stack([d.current_a for _, d in group])
        result = find_breakdown(bias, currents, method)
        for row, (i, d) in enumerate(group):
            reason = result.reason[row]
            records[i] = IvRecord(
                d.file, d.temp_c, method, float(result.breakdown_v[row]), float(result.breakdown_err_v[row]),
                float(result.exponent[row]), int(result.window_points[row]), float(result.fit_lo_v[row]),
                float(result.fit_hi_v[row]), int(bias.size),
                breakdown_stat_err_v=float(result.breakdown_stat_err_v[row]),
                breakdown_sys_err_v=float(result.breakdown_sys_err_v[row]),
                leakage_current_a=float(result.leakage_current_a[row]),
                leakage_slope_per_v=float(result.leakage_slope_per_v[row]),
                leakage_fraction=float(result.leakage_fraction[row]),
                leakage_limited=bool(result.leakage_limited[row]), joint_fit=bool(result.joint_fit[row]),
                decimation=result.decimation,
                channel=channels[i], notes=d.notes, reason=reason, error_line=f"{d.file}: {reason}" if reason else "",
                bias_v=d.bias_v if keep_arrays else None, current_a=d.current_a if keep_arrays else None,
                grid_v=result.bias_v[row] if keep_arrays else None,
                log_derivative_per_v=result.log_derivative_per_v[row] if keep_arrays else None)
    return records


def _chunks(items, n_chunks):
    n_chunks = max(1, min(n_chunks, len(items)))
    size = -(-len(items) // n_chunks)
    return [items[i:i + size] for i in range(0, len(items), size)]


def default_jobs() -> int:
    """Number of CPUs available to this process."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def analyse_iv_files(paths, *, method=DEFAULT_METHOD, temp_c=None, jobs=1, keep_arrays=False, progress=None,
                     channel_pattern=None, columns=None):
    """Breakdown voltage of every I-V file.

    Parameters
    ----------
    paths : sequence of str
        Files as given by the user.
    method : str
        See :func:`compensator.calibration.iv.find_breakdown`.
    temp_c : float, optional
        Temperature (degree Celsius) for files without a ``temp_c`` column.
    jobs : int
        Worker processes (1 = in this process).
    keep_arrays : bool
        Keep the data and derivative arrays on the records (for plots).
    progress : Progress, optional
        Advanced as files complete.
    channel_pattern : str, optional
        Regular expression whose first group, searched in each file name, is
        the file's channel (instead of a ``channel`` column).
    columns : dict, optional
        The user's column map (see :func:`compensator.csvio.parse_columns_option`).

    Returns
    -------
    list of IvRecord
        In the order of ``paths``.
    """
    paths = [str(p) for p in paths]
    if not paths:
        return []
    jobs = max(1, min(int(jobs), len(paths), default_jobs()))
    n_chunks = 1 if jobs <= 1 else jobs * 4
    chunks = _chunks(paths, n_chunks if jobs > 1 else max(1, len(paths) // 500 + 1))
    records = []
    if jobs <= 1:
        for chunk in chunks:
            records.extend(_iv_chunk(chunk, method, temp_c, keep_arrays, channel_pattern, columns))
            if progress:
                progress.update(len(chunk))
        return records
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        futures = [pool.submit(_iv_chunk, chunk, method, temp_c, keep_arrays, channel_pattern, columns) for chunk in chunks]
        for chunk, future in zip(chunks, futures):
            records.extend(future.result())
            if progress:
                progress.update(len(chunk))
    return records


@dataclass(frozen=True)
class SpectrumRecord:
    """Outcome for one spectrum file: the ``SpectrumFit`` or a reason.

    ``failed_on_input`` is true when the file could not be read (as for
    :class:`IvRecord`), false when a readable spectrum could not be fitted.
    """

    file: str
    charge_unit: str
    fit: object = None
    reason: str = ""
    error_line: str = ""
    failed_on_input: bool = False

    @property
    def ok(self) -> bool:
        return not self.reason

    def summary(self) -> dict:
        """JSON-ready fields (no arrays)."""
        out = {"file": self.file, "charge_unit": self.charge_unit or None, "ok": self.ok, "reason": self.reason or None}
        names = {"gain_in_charge_unit": "gain", "gain_err_in_charge_unit": "gain_err",
                 "pedestal_in_charge_unit": "pedestal", "pedestal_err_in_charge_unit": "pedestal_err",
                 "sigma0_in_charge_unit": "sigma0", "sigma0_err_in_charge_unit": "sigma0_err",
                 "sigma1_in_charge_unit": "sigma1", "sigma1_err_in_charge_unit": "sigma1_err",
                 "mean_pe": "mean_pe", "mean_pe_err": "mean_pe_err",
                 "crosstalk_branching_ratio": "crosstalk_branching_ratio",
                 "crosstalk_branching_ratio_err": "crosstalk_branching_ratio_err",
                 "crosstalk_fraction": "crosstalk_probability", "crosstalk_fraction_err": "crosstalk_probability_err",
                 "chi2": "chi2", "ndf": "ndf", "n_peaks": "n_peaks", "method": "method"}
        for key, attribute in names.items():  # output names of compensator.vocabulary
            out[key] = getattr(self.fit, attribute) if self.fit is not None else None
        return out


def _spectrum_one(path, amplitudes, fit_range=None):
    from compensator.calibration.spectrum import fit_spectrum

    try:
        data = read_spectrum(path)
    except CompensatorError as exc:
        msg = str(exc).splitlines()[0]
        return SpectrumRecord(path, "", None, msg, msg, failed_on_input=True)
    try:
        fit = fit_spectrum(data.charge, data.counts, amplitudes=amplitudes, fit_range=fit_range)
    except CompensatorError as exc:
        reason = "; ".join(str(exc).splitlines()) or type(exc).__name__
        return SpectrumRecord(path, data.charge_unit, None, f"fit failed: {reason}", f"{path}: fit failed: {reason}")
    return SpectrumRecord(path, data.charge_unit, fit)


def analyse_spectrum_files(paths, *, amplitudes="gpoisson", fit_range=None, jobs=1, progress=None):
    """Fit every charge-spectrum file (a process pool for ``jobs > 1``).

    Parameters
    ----------
    paths : sequence of str
    amplitudes : {"gpoisson", "free", "borel"}
        Peak-amplitude model passed to ``fit_spectrum``.
    fit_range : (float, float), optional
        Charge window of the fit, in each file's charge unit.
    jobs : int
        Worker processes.
    progress : Progress, optional

    Returns
    -------
    list of SpectrumRecord
        In the order of ``paths``.
    """
    paths = [str(p) for p in paths]
    records = []
    jobs = max(1, min(int(jobs), len(paths), default_jobs()))
    if jobs <= 1 or len(paths) < 2:
        for p in paths:
            records.append(_spectrum_one(p, amplitudes, fit_range))
            if progress:
                progress.update()
        return records
    with ProcessPoolExecutor(max_workers=jobs) as pool:
        for rec in pool.map(_spectrum_one, paths, [amplitudes] * len(paths), [fit_range] * len(paths), chunksize=max(1, len(paths) // (8 * jobs))):
            records.append(rec)
            if progress:
                progress.update()
    return records
