"""Reading a logbook: read-only, so readers can analyse while a logger writes.

:func:`open_for_reading` opens the file read-only (``mode=ro``) and checks
that it is a logbook of a schema version this compensator reads;
:func:`read_run` returns a :class:`~compensator.logbook.records.RunSeries`
of numpy arrays (the dense columns read by two processes for long runs),
:func:`read_sessions` and :func:`read_events` the session and event records.

Every problem a user can cause (not a logbook, a newer schema, an empty run,
a locked file) is a :class:`LogbookError` naming the file and the reason;
the writer (:mod:`compensator.logbook.store`) raises the same errors.
"""

from __future__ import annotations

import concurrent.futures
import itertools
import math
import multiprocessing
import os
import sqlite3
import urllib.parse
from pathlib import Path

import numpy as np

from compensator.errors import InputError, Problem
from compensator.logbook.records import EventKind, EventRecord, RunSeries, SessionRecord, sample_times
from compensator.logbook.schema import APPLICATION_ID, SCHEMA_VERSION, SESSION_COLUMNS, TELEMETRY_COLUMNS

__all__ = ["BUSY_TIMEOUT_MS", "PARALLEL_READ_ROWS", "TELEMETRY_FIELDS", "LogbookError", "count_rows",
           "explain_sqlite_error", "open_for_reading", "read_events", "read_run", "read_sessions"]
#: Telemetry fields stored per row (the columns after ``session_id`` and ``host_time_unix_s``).
TELEMETRY_FIELDS = tuple(name for name, _ in TELEMETRY_COLUMNS[2:])

#: From this many rows on, :func:`read_run` reads the dense columns with two processes (when two cores exist).
PARALLEL_READ_ROWS = 400_000

#: How long a reader or writer waits for another connection's lock, milliseconds.
BUSY_TIMEOUT_MS = 2000

# SQLite has no NaN: a NULL read through ifnull(col, 9e999) arrives as +inf.
_NULL_AS_INF = "9e999"


class LogbookError(InputError):
    """A logbook file cannot be used: missing, not a logbook, newer schema, empty, locked."""

    def __init__(self, path, reason: str, key: str = ""):
        super().__init__(Problem(str(path), 0, key, reason))
        self.path = str(path)
        self.reason = reason


def explain_sqlite_error(path, exc: sqlite3.Error) -> LogbookError:
    """The one-line :class:`LogbookError` for an SQLite error on ``path`` (locked, not a database, ...).

    Parameters
    ----------
    path : str or path-like
    exc : sqlite3.Error
    """
    text = str(exc)
    if "locked" in text or "busy" in text:
        return LogbookError(path, "the database is locked by another program; try again when it has finished")
    if "not a database" in text or "malformed" in text or "encrypted" in text:
        return LogbookError(path, f"not a SQLite database ({text})")
    if "unable to open" in text:
        return LogbookError(path, "cannot open the database (check the path and permissions)")
    return LogbookError(path, f"SQLite error: {text}")


def _check_logbook(path, conn: sqlite3.Connection) -> int:
    """Return the schema version after checking that ``conn`` holds a logbook we can read."""
    app_id = conn.execute("PRAGMA application_id").fetchone()[0]
    version = conn.execute("PRAGMA user_version").fetchone()[0]
    if app_id != APPLICATION_ID:
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        if "logbook_info" not in tables:
            raise LogbookError(path, "not a compensator logbook (a SQLite file without the logbook tables)")
        raise LogbookError(path, f"not a compensator logbook (application id {app_id:#x})", key="application_id")
    if version > SCHEMA_VERSION:
        raise LogbookError(path, f"schema version {version} is newer than this compensator reads "
                                 f"({SCHEMA_VERSION}); upgrade compensator", key="schema_version")
    if version < 1:
        raise LogbookError(path, f"schema version {version} is not a valid logbook version", key="schema_version")
    return version


def open_for_reading(path) -> sqlite3.Connection:
    """Open a logbook read-only and check that it is one.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    sqlite3.Connection
        Read-only (``mode=ro``): nothing this connection does can change the file.

    Raises
    ------
    LogbookError
        No such file, not a SQLite database, not a logbook, a newer schema
        version, or locked by another program.
    """
    path = Path(path)
    if not path.exists():
        raise LogbookError(path, "no such file")
    if not path.is_file():
        raise LogbookError(path, "is not a file")
    uri = "file:" + urllib.parse.quote(str(path.resolve())) + "?mode=ro"
    try:
        conn = sqlite3.connect(uri, uri=True, isolation_level=None, check_same_thread=False)
    except sqlite3.Error as exc:
        raise explain_sqlite_error(path, exc) from None
    try:
        conn.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        _check_logbook(path, conn)
    except LogbookError:
        conn.close()
        raise
    except sqlite3.Error as exc:
        conn.close()
        raise explain_sqlite_error(path, exc) from None
    return conn


def _session_from_row(row, rows: int) -> SessionRecord:
    (session_id, started, unit, fw, board, proto, table_h, coef_h, serial, port, rate) = row
    return SessionRecord(session_id=session_id, started_unix_s=started, unit_id=unit, firmware_version=fw,
                         board_name=board, protocol_version=proto, table_sha256=table_h,
                         coefficients_sha256=coef_h, serial_number=serial, port=port,
                         rate_hz=math.nan if rate is None else float(rate), rows=rows)


def _read_sessions(conn) -> tuple[list[SessionRecord], list[tuple[int, int]]]:
    names = [n for n, _ in SESSION_COLUMNS if n != "compensator_version"]
    sessions, ranges = [], []
    for row in conn.execute(f"SELECT session_id, {', '.join(names)} FROM sessions ORDER BY session_id").fetchall():
        first, last, count = conn.execute(
            "SELECT min(row_id), max(row_id), count(*) FROM telemetry WHERE session_id = ?", (row[0],)).fetchone()
        sessions.append(_session_from_row(row, count))
        ranges.append((first, last) if count else (0, -1))
    return sessions, ranges


def _read_events(conn) -> list[EventRecord]:
    events = []
    for session_id, t, kind, faults, duration, detail in conn.execute(
            "SELECT session_id, host_time_unix_s, kind, faults, duration_s, detail FROM events ORDER BY event_id"):
        try:
            kind = EventKind(kind)
        except ValueError:
            continue  # a kind written by a newer compensator of the same schema: not ours to interpret
        events.append(EventRecord(session_id=session_id, time_unix_s=t, kind=kind, faults=int(faults),
                                  duration_s=math.nan if duration is None else float(duration), detail=detail))
    return events


def _dense(conn, expressions, count: int, dtype=float, rows: tuple[int, int] | None = None) -> np.ndarray:
    """All rows of one SQL expression (a string: 1-d result) or of several (a list: one row of the result each).

    ``rows`` limits the read to ``row_id`` from..to (inclusive); ``count`` is the number of rows read.
    """
    width = 1 if isinstance(expressions, str) else len(expressions)
    select = expressions if isinstance(expressions, str) else ", ".join(expressions)
    where = "" if rows is None else f" WHERE row_id BETWEEN {int(rows[0])} AND {int(rows[1])}"
    cursor = conn.execute(f"SELECT {select} FROM telemetry{where} ORDER BY row_id")
    flat = np.fromiter(itertools.chain.from_iterable(cursor), dtype=dtype, count=count * width)
    return flat if width == 1 else flat.reshape(count, width).T.copy()


def _dense_part(path: str, expressions: list, rows: tuple[int, int]) -> np.ndarray:
    """Worker of :func:`_dense_parallel`: its own read-only connection, one contiguous range of row ids."""
    conn = open_for_reading(path)
    try:
        return _dense(conn, expressions, rows[1] - rows[0] + 1, rows=rows)
    finally:
        conn.close()


def _dense_parallel(path, conn, expressions: list, first_id: int, last_id: int) -> np.ndarray:
    """Dense columns of contiguous row ids, read by two processes when the run is large and two cores exist.

    Rows are only ever appended, so the rows up to ``last_id`` of the caller's snapshot are the same
    for every connection.
    """
    count = last_id - first_id + 1
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    if count < PARALLEL_READ_ROWS or cores < 2 or "fork" not in multiprocessing.get_all_start_methods():
        return _dense(conn, expressions, count)
    middle = first_id + count // 2
    ranges = [(first_id, middle - 1), (middle, last_id)]
    with concurrent.futures.ProcessPoolExecutor(max_workers=2, mp_context=multiprocessing.get_context("fork")) as pool:
        parts = list(pool.map(_dense_part, [str(path)] * 2, [expressions] * 2, ranges))
    return np.concatenate(parts, axis=-1)


def read_sessions(path) -> list[SessionRecord]:
    """The sessions of a logbook, oldest first, with their row counts.

    Parameters
    ----------
    path : str or path-like
    """
    conn = open_for_reading(path)
    try:
        return _read_sessions(conn)[0]
    except sqlite3.Error as exc:
        raise explain_sqlite_error(path, exc) from None
    finally:
        conn.close()


def read_events(path) -> list[EventRecord]:
    """The events of a logbook in the order they were logged.

    Parameters
    ----------
    path : str or path-like
    """
    conn = open_for_reading(path)
    try:
        return _read_events(conn)
    except sqlite3.Error as exc:
        raise explain_sqlite_error(path, exc) from None
    finally:
        conn.close()


def count_rows(path) -> int:
    """Number of committed telemetry rows in a logbook.

    Parameters
    ----------
    path : str or path-like
    """
    conn = open_for_reading(path)
    try:
        return int(conn.execute("SELECT count(*) FROM telemetry").fetchone()[0])
    except sqlite3.Error as exc:
        raise explain_sqlite_error(path, exc) from None
    finally:
        conn.close()


def read_run(path) -> RunSeries:
    """Read the columns the drift analysis needs from a logbook.

    One consistent snapshot: the rows committed when the read began (a
    logger may go on writing meanwhile). Sample times come from the board's
    uptime anchored to the host clock (see
    :func:`~compensator.logbook.records.sample_times`).

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    RunSeries

    Raises
    ------
    LogbookError
        Any problem of :func:`open_for_reading`, or a run without telemetry.
    """
    conn = open_for_reading(path)
    try:
        conn.execute("BEGIN")  # one snapshot for every query below
        sessions, ranges = _read_sessions(conn)
        count = sum(s.rows for s in sessions)
        if count == 0:
            raise LogbookError(path, "the run holds no telemetry rows (empty run)", key="telemetry")
        first_id, last_id = conn.execute("SELECT min(row_id), max(row_id) FROM telemetry").fetchone()
        contiguous = last_id - first_id + 1 == count
        row_index = None if contiguous else _dense(conn, "row_id", count, np.int64)

        def index_of(row_ids):
            row_ids = np.asarray(row_ids, dtype=np.int64)
            return row_ids - first_id if contiguous else np.searchsorted(row_index, row_ids)

        # One query for the dense columns: a row tuple costs less than a query per column.
        has_measured = conn.execute("SELECT EXISTS (SELECT 1 FROM telemetry WHERE bias_measured_v IS NOT NULL)"
                                    ).fetchone()[0]
        columns = ["uptime_s", "sensor_temp_c", "bias_set_v", "overvoltage_target_v"]
        if has_measured:
            columns.append(f"ifnull(bias_measured_v, {_NULL_AS_INF})")
        dense = _dense_parallel(path, conn, columns, first_id, last_id) if contiguous else _dense(conn, columns, count)
        uptime_s, temp_c, bias_set_v, overvoltage_v = dense[:4]
        # Stretches of one board clock: each session, split where the board restarted (uptime went back).
        session_starts = [index_of(first) for first, last in ranges if last >= first]
        starts = np.union1d(np.asarray(session_starts, dtype=np.int64),
                            np.flatnonzero(np.diff(uptime_s) < 0) + 1).astype(np.int64)
        ids = (starts + first_id) if contiguous else row_index[starts]
        host_at = {}
        for chunk in range(0, ids.size, 500):
            part = [int(i) for i in ids[chunk:chunk + 500]]
            host_at.update(conn.execute(f"SELECT row_id, host_time_unix_s FROM telemetry WHERE row_id IN "
                                        f"({', '.join('?' * len(part))})", part).fetchall())
        time_unix_s = sample_times(uptime_s, starts, [host_at[int(i)] for i in ids])
        if has_measured:
            bias_measured_v = dense[4]
            bias_measured_v[np.isinf(bias_measured_v)] = np.nan
        else:
            bias_measured_v = np.full(count, np.nan)
        del dense
        faults = np.zeros(count, dtype=np.int64)
        rows = conn.execute("SELECT row_id, faults_live FROM telemetry WHERE faults_live != 0").fetchall()
        if rows:
            ids, bits = zip(*rows)
            faults[index_of(ids)] = bits
        gain = np.full(count, np.nan)
        gain_err = np.full(count, np.nan)
        rows = conn.execute(f"SELECT row_id, dark_peak_gain, ifnull(dark_peak_gain_err, {_NULL_AS_INF}) "
                            "FROM telemetry WHERE dark_peak_gain IS NOT NULL").fetchall()
        if rows:
            ids, g, e = (np.asarray(c) for c in zip(*rows))
            at = index_of(ids)
            gain[at] = g
            gain_err[at] = np.where(np.isinf(e), np.nan, e)
        session_index = np.zeros(count, dtype=np.int64)
        starts = sorted((first, i) for i, (first, last) in enumerate(ranges) if last >= first)
        disjoint = all(ranges[a][1] < ranges[b][0] for (_, a), (_, b) in zip(starts, starts[1:]))
        if disjoint:
            for first, i in starts:
                session_index[index_of(first):] = i
        else:  # rows of sessions interleave: read the column
            ids = _dense(conn, "session_id", count, np.int64)
            order = {s.session_id: i for i, s in enumerate(sessions)}
            session_index = np.vectorize(order.__getitem__, otypes=[np.int64])(ids)
        events = _read_events(conn)
        conn.execute("COMMIT")
    except sqlite3.Error as exc:
        raise explain_sqlite_error(path, exc) from None
    finally:
        conn.close()
    unit = next((s.unit_id for s in reversed(sessions) if s.rows), sessions[-1].unit_id)
    return RunSeries(source=str(path), unit_id=unit, time_unix_s=time_unix_s, temp_c=temp_c,
                     bias_set_v=bias_set_v, bias_measured_v=bias_measured_v, overvoltage_target_v=overvoltage_v,
                     faults_live=faults, dark_peak_gain=gain, dark_peak_gain_err=gain_err,
                     session_index=session_index, sessions=tuple(sessions), events=tuple(events))
