"""The logbook file: an append-only SQLite store of telemetry, crash-safe.

Writing
    :class:`LogbookWriter` opens (or creates) the file in WAL mode with
    ``synchronous=FULL``, takes an exclusive advisory lock so that one logger
    writes at a time, and commits its buffered rows at least every
    ``commit_interval_s``. A crash or a power cut loses at most the rows of
    the last open transaction; every committed row survives and the file
    stays consistent (SQLite's write-ahead log).

Reading
    :func:`read_run` opens the file read-only (it never writes, so readers
    can analyse while a logger writes) and returns a
    :class:`~compensator.logbook.records.RunSeries` of numpy arrays. It and
    the other reading functions live in :mod:`compensator.logbook.reader`
    and are re-exported here under their old import paths.

Every problem a user can cause (not a logbook, a newer schema, an empty run,
a locked file) is a :class:`LogbookError` naming the file and the reason.
"""

from __future__ import annotations

import fcntl
import math
import operator
import os
import sqlite3
import threading
import time
from pathlib import Path

from compensator import __version__
from compensator.logbook.reader import (
    BUSY_TIMEOUT_MS,
    PARALLEL_READ_ROWS,
    TELEMETRY_FIELDS,
    LogbookError,
    _check_logbook,
    count_rows,
    explain_sqlite_error,
    open_for_reading,
    read_events,
    read_run,
    read_sessions,
)
from compensator.logbook.records import EventKind
from compensator.logbook.schema import SESSION_COLUMNS, TELEMETRY_COLUMNS, create_statements

__all__ = ["LogbookError", "LogbookWriter", "explain_sqlite_error", "open_for_reading", "read_run", "read_sessions",
           "read_events", "count_rows", "TELEMETRY_FIELDS", "BUSY_TIMEOUT_MS", "PARALLEL_READ_ROWS"]


_ROW = operator.attrgetter(*TELEMETRY_FIELDS)
#: Positions (in ``_ROW``'s order) of the REAL columns that may not be NULL (SQLite stores NaN as NULL).
_REQUIRED_REAL = tuple((i, name) for i, name in enumerate(TELEMETRY_FIELDS)
                       if dict(TELEMETRY_COLUMNS)[name].startswith("REAL NOT NULL"))
_INSERT_TELEMETRY = (f"INSERT INTO telemetry ({', '.join(n for n, _ in TELEMETRY_COLUMNS)}) "
                     f"VALUES ({', '.join('?' * len(TELEMETRY_COLUMNS))})")
_INSERT_EVENT = ("INSERT INTO events (session_id, host_time_unix_s, kind, faults, duration_s, detail) "
                 "VALUES (?, ?, ?, ?, ?, ?)")


class LogbookWriter:
    """Append telemetry to a logbook, committing in batches at least every ``commit_interval_s``.

    Parameters
    ----------
    path : str or path-like
        Created (with the schema) when missing; otherwise checked and
        appended to. Its directory must exist.
    commit_interval_s : float
        Longest time a row waits in memory before it is committed, seconds.
        Rows are committed when an :meth:`append` or :meth:`poll` finds the
        oldest buffered row this old (so call :meth:`poll` when no data comes).
    clock : callable
        Monotonic clock in seconds (injected by tests).

    Raises
    ------
    LogbookError
        The file is not a logbook, has a newer schema, is locked, or another
        logger writes to it.

    Notes
    -----
    WAL journal and ``synchronous=FULL``: a committed transaction is on disk
    before :meth:`flush` returns, so a crash or power loss loses at most the
    rows still buffered (at most ``commit_interval_s`` of data).
    """

    def __init__(self, path, *, commit_interval_s: float = 1.0, clock=time.monotonic):
        self.path = Path(path)
        self.commit_interval_s = float(commit_interval_s)
        self._clock = clock
        self._rows: list[tuple] = []
        self._events: list[tuple] = []
        self._oldest_s: float | None = None
        self.session_id: int | None = None
        self._session_open = False
        self.rows_committed = 0
        self._lock_fd = None
        self._conn = None
        self._mutex = threading.RLock()
        self._ticker = None
        self._ticking = threading.Event()
        existed = self.path.exists()
        if existed and not self.path.is_file():
            raise LogbookError(self.path, "is not a file")
        if not existed and not self.path.parent.is_dir():
            raise LogbookError(self.path, "its directory does not exist")
        try:
            self._lock_fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            fcntl.flock(self._lock_fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(self._lock_fd)
            self._lock_fd = None
            raise LogbookError(self.path, "another logger is writing to this file") from None
        except OSError as exc:
            self._close_lock()
            raise LogbookError(self.path, f"cannot open for writing: {exc.strerror or exc}") from None
        try:
            self._conn = sqlite3.connect(str(self.path), isolation_level=None, check_same_thread=False)
            self._conn.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
            fresh = self._conn.execute("SELECT count(*) FROM sqlite_master").fetchone()[0] == 0
            if fresh and os.path.getsize(self.path) == 0:
                self._create()
            else:
                _check_logbook(self.path, self._conn)
            mode = self._conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
            if mode.lower() != "wal":
                raise LogbookError(self.path, f"cannot switch to write-ahead logging (journal mode stays {mode})")
            self._conn.execute("PRAGMA synchronous = FULL")
            self.rows_committed = self._conn.execute("SELECT count(*) FROM telemetry").fetchone()[0]
        except (LogbookError, sqlite3.Error) as exc:
            self.close(_abandon=True)
            if not existed:
                self.path.unlink(missing_ok=True)
            if isinstance(exc, sqlite3.Error):
                raise explain_sqlite_error(self.path, exc) from None
            raise

    def _create(self) -> None:
        self._conn.execute("BEGIN IMMEDIATE")
        for statement in create_statements():
            self._conn.execute(statement)
        self._conn.execute("COMMIT")

    def _close_lock(self) -> None:
        if self._lock_fd is not None:
            os.close(self._lock_fd)  # only after the SQLite connection is closed: POSIX locks are per process
            self._lock_fd = None

    def __enter__(self):
        return self

    def __exit__(self, *exc_info):
        self.close()

    @property
    def rows_buffered(self) -> int:
        """Rows appended but not yet committed."""
        return len(self._rows)

    def start_session(self, identity, *, unit_id: str, port: str, rate_hz: float | None,
                      started_unix_s: float) -> int:
        """End the open session (if any), commit buffered rows and open a new session; return its id.

        Parameters
        ----------
        identity : compensator.link.messages.Identity
            What the board said about itself.
        unit_id : str
            Name of the instrument in fleet views ("" -> the serial number,
            else the file name's stem).
        port : str
            Where the logger listens.
        rate_hz : float or None
            The telemetry rate asked for (None: the board's own).
        started_unix_s : float
            Host clock, seconds since 1970 (UTC).
        """
        if self._session_open:
            self.end_session(host_time_unix_s=started_unix_s, detail="new session")
        self.flush()
        unit_id = unit_id or identity.serial_number or self.path.stem
        values = (started_unix_s, unit_id, identity.firmware_version, identity.board_name,
                  int(identity.protocol_version), identity.table_sha256, identity.coefficients_sha256,
                  identity.serial_number, port, rate_hz, __version__)
        names = ", ".join(n for n, _ in SESSION_COLUMNS)
        try:
            self._conn.execute("BEGIN IMMEDIATE")
            cursor = self._conn.execute(f"INSERT INTO sessions ({names}) VALUES ({', '.join('?' * len(values))})",
                                        values)
            self.session_id = cursor.lastrowid
            self._session_open = True
            self._conn.execute(_INSERT_EVENT, (self.session_id, started_unix_s, EventKind.SESSION_START.value, 0,
                                               None, f"port {port}"))
            self._conn.execute("COMMIT")
        except sqlite3.Error as exc:
            self._rollback()
            raise explain_sqlite_error(self.path, exc) from None
        return self.session_id

    def append(self, telemetry, *, host_time_unix_s: float) -> None:
        """Buffer one telemetry record; commit if the oldest buffered row is due.

        A record with a non-finite value in a column that needs one (uptime,
        temperature, bias set, overvoltage target) is not stored; a
        ``sample_rejected`` event says so, and the batch goes on.

        Parameters
        ----------
        telemetry : compensator.link.messages.Telemetry
        host_time_unix_s : float
            Host clock when the record arrived, seconds since 1970 (UTC).
        """
        if self.session_id is None:
            raise RuntimeError("start_session() before append()")
        values = _ROW(telemetry)
        bad = [name for i, name in _REQUIRED_REAL if not math.isfinite(values[i])]
        if bad or not math.isfinite(host_time_unix_s):
            self.record_event(EventKind.SAMPLE_REJECTED, host_time_unix_s=host_time_unix_s
                              if math.isfinite(host_time_unix_s) else time.time(),
                              detail="non-finite " + ", ".join(bad or ["host_time_unix_s"]))
            return
        with self._mutex:
            self._rows.append((self.session_id, host_time_unix_s, *values))
            self._note_buffered()

    def append_rows(self, rows) -> None:
        """Buffer rows already in column order (``TELEMETRY_COLUMNS`` after ``session_id``).

        Parameters
        ----------
        rows : iterable of tuple
            ``(host_time_unix_s, uptime_s, ..., dark_peak_gain_err)`` each.
        """
        if self.session_id is None:
            raise RuntimeError("start_session() before append_rows()")
        sid = self.session_id
        with self._mutex:
            self._rows.extend((sid, *row) for row in rows)
            self._note_buffered()

    def record_event(self, kind: EventKind, *, host_time_unix_s: float, faults: int = 0,
                     duration_s: float | None = None, detail: str = "") -> None:
        """Buffer one event; it is committed with the next batch.

        Parameters
        ----------
        kind : EventKind
        host_time_unix_s : float
            Host clock of the event, seconds since 1970 (UTC).
        faults : int
            Fault bits concerned.
        duration_s : float, optional
            Length of an outage or gap, seconds.
        detail : str
            Free text.
        """
        if self.session_id is None:
            raise RuntimeError("start_session() before record_event()")
        with self._mutex:
            self._events.append((self.session_id, host_time_unix_s, EventKind(kind).value, int(faults),
                                 duration_s, detail))
            self._note_buffered()

    def _note_buffered(self) -> None:
        now = self._clock()
        if self._oldest_s is None:
            self._oldest_s = now
        elif now - self._oldest_s >= self.commit_interval_s:
            self.flush()

    def poll(self) -> bool:
        """Commit if the oldest buffered row has waited ``commit_interval_s``; return whether it did."""
        with self._mutex:
            if self._oldest_s is not None and self._clock() - self._oldest_s >= self.commit_interval_s:
                self.flush()
                return True
        return False

    def start_autocommit(self) -> None:
        """Call :meth:`poll` from a background thread four times per ``commit_interval_s``.

        So buffered rows are committed on time even when no new row arrives.
        Stopped by :meth:`close`.
        """
        if self._ticker is not None:
            return

        def tick():
            while not self._ticking.wait(self.commit_interval_s / 4.0):
                try:
                    self.poll()
                except LogbookError:
                    return  # the foreground sees the same error on its next flush

        self._ticker = threading.Thread(target=tick, name="logbook-autocommit", daemon=True)
        self._ticker.start()

    def flush(self) -> int:
        """Commit everything buffered now, in one transaction; return the rows committed."""
        with self._mutex:
            if not self._rows and not self._events:
                self._oldest_s = None
                return 0
            rows, events = self._rows, self._events
            try:
                self._conn.execute("BEGIN IMMEDIATE")
                self._conn.executemany(_INSERT_TELEMETRY, rows)
                self._conn.executemany(_INSERT_EVENT, events)
                self._conn.execute("COMMIT")
            except sqlite3.Error as exc:
                self._rollback()
                raise explain_sqlite_error(self.path, exc) from None
            self._rows, self._events, self._oldest_s = [], [], None
            self.rows_committed += len(rows)
            return len(rows)

    def _rollback(self) -> None:
        try:
            self._conn.execute("ROLLBACK")
        except sqlite3.Error:
            pass

    def end_session(self, *, host_time_unix_s: float, detail: str = "") -> None:
        """Record an orderly end of the open session (if any) and commit.

        Parameters
        ----------
        host_time_unix_s : float
            Host clock, seconds since 1970 (UTC).
        detail : str
            Why it ended (e.g. "duration reached", "interrupted").
        """
        if self._session_open:
            self.record_event(EventKind.SESSION_END, host_time_unix_s=host_time_unix_s, detail=detail)
            self._session_open = False
        self.flush()

    def close(self, _abandon: bool = False) -> None:
        """End the open session, commit what is buffered (unless abandoning) and close the file."""
        if self._ticker is not None:
            self._ticking.set()
            self._ticker.join()
            self._ticker = None
        if self._conn is not None:
            try:
                if not _abandon:
                    self.end_session(host_time_unix_s=time.time(), detail="closed")
            finally:
                self._conn.close()
                self._conn = None
        self._close_lock()
