"""The logbook's SQLite schema: tables, columns (units in every name) and the schema version.

A logbook is one SQLite file. ``PRAGMA application_id`` marks it as ours and
``PRAGMA user_version`` holds :data:`SCHEMA_VERSION`; the ``logbook_info``
table says the same in words for people who open the file with another tool.
Rows are only ever appended.
"""

from __future__ import annotations

__all__ = ["SCHEMA_VERSION", "APPLICATION_ID", "TELEMETRY_COLUMNS", "SESSION_COLUMNS", "EVENT_COLUMNS",
           "create_statements"]

#: Version of the layout below. A reader refuses a file with a newer version.
SCHEMA_VERSION = 1

#: ``PRAGMA application_id`` of a logbook (the ASCII bytes "SiLg").
APPLICATION_ID = 0x53694C67

#: Telemetry columns, in table order, with their SQL types. The names are
#: the fields of :class:`compensator.link.messages.Telemetry` (a test keeps
#: them in step), after the two the logger adds.
TELEMETRY_COLUMNS = (
    ("session_id", "INTEGER NOT NULL REFERENCES sessions(session_id)"),
    ("host_time_unix_s", "REAL NOT NULL"),
    ("uptime_s", "REAL NOT NULL"),
    ("sensor_adc_code", "INTEGER NOT NULL"),
    ("sensor_temp_c", "REAL NOT NULL"),
    ("bias_set_v", "REAL NOT NULL"),
    ("bias_measured_v", "REAL"),
    ("sipm_current_a", "REAL"),
    ("cooler_current_a", "REAL"),
    ("hot_side_temp_c", "REAL"),
    ("overvoltage_target_v", "REAL NOT NULL"),
    ("faults_live", "INTEGER NOT NULL"),
    ("faults_latched", "INTEGER NOT NULL"),
    ("dark_peak_gain", "REAL"),
    ("dark_peak_gain_err", "REAL"),
)

SESSION_COLUMNS = (
    ("started_unix_s", "REAL NOT NULL"),
    ("unit_id", "TEXT NOT NULL"),
    ("firmware_version", "TEXT NOT NULL"),
    ("board_name", "TEXT NOT NULL"),
    ("protocol_version", "INTEGER NOT NULL"),
    ("table_sha256", "TEXT NOT NULL"),
    ("coefficients_sha256", "TEXT NOT NULL"),
    ("serial_number", "TEXT NOT NULL"),
    ("port", "TEXT NOT NULL"),
    ("rate_hz", "REAL"),
    ("compensator_version", "TEXT NOT NULL"),
)

EVENT_COLUMNS = (
    ("session_id", "INTEGER NOT NULL REFERENCES sessions(session_id)"),
    ("host_time_unix_s", "REAL NOT NULL"),
    ("kind", "TEXT NOT NULL"),
    ("faults", "INTEGER NOT NULL"),
    ("duration_s", "REAL"),
    ("detail", "TEXT NOT NULL"),
)


def _columns(columns) -> str:
    return ",\n    ".join(f"{name} {kind}" for name, kind in columns)


def create_statements() -> list[str]:
    """SQL that creates an empty logbook (run inside one transaction)."""
    return [
        "CREATE TABLE logbook_info (key TEXT PRIMARY KEY, value TEXT NOT NULL)",
        f"CREATE TABLE sessions (\n    session_id INTEGER PRIMARY KEY,\n    {_columns(SESSION_COLUMNS)}\n)",
        f"CREATE TABLE telemetry (\n    row_id INTEGER PRIMARY KEY,\n    {_columns(TELEMETRY_COLUMNS)}\n)",
        "CREATE INDEX telemetry_by_session ON telemetry(session_id)",
        f"CREATE TABLE events (\n    event_id INTEGER PRIMARY KEY,\n    {_columns(EVENT_COLUMNS)}\n)",
        "INSERT INTO logbook_info(key, value) VALUES ('format', 'compensator telemetry logbook'), "
        f"('schema_version', '{SCHEMA_VERSION}'), "
        "('time_base', 'host_time_unix_s: host clock, seconds since 1970-01-01 UTC'), "
        "('gain_unit', 'dark_peak_gain: electrons per photoelectron')",
        f"PRAGMA application_id = {APPLICATION_ID}",
        f"PRAGMA user_version = {SCHEMA_VERSION}",
    ]
