"""Reading bench measurements (CSV and the JSON that ``calibrate`` writes), at the edge.

CSV files have a header row; units are part of the column names (``bias_v``,
``current_a``, ``temp_c``); names are matched case-insensitively, extra
columns are ignored and lines starting with ``#`` are comments. A file that
cannot be used raises :class:`~compensator.errors.InputError` with a single
:class:`~compensator.errors.Problem` naming the file (as given), the line, the
column and the reason, so a batch can report it and go on.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from compensator.csvio import Table, read_table
from compensator.csvio import csv_rows as _csv_rows
from compensator.csvio import fail as _fail
from compensator.csvio import read_text as _read_text
from compensator.errors import ModelError

__all__ = ["MAX_PLAUSIBLE_BIAS_V", "PLAUSIBLE_TEMP_C", "BreakdownScan", "GainScanData", "IvData", "ManifestEntry",
           "SpectrumData", "check_bias", "check_temperatures", "read_breakdown_scan", "read_gain_scan", "read_iv",
           "read_manifest", "read_spectrum"]

#: Temperatures (degree Celsius) outside this range are refused as implausible for a SiPM bench.
PLAUSIBLE_TEMP_C = (-200.0, 150.0)
#: Biases (volt) above this are refused: SiPMs break down between about 10 and 200 V (common practice).
MAX_PLAUSIBLE_BIAS_V = 1000.0


def check_temperatures(table: Table, key="temp_c"):
    """Refuse temperatures below absolute zero, or a column that looks like kelvin or out of range.

    Parameters
    ----------
    table : Table
        With the column ``key`` in degree Celsius.
    key : str
        Canonical name of the temperature column.
    """
    t = table.columns[key]
    col = table.names[key]
    below = t <= -273.15
    if below.any():
        i = int(np.argmax(below))
        _fail(table.file, int(table.lines[i]), col, f"{t[i]:g} C is below absolute zero (-273.15 C)")
    if np.all((t >= 200.0) & (t <= 400.0)) and col.lower() == key:
        _fail(table.file, int(table.lines[0]), col, f"every temperature lies between 200 and 400 ({t.min():g} to "
                                                   f"{t.max():g}): these look like kelvin; name the column temp_k "
                                                   "to convert, or give degree Celsius")
    bad = (t < PLAUSIBLE_TEMP_C[0]) | (t > PLAUSIBLE_TEMP_C[1])
    if bad.any():
        i = int(np.argmax(bad))
        _fail(table.file, int(table.lines[i]), col, f"{t[i]:g} C is outside the plausible bench range "
                                                   f"{PLAUSIBLE_TEMP_C[0]:g} to {PLAUSIBLE_TEMP_C[1]:g} C")


def check_bias(table: Table, key="bias_v"):
    """Refuse a bias column that looks like millivolts (above 1000 V).

    Parameters
    ----------
    table : Table
        With the column ``key`` in volt.
    key : str
        Canonical name of the bias column.
    """
    b = table.columns[key]
    high = np.abs(b) > MAX_PLAUSIBLE_BIAS_V
    if high.any():
        i = int(np.argmax(high))
        _fail(table.file, int(table.lines[i]), table.names[key],
              f"{b[i]:g} V is above {MAX_PLAUSIBLE_BIAS_V:g} V, far beyond any SiPM bias; if the column holds "
              "millivolts name it bias_mv")


def _single_temperature(table: Table, temp_c, what):
    """The temperature of a measurement: from its ``temp_c`` column (mean) or the given value."""
    if "temp_c" in table.columns:
        check_temperatures(table)
        t = table.columns["temp_c"]
        if np.ptp(t) > 2.0:
            _fail(table.file, int(table.lines[int(np.argmax(np.abs(t - t.mean())))]), table.names["temp_c"],
                  f"temperature varies by {np.ptp(t):.3g} K within one {what}; split the file per temperature")
        return float(t.mean())
    return None if temp_c is None else float(temp_c)


@dataclass(frozen=True)
class IvData:
    """One I-V curve: ``bias_v`` (volt), ``current_a`` (ampere), ``temp_c`` (degree Celsius or None), ``channel``."""

    file: str
    bias_v: np.ndarray
    current_a: np.ndarray
    temp_c: float | None
    channel: str | None = None
    notes: tuple = ()


def read_iv(path, temp_c=None, *, columns=None) -> IvData:
    """Read an I-V curve: bias, current and optionally temperature and channel columns.

    Parameters
    ----------
    path : str or path-like
        CSV file; see :mod:`compensator.csvio` for the names, units and
        separators accepted (``bias_v,current_a[,temp_c][,channel]`` in the plainest form).
    temp_c : float, optional
        Temperature (degree Celsius) used when the file has no temperature column.
    columns : dict, optional
        User's column choice (:func:`compensator.csvio.parse_columns_option`).

    Returns
    -------
    IvData
    """
    table = read_table(path, ("bias_v", "current_a"), ("temp_c",), columns=columns, text=("channel",))
    check_bias(table)
    channel = None
    if "channel" in table.text:
        names = sorted(set(table.text["channel"]))
        if len(names) > 1:
            _fail(path, int(table.lines[0]), table.names["channel"],
                  f"one I-V curve per file: the channel column holds {', '.join(names[:4])}")
        channel = names[0]
    return IvData(table.file, table.columns["bias_v"], table.columns["current_a"],
                  _single_temperature(table, temp_c, "I-V curve"), channel, table.notes)


@dataclass(frozen=True)
class SpectrumData:
    """A charge spectrum: bin centres and counts, or an event list (``counts`` is None).

    ``charge_unit`` is the unit suffix of the charge column (``""`` for plain ``charge``).
    """

    file: str
    charge: np.ndarray
    counts: np.ndarray | None
    charge_unit: str


def read_spectrum(path) -> SpectrumData:
    """Read a charge spectrum: ``charge,counts`` (histogram) or ``charge`` alone (event list).

    The charge column may carry its unit (``charge_pc``, ``charge_adc``); results
    come back in that unit.
    """
    table = read_table(path, ("charge",), ("counts",), prefixes=("charge",))
    name = table.names["charge"].lower()
    unit = name[len("charge_"):] if name.startswith("charge_") else ""
    counts = table.columns.get("counts")
    if counts is not None:
        bad = (counts < 0) | (counts != np.round(counts))
        if bad.any():
            i = int(np.argmax(bad))
            _fail(path, int(table.lines[i]), table.names["counts"], f"counts must be whole numbers >= 0, got {counts[i]!r}")
        if counts.sum() <= 0:
            _fail(path, 0, table.names["counts"], "the histogram is empty (all counts are zero)")
    return SpectrumData(table.file, table.columns["charge"], counts, unit)


@dataclass(frozen=True)
class GainScanData:
    """Gain against bias: ``bias_v`` (volt), ``gain`` (electrons), optional ``gain_err`` and temperature."""

    file: str
    bias_v: np.ndarray
    gain: np.ndarray
    gain_err: np.ndarray | None
    temp_c: float | None


def read_gain_scan(path, temp_c=None) -> GainScanData:
    """Read a gain scan: columns ``bias_v,gain[,gain_err][,temp_c]`` (gain in electrons per avalanche)."""
    table = read_table(path, ("bias_v", "gain"), ("gain_err", "temp_c"))
    err = table.columns.get("gain_err")
    if err is not None and np.any(err <= 0):
        i = int(np.argmax(err <= 0))
        _fail(path, int(table.lines[i]), table.names["gain_err"], "gain errors must be positive")
    return GainScanData(table.file, table.columns["bias_v"], table.columns["gain"], err,
                        _single_temperature(table, temp_c, "gain scan"))


@dataclass(frozen=True)
class BreakdownScan:
    """Breakdown voltage against temperature.

    Attributes
    ----------
    file : str
    temp_c, breakdown_v : ndarray
        Degree Celsius, volt.
    breakdown_err_v : ndarray or None
        One-sigma errors, volt (None when the file gives none): the statistical
        part alone when ``breakdown_sys_err_v`` is given.
    slope_per_v : ndarray or None
        Gain per volt of overvoltage at each temperature (from gain scans), for
        the constant-gain bias slope.
    capacitance_f : ndarray or None
        Cell capacitance at each temperature, farad (from gain scans).
    sources : tuple of str
        Where each point came from (file names from the JSON, or ``FILE:LINE``).
    channels : tuple of str or None
        The device (channel) of each point, None when the data do not say.
    definition : str or None
        The breakdown definition the values measure (from the JSON), None when unknown.
    breakdown_sys_err_v : ndarray or None
        The breakdown method's systematic error of each point, common to all points
        (from the JSON of ``calibrate iv``), volt; None when not given.
    """

    file: str
    temp_c: np.ndarray
    breakdown_v: np.ndarray
    breakdown_err_v: np.ndarray | None
    slope_per_v: np.ndarray | None = None
    capacitance_f: np.ndarray | None = None
    sources: tuple = ()
    channels: tuple | None = None
    definition: str | None = None
    breakdown_sys_err_v: np.ndarray | None = None

    def for_channel(self, channel: str) -> BreakdownScan:
        """The points of one channel (a ModelError naming the channels there are when it is not there)."""
        names = sorted(set(self.channels or ()))
        if channel not in names:
            raise ModelError(f"no channel {channel!r} in the data (channels: {', '.join(names) or 'none named'})",
                             key="channel")
        sel = np.array([c == channel for c in self.channels])

        def pick(values):
            return None if values is None else np.asarray(values)[sel]

        return BreakdownScan(self.file, self.temp_c[sel], self.breakdown_v[sel], pick(self.breakdown_err_v),
                             pick(self.slope_per_v), pick(self.capacitance_f),
                             tuple(s for s, keep in zip(self.sources, sel) if keep) if self.sources else (),
                             tuple(c for c, keep in zip(self.channels, sel) if keep), self.definition,
                             pick(self.breakdown_sys_err_v))


def read_breakdown_scan(path) -> BreakdownScan:
    """Read a breakdown scan: CSV ``temp_c,breakdown_v[,breakdown_err_v]`` or ``calibrate`` JSON.

    The JSON written by ``compensator calibrate iv --json`` (``{"curves": [...]}``)
    or ``calibrate gain-scan --json`` (``{"scans": [...]}``) is accepted; entries
    without a breakdown or a temperature are skipped.
    """
    text = _read_text(path)
    if text.lstrip().startswith("{"):
        from compensator.fileio import loads_json

        doc = loads_json(text, file=str(path))
        entries = None
        for key in ("curves", "scans"):
            if isinstance(doc, dict) and isinstance(doc.get(key), list):
                entries = doc[key]
                break
        if entries is None:
            _fail(path, 1, "", 'expected the JSON of "calibrate iv" ({"curves": [...]}) or "calibrate gain-scan" ({"scans": [...]})')
        usable = [e for e in entries if isinstance(e, dict) and _num(e.get("breakdown_v")) and _num(e.get("temp_c"))]
        if len(usable) < 2:
            _fail(path, 0, "", f"only {len(usable)} entries have both breakdown_v and temp_c; need at least 2")
        errs = [e.get("breakdown_err_v") for e in usable]
        stat = [e.get("breakdown_stat_err_v") for e in usable]
        sys_errs = [e.get("breakdown_sys_err_v") for e in usable]
        split = all(_num(x) and x > 0 for x in stat) and all(_num(x) and x >= 0 for x in sys_errs)
        if split:  # the method's systematic part is common to the points: the fit takes it apart
            errs = stat
        slopes = [e.get("slope_per_v") for e in usable]
        caps = [e.get("capacitance_f") for e in usable]
        return BreakdownScan(
            str(path), np.array([e["temp_c"] for e in usable], float), np.array([e["breakdown_v"] for e in usable], float),
            np.array(errs, float) if all(_num(x) and x > 0 for x in errs) else None,
            np.array(slopes, float) if all(_num(x) and x > 0 for x in slopes) else None,
            np.array(caps, float) if all(_num(x) and x > 0 for x in caps) else None,
            tuple(str(e.get("file", "")) for e in usable),
            tuple(str(e["channel"]) for e in usable) if all(e.get("channel") not in (None, "") for e in usable)
            else None,
            _definition(path, doc, usable), np.array(sys_errs, float) if split else None)
    table = read_table(path, ("temp_c", "breakdown_v"), ("breakdown_err_v",), text=("channel",))
    check_temperatures(table)
    err = table.columns.get("breakdown_err_v")
    if err is not None and np.any(err <= 0):
        i = int(np.argmax(err <= 0))
        _fail(path, int(table.lines[i]), table.names["breakdown_err_v"], "breakdown errors must be positive")
    return BreakdownScan(table.file, table.columns["temp_c"], table.columns["breakdown_v"], err,
                         sources=tuple(f"{table.file}:{n}" for n in table.lines),
                         channels=table.text.get("channel"))


def _definition(path, doc, entries):
    """The one breakdown definition of a calibrate JSON document (refused when entries mix definitions)."""
    found = {e.get("definition") for e in entries if e.get("definition")}
    if not found and isinstance(doc, dict):
        if "scans" in doc:
            found = {"gain_intercept"}
        elif isinstance(doc.get("method"), str):
            from compensator.calibration.iv import DEFINITIONS
            found = {DEFINITIONS.get(doc["method"])} - {None}
    if len(found) > 1:
        _fail(path, 0, "definition", f"the entries mix breakdown definitions ({', '.join(sorted(found))}); "
                                     "fit one definition at a time")
    return found.pop() if found else None


def _num(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


@dataclass(frozen=True)
class ManifestEntry:
    """One spectrum of a gain scan: ``file`` (resolved path), ``bias_v``, ``temp_c`` (or None), ``line``."""

    file: str
    bias_v: float
    temp_c: float | None
    line: int


def read_manifest(path) -> list:
    """Read a spectra manifest: CSV ``file,bias_v[,temp_c]``; relative paths are relative to the manifest.

    Returns
    -------
    list of ManifestEntry
    """
    records, _, delimiter = _csv_rows(path, "a header row file,bias_v[,temp_c]")
    reader = [(n, "") for n, _ in records]
    parsed = [cells for _, cells in records]
    header = [h.strip().lower() for h in parsed[0]]
    for need in ("file", "bias_v"):
        if need not in header:
            _fail(path, reader[0][0], need, f"missing column (the header has {', '.join(header)})")
    fi, bi = header.index("file"), header.index("bias_v")
    ti = header.index("temp_c") if "temp_c" in header else None
    base = Path(path).parent
    entries = []
    for (number, _), cells in zip(reader[1:], parsed[1:]):
        try:
            name = cells[fi].strip()
            bias = float(cells[bi].replace(",", ".") if delimiter != "," else cells[bi])
            temp = (float(cells[ti].replace(",", ".") if delimiter != "," else cells[ti])
                    if ti is not None and cells[ti].strip() else None)
        except (IndexError, ValueError):
            _fail(path, number, "", "expected a file name and numbers for bias_v/temp_c")
        if not name:
            _fail(path, number, "file", "empty file name")
        resolved = name if Path(name).is_absolute() else str(base / name)
        entries.append(ManifestEntry(resolved, bias, temp, number))
    if not entries:
        _fail(path, reader[0][0], "", "no spectra listed after the header")
    return entries
