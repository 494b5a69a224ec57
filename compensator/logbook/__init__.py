"""Append-only, crash-safe telemetry logbook on SQLite.

``schema`` (tables, units in every column, schema version), ``records``
(what readers get back), ``store`` (the writer), ``reader`` (read-only access), ``logger``
(telemetry source -> logbook, with faults, gaps and reconnects),
``export`` (CSV and Parquet).
"""

from compensator.logbook.demo import run_rows, write_run
from compensator.logbook.logger import LoggerResult, LoggerStatus, missed_gap_s, run_logger
from compensator.logbook.records import EventKind, EventRecord, RunSeries, SessionRecord, sample_times
from compensator.logbook.schema import APPLICATION_ID, SCHEMA_VERSION, TELEMETRY_COLUMNS
from compensator.logbook.store import (
    TELEMETRY_FIELDS,
    LogbookError,
    LogbookWriter,
    count_rows,
    open_for_reading,
    read_events,
    read_run,
    read_sessions,
)

__all__ = [
    "run_rows", "write_run",
    "LoggerResult", "LoggerStatus", "missed_gap_s", "run_logger",
    "EventKind", "EventRecord", "RunSeries", "SessionRecord", "sample_times",
    "APPLICATION_ID", "SCHEMA_VERSION", "TELEMETRY_COLUMNS",
    "TELEMETRY_FIELDS", "LogbookError", "LogbookWriter", "count_rows", "open_for_reading", "read_events",
    "read_run", "read_sessions",
]
