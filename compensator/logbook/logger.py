"""The logger: telemetry from a board into a logbook, through disconnects, faults and crashes.

The source is anything with the narrow interface of the link's board client:

``identify()``
    returns an :class:`~compensator.link.messages.Identity`;
``stream(duration_s=...)``
    yields :class:`~compensator.link.messages.Telemetry` records and link
    events (objects with ``kind`` ``"disconnected"`` or ``"reconnected"``,
    ``time_s``, ``gap_s`` and ``detail``), reconnecting by itself;
``set_telemetry_period(period_s)`` (optional)
    asks the board for a telemetry rate.

The logger stamps each record with the host clock, commits at least every
second (a background thread commits even when nothing arrives), records
fault changes, link outages and missed samples as events, opens a new
session when the board comes back with another identity, and reports its
progress through a callback.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

from compensator.firmware.faults import fault_names
from compensator.link.messages import Telemetry
from compensator.logbook.records import EventKind
from compensator.logbook.store import LogbookWriter

__all__ = ["LoggerStatus", "LoggerResult", "run_logger", "missed_gap_s"]


@dataclass(frozen=True, kw_only=True)
class LoggerStatus:
    """Progress of a running logger (for the live status line).

    Attributes
    ----------
    elapsed_s : float
        Since the logger started, seconds.
    rows : int
        Rows appended in this run (committed or about to be).
    rows_committed : int
        Rows committed in the whole file.
    rate_hz : float
        Rows per second since the start.
    temp_c, bias_v : float
        Temperature and bias of the last sample (nan before the first).
    faults : tuple of str
        Live faults of the last sample.
    link_up : bool
        False between a disconnect and the reconnect.
    disconnects : int
    """

    elapsed_s: float
    rows: int
    rows_committed: int
    rate_hz: float
    temp_c: float
    bias_v: float
    faults: tuple
    link_up: bool
    disconnects: int


@dataclass(frozen=True, kw_only=True)
class LoggerResult:
    """What a logger run did.

    Attributes
    ----------
    logbook : str
        The logbook file.
    session_ids : tuple of int
        Sessions opened by this run.
    rows : int
        Rows written by this run.
    rows_total : int
        Rows in the file afterwards.
    duration_s : float
    disconnects : int
    missed_gaps : int
        Gaps in the board's own clock longer than three periods.
    fault_changes : int
        Fault raised or cleared events.
    interrupted : bool
        Stopped by the user (Ctrl-C or SIGTERM) rather than by ``duration_s``.
    """

    logbook: str
    session_ids: tuple
    rows: int
    rows_total: int
    duration_s: float
    disconnects: int
    missed_gaps: int
    fault_changes: int
    interrupted: bool


def missed_gap_s(previous_uptime_s: float, uptime_s: float, period_s: float) -> float:
    """Length of the gap between two samples by the board's clock, or 0 when none was missed.

    A gap is an interval longer than three periods (and longer than one
    period plus a second). A clock that went back (the board restarted)
    counts as a gap of unknown length (``inf``).

    Parameters
    ----------
    previous_uptime_s, uptime_s : float
        Board uptime of consecutive samples, seconds.
    period_s : float
        Expected telemetry period, seconds.
    """
    step = uptime_s - previous_uptime_s
    if step < 0:
        return float("inf")
    return step if step > max(3.0 * period_s, period_s + 1.0) else 0.0


def run_logger(source, path, *, port: str, duration_s: float | None = None, rate_hz: float | None = None,
               unit_id: str = "", commit_interval_s: float = 1.0, status=None, status_interval_s: float = 0.5,
               wall_clock=time.time) -> LoggerResult:
    """Stream telemetry from ``source`` into the logbook at ``path`` until ``duration_s`` or Ctrl-C.

    Parameters
    ----------
    source : object
        Board client (see the module's description of the interface).
    path : str or path-like
        The logbook (created when missing, appended to otherwise).
    port : str
        Where the source listens, stored with the session.
    duration_s : float, optional
        Stop after this long (default: until interrupted).
    rate_hz : float, optional
        Telemetry rate to ask the board for (default: the board's own).
    unit_id : str
        Name of the instrument (default: the board's serial number).
    commit_interval_s : float
        Longest time a row waits before it is committed, seconds.
    status : callable, optional
        Called with a :class:`LoggerStatus` about every ``status_interval_s``.
    status_interval_s : float
        Seconds between status calls.
    wall_clock : callable
        Host clock, seconds since 1970 (injected by tests).

    Returns
    -------
    LoggerResult

    Raises
    ------
    LogbookError
        The file cannot be written (not a logbook, newer schema, another logger on it).
    LinkError
        The board could not be reached at the start.
    """
    started = time.monotonic()
    writer = LogbookWriter(path, commit_interval_s=commit_interval_s)
    sessions, rows, disconnects, missed, fault_changes = [], 0, 0, 0, 0
    interrupted = False
    try:
        identity = source.identify()
        if rate_hz:
            source.set_telemetry_period(1.0 / rate_hz)
        sessions.append(writer.start_session(identity, unit_id=unit_id, port=port, rate_hz=rate_hz,
                                             started_unix_s=wall_clock()))
        writer.start_autocommit()
        period_s = 1.0 / rate_hz if rate_hz else None
        previous = None
        faults = 0
        link_up = True
        last_status = 0.0
        try:
            for item in source.stream(duration_s=duration_s):
                now = wall_clock()
                if isinstance(item, Telemetry):
                    if previous is not None:
                        period = period_s or max(item.uptime_s - previous.uptime_s, 1e-3)
                        gap = missed_gap_s(previous.uptime_s, item.uptime_s, period)
                        if gap:
                            missed += 1
                            writer.record_event(
                                EventKind.SAMPLES_MISSED, host_time_unix_s=now,
                                duration_s=None if gap == float("inf") else gap,
                                detail="board clock went back (board restarted)" if gap == float("inf")
                                else f"board clock jumped {gap:.3f} s")
                    if item.faults_live != faults:
                        raised, cleared = item.faults_live & ~faults, faults & ~item.faults_live
                        for kind, bits in ((EventKind.FAULT_RAISED, raised), (EventKind.FAULT_CLEARED, cleared)):
                            if bits:
                                fault_changes += 1
                                writer.record_event(kind, host_time_unix_s=now, faults=bits,
                                                    detail=", ".join(fault_names(bits)))
                        faults = item.faults_live
                    writer.append(item, host_time_unix_s=now)
                    rows += 1
                    previous = item
                elif getattr(item, "kind", "") == "disconnected":
                    disconnects += 1
                    link_up = False
                    writer.record_event(EventKind.LINK_LOST, host_time_unix_s=getattr(item, "time_s", now),
                                        detail=str(getattr(item, "detail", "")))
                    writer.flush()
                elif getattr(item, "kind", "") == "reconnected":
                    link_up = True
                    writer.record_event(EventKind.LINK_RESTORED, host_time_unix_s=getattr(item, "time_s", now),
                                        duration_s=float(getattr(item, "gap_s", 0.0)),
                                        detail=str(getattr(item, "detail", "")))
                    fresh = source.identify()
                    if fresh != identity:
                        identity = fresh
                        sessions.append(writer.start_session(identity, unit_id=unit_id, port=port,
                                                             rate_hz=rate_hz, started_unix_s=wall_clock()))
                        previous = None
                    if rate_hz:
                        source.set_telemetry_period(1.0 / rate_hz)
                if status is not None and time.monotonic() - last_status >= status_interval_s:
                    last_status = time.monotonic()
                    elapsed = last_status - started
                    status(LoggerStatus(
                        elapsed_s=elapsed, rows=rows, rows_committed=writer.rows_committed,
                        rate_hz=rows / elapsed if elapsed > 0 else 0.0,
                        temp_c=previous.sensor_temp_c if previous else float("nan"),
                        bias_v=(previous.bias_measured_v if previous and previous.bias_measured_v is not None
                                else previous.bias_set_v if previous else float("nan")),
                        faults=tuple(fault_names(faults)), link_up=link_up, disconnects=disconnects))
        except KeyboardInterrupt:
            interrupted = True
        writer.end_session(host_time_unix_s=wall_clock(),
                           detail="interrupted" if interrupted else "duration reached")
        total = writer.rows_committed
    finally:
        writer.close()
    return LoggerResult(logbook=str(path), session_ids=tuple(sessions), rows=rows, rows_total=total,
                        duration_s=time.monotonic() - started, disconnects=disconnects, missed_gaps=missed,
                        fault_changes=fault_changes, interrupted=interrupted)
