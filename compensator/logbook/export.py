"""Exports of logbooks for other tools: one CSV file, or a Parquet dataset partitioned by unit and day.

The Parquet dataset uses hive-style folders, ``unit_id=NAME/date_utc=YYYY-MM-DD/``,
so an existing engine (DuckDB locally, Dask or Spark on a cluster) reads a
whole fleet with one query. Both exports stream the rows in chunks, write to
a temporary name first and move the result into place at the end: an error
leaves nothing behind, and an existing output is never replaced unless asked.
"""

from __future__ import annotations

import csv
import os
import shutil
import sqlite3
import tempfile
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

from compensator.errors import InputError, Problem
from compensator.logbook.schema import TELEMETRY_COLUMNS
from compensator.logbook.store import explain_sqlite_error, open_for_reading

__all__ = ["ExportSummary", "EXPORT_COLUMNS", "export_csv", "export_parquet", "CHUNK_ROWS"]

#: Columns of an export, in order: the unit, then the telemetry table's columns.
EXPORT_COLUMNS = ("unit_id", "row_id") + tuple(name for name, _ in TELEMETRY_COLUMNS)
#: Rows read and written per chunk.
CHUNK_ROWS = 100_000
_INTEGER = {"row_id", "session_id", "sensor_adc_code", "faults_live", "faults_latched"}


@dataclass(frozen=True, kw_only=True)
class ExportSummary:
    """What an export wrote.

    Attributes
    ----------
    output_path : str
        The CSV file or the dataset folder.
    rows : int
        Telemetry rows written.
    logbooks : int
        Logbooks read.
    parquet_files : int
        Parquet files in the dataset (0 for CSV).
    partitions : int
        (unit, day) partitions of a Parquet dataset (0 for CSV).
    """

    output_path: str
    rows: int
    logbooks: int
    parquet_files: int
    partitions: int


def _chunks(path):
    conn = open_for_reading(path)
    try:
        conn.execute("BEGIN")
        cursor = conn.execute(
            "SELECT s.unit_id, t.row_id, " + ", ".join(f"t.{n}" for n, _ in TELEMETRY_COLUMNS)
            + " FROM telemetry AS t JOIN sessions AS s ON s.session_id = t.session_id ORDER BY t.row_id")
        while True:
            rows = cursor.fetchmany(CHUNK_ROWS)
            if not rows:
                break
            yield rows
        conn.execute("COMMIT")
    except sqlite3.Error as exc:
        raise explain_sqlite_error(path, exc) from None
    finally:
        conn.close()


def _refuse_existing(target: Path, overwrite: bool) -> None:
    if target.exists() and not overwrite:
        raise InputError(Problem(str(target), 0, "", "already exists; not overwriting (use --force to replace it)"))
    if not target.parent.is_dir():
        raise InputError(Problem(str(target), 0, "", "its directory does not exist"))


def _check_all(paths) -> None:
    problems = []
    for path in paths:
        try:
            open_for_reading(path).close()
        except InputError as exc:
            problems.extend(exc.problems)
    if problems:
        raise InputError(problems)


def export_csv(paths, out_path, *, overwrite: bool = False) -> ExportSummary:
    """Write the telemetry of one or more logbooks to one CSV file (header row, units in the names).

    Parameters
    ----------
    paths : sequence of str or path-like
        Logbooks, written one after the other.
    out_path : str or path-like
        The CSV file.
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    ExportSummary

    Raises
    ------
    InputError
        A logbook cannot be read, or the output exists (and not ``overwrite``).
    """
    target = Path(out_path)
    _refuse_existing(target, overwrite)
    _check_all(paths)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    rows = 0
    try:
        with os.fdopen(fd, "w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle, lineterminator="\n")
            writer.writerow(EXPORT_COLUMNS)
            for path in paths:
                for chunk in _chunks(path):
                    writer.writerows(("" if v is None else repr(v) if isinstance(v, float) else v for v in row)
                                     for row in chunk)
                    rows += len(chunk)
            handle.flush()
            os.fsync(handle.fileno())
        if overwrite:
            os.replace(tmp, target)
        else:
            os.link(tmp, target)
            os.unlink(tmp)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return ExportSummary(output_path=str(target), rows=rows, logbooks=len(paths), parquet_files=0, partitions=0)


def _arrow():
    try:
        import pyarrow
        import pyarrow.dataset  # noqa: F401
    except ImportError:
        raise InputError(Problem("<command line>", 0, "--parquet", (
            "needs pyarrow, an optional extra: pip install 'compensator[parquet]'"))) from None
    return pyarrow


def _day_utc(t: float) -> str:
    return datetime.fromtimestamp(t, tz=timezone.utc).strftime("%Y-%m-%d")


def export_parquet(paths, directory, *, overwrite: bool = False) -> ExportSummary:
    """Write the telemetry of one or more logbooks as a Parquet dataset partitioned by unit and day.

    Parameters
    ----------
    paths : sequence of str or path-like
        Logbooks.
    directory : str or path-like
        The dataset folder (``unit_id=NAME/date_utc=YYYY-MM-DD/*.parquet``
        inside); must not exist unless ``overwrite``.
    overwrite : bool
        Replace an existing folder.

    Returns
    -------
    ExportSummary

    Raises
    ------
    InputError
        pyarrow is missing, a logbook cannot be read, or the folder exists.
    """
    pa = _arrow()
    import pyarrow.dataset as ds

    target = Path(directory)
    _refuse_existing(target, overwrite)
    _check_all(paths)
    types = {name: pa.int64() if name in _INTEGER else pa.float64() for name in EXPORT_COLUMNS[1:]}
    schema = pa.schema([("unit_id", pa.string())] + [(n, types[n]) for n in EXPORT_COLUMNS[1:]]
                       + [("date_utc", pa.string())])
    partitioning = ds.partitioning(pa.schema([("unit_id", pa.string()), ("date_utc", pa.string())]),
                                   flavor="hive")
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent))
    rows = files = 0
    partitions = set()
    try:
        for k, path in enumerate(paths):
            for c, chunk in enumerate(_chunks(path)):
                columns = list(zip(*chunk))
                days = [_day_utc(t) for t in columns[EXPORT_COLUMNS.index("host_time_unix_s")]]
                arrays = [pa.array(columns[0], pa.string())]
                arrays += [pa.array(col, types[name]) for name, col in zip(EXPORT_COLUMNS[1:], columns[1:])]
                arrays.append(pa.array(days, pa.string()))
                table = pa.Table.from_arrays(arrays, schema=schema)
                written = []
                ds.write_dataset(table, tmp, format="parquet", partitioning=partitioning,
                                 basename_template=f"logbook{k}-chunk{c}-{{i}}.parquet",
                                 existing_data_behavior="overwrite_or_ignore",
                                 file_visitor=lambda f: written.append(f.path))
                files += len(written)
                partitions.update(zip(columns[0], days))
                rows += len(chunk)
        if target.exists():
            shutil.rmtree(target)
        os.rename(tmp, target)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return ExportSummary(output_path=str(target), rows=rows, logbooks=len(paths), parquet_files=files,
                         partitions=len(partitions))
