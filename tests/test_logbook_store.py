"""The logbook file: schema, round trip, sessions, concurrent readers, and every kind of bad file."""

from __future__ import annotations

import dataclasses
import hashlib
import sqlite3
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from compensator.drift.synthetic import synthetic_run
from compensator.link.messages import Identity, Telemetry
from compensator.logbook import (
    APPLICATION_ID,
    SCHEMA_VERSION,
    TELEMETRY_COLUMNS,
    EventKind,
    LogbookError,
    LogbookWriter,
    count_rows,
    read_events,
    read_run,
    read_sessions,
    write_run,
)

IDENTITY = Identity(firmware_version="2.1.0", board_name="hut-board-ntc", protocol_version=1,
                    table_sha256="ab" * 32, coefficients_sha256="cd" * 32, serial_number="SN-0042")


def _telemetry(k, **changes):
    base = dict(uptime_s=float(k), sensor_adc_code=30000 + k, sensor_temp_c=5.0 + 0.01 * k, bias_set_v=27.1,
                bias_measured_v=27.1 - 1e-4 * k, sipm_current_a=2e-6, cooler_current_a=None, hot_side_temp_c=None,
                overvoltage_target_v=3.0, faults_live=0, faults_latched=0,
                dark_peak_gain=1.6e6 if k % 2 == 0 else None, dark_peak_gain_err=3e3 if k % 2 == 0 else None)
    base.update(changes)
    return Telemetry(**base)


class Clock:
    def __init__(self):
        self.now = 0.0

    def __call__(self):
        return self.now


def _digest(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_columns_are_the_telemetry_fields_with_units_in_their_names():
    names = [n for n, _ in TELEMETRY_COLUMNS]
    assert names[:2] == ["session_id", "host_time_unix_s"]
    assert names[2:] == [f.name for f in dataclasses.fields(Telemetry)]


def test_round_trip_sessions_events_and_pragmas(tmp_path):
    path = tmp_path / "run.sqlite"
    clock = Clock()
    with LogbookWriter(path, clock=clock) as writer:
        writer.start_session(IDENTITY, unit_id="", port="/dev/ttyACM0", rate_hz=2.0, started_unix_s=1000.0)
        for k in range(10):
            writer.append(_telemetry(k), host_time_unix_s=1000.0 + 0.5 * k)
        writer.record_event(EventKind.FAULT_RAISED, host_time_unix_s=1003.0, faults=5, detail="x")
    with LogbookWriter(path, clock=clock) as writer:                # a restarted logger appends a session
        assert writer.rows_committed == 10
        writer.start_session(IDENTITY, unit_id="hut-9", port="/dev/ttyACM1", rate_hz=None, started_unix_s=2000.0)
        writer.append(_telemetry(0, faults_live=8), host_time_unix_s=2000.0)
    run = read_run(path)
    assert run.samples == 11
    # Sample times: host clock at the session's first sample plus the board's uptime since (1 s per sample here).
    assert run.time_unix_s[:3].tolist() == [1000.0, 1001.0, 1002.0] and run.time_unix_s[10] == 2000.0
    assert run.bias_measured_v[3] == pytest.approx(27.1 - 3e-4, abs=1e-12)
    assert np.isnan(run.dark_peak_gain[1]) and run.dark_peak_gain[2] == 1.6e6
    assert run.faults_live.tolist() == [0] * 10 + [8]
    assert run.session_index.tolist() == [0] * 10 + [1]
    sessions = read_sessions(path)
    assert [(s.session_id, s.unit_id, s.rows) for s in sessions] == [(1, "SN-0042", 10), (2, "hut-9", 1)]
    assert sessions[0].table_sha256 == "ab" * 32 and np.isnan(sessions[1].rate_hz)
    kinds = [(e.session_id, e.kind) for e in read_events(path)]
    assert kinds == [(1, EventKind.SESSION_START), (1, EventKind.FAULT_RAISED), (1, EventKind.SESSION_END),
                     (2, EventKind.SESSION_START), (2, EventKind.SESSION_END)]
    conn = sqlite3.connect(path)
    assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
    assert conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    assert dict(conn.execute("SELECT key, value FROM logbook_info"))["schema_version"] == str(SCHEMA_VERSION)
    conn.close()


def test_rows_are_committed_once_the_oldest_has_waited_the_interval(tmp_path):
    path = tmp_path / "run.sqlite"
    clock = Clock()
    writer = LogbookWriter(path, commit_interval_s=1.0, clock=clock)
    writer.start_session(IDENTITY, unit_id="u", port="p", rate_hz=10.0, started_unix_s=0.0)
    for k in range(9):                      # 0.0 .. 0.8 s: nothing due yet
        clock.now = 0.1 * k
        writer.append(_telemetry(k), host_time_unix_s=clock.now)
    assert count_rows(path) == 0 and writer.rows_buffered == 9
    clock.now = 0.99
    assert not writer.poll()
    clock.now = 1.0
    writer.append(_telemetry(9), host_time_unix_s=1.0)
    assert count_rows(path) == 10 and writer.rows_buffered == 0
    clock.now = 1.5
    writer.append(_telemetry(10), host_time_unix_s=1.5)
    clock.now = 2.5
    assert writer.poll() and count_rows(path) == 11
    writer.close()


def test_reader_sees_committed_rows_while_the_writer_holds_more(tmp_path):
    path = tmp_path / "run.sqlite"
    clock = Clock()
    writer = LogbookWriter(path, clock=clock)
    writer.start_session(IDENTITY, unit_id="u", port="p", rate_hz=1.0, started_unix_s=0.0)
    writer.append_rows((float(k), float(k), 1, 5.0, 27.0, None, None, None, None, 3.0, 0, 0, None, None)
                       for k in range(100))
    writer.flush()
    writer.append(_telemetry(1), host_time_unix_s=200.0)          # buffered, uncommitted
    assert read_run(path).samples == 100
    writer.close()
    assert read_run(path).samples == 101


def test_sample_times_follow_the_board_clock_and_restarts(tmp_path):
    # Telemetry arriving in bursts on the host (three samples at once) keeps the board's exact spacing;
    # a board restart (uptime back to 0) starts a new stretch anchored at its host time.
    path = tmp_path / "bursty.sqlite"
    with LogbookWriter(path) as writer:
        writer.start_session(IDENTITY, unit_id="u", port="p", rate_hz=10.0, started_unix_s=500.0)
        for k, host in enumerate([500.0, 500.31, 500.31, 500.31, 500.6, 500.6]):
            writer.append(_telemetry(0, uptime_s=7.0 + 0.1 * k), host_time_unix_s=host)
        for k in range(3):
            writer.append(_telemetry(0, uptime_s=0.1 * k), host_time_unix_s=900.0 + 0.1 * k)
    run = read_run(path)
    expected = [500.0, 500.1, 500.2, 500.3, 500.4, 500.5, 900.0, 900.1, 900.2]
    assert np.allclose(run.time_unix_s, expected, rtol=0, atol=1e-9)


def test_write_run_then_read_run_gives_the_same_arrays(tmp_path):
    run, _ = synthetic_run(days=1, rate_hz=1 / 60, dark_peak_every=7, gaps=[(0.3, 600.0)], restarts=[(0.6, 300.0)],
                           seed=2)
    path = tmp_path / "syn.sqlite"
    assert write_run(path, run) == run.samples
    back = read_run(path)
    assert np.allclose(back.time_unix_s, run.time_unix_s, rtol=0, atol=1e-6)
    for name in ("temp_c", "bias_set_v", "bias_measured_v", "overvoltage_target_v",
                 "dark_peak_gain", "dark_peak_gain_err", "faults_live", "session_index"):
        assert np.array_equal(getattr(back, name), getattr(run, name), equal_nan=True), name
    assert [e.kind for e in back.events].count(EventKind.LINK_LOST) == 1
    assert len(back.sessions) == 2 and back.unit_id == run.unit_id


# ---------------------------------------------------------------- bad files: one error, nothing written

def _other_sqlite(path):
    conn = sqlite3.connect(path)
    conn.execute("CREATE TABLE t (x)")
    conn.commit()
    conn.close()


def _newer(path):
    with LogbookWriter(path) as writer:
        writer.start_session(IDENTITY, unit_id="u", port="p", rate_hz=1.0, started_unix_s=0.0)
        writer.append(_telemetry(0), host_time_unix_s=0.0)
    conn = sqlite3.connect(path)
    conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    conn.commit()
    conn.close()


@pytest.mark.parametrize("make, reason", [
    (lambda p: p.write_text("time_s,temp_c\n0,1\n"), "not a SQLite database"),
    (_other_sqlite, "not a compensator logbook"),
    (_newer, f"schema version {SCHEMA_VERSION + 1} is newer"),
])
def test_bad_files_are_refused_by_reader_and_writer_without_a_change(tmp_path, make, reason):
    path = tmp_path / "bad.sqlite"
    make(path)
    before = _digest(path)
    listing = sorted(p.name for p in tmp_path.iterdir())
    with pytest.raises(LogbookError) as err:
        read_run(path)
    assert reason in str(err.value) and str(path) in str(err.value)
    assert len(str(err.value).splitlines()) == 1
    with pytest.raises(LogbookError) as err:
        LogbookWriter(path)
    assert reason in str(err.value)
    assert _digest(path) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == listing


def test_empty_run_and_missing_file(tmp_path):
    path = tmp_path / "empty.sqlite"
    with LogbookWriter(path) as writer:
        writer.start_session(IDENTITY, unit_id="u", port="p", rate_hz=1.0, started_unix_s=0.0)
    with pytest.raises(LogbookError, match="no telemetry rows"):
        read_run(path)
    with pytest.raises(LogbookError, match="no such file"):
        read_run(tmp_path / "absent.sqlite")
    with pytest.raises(LogbookError, match="directory does not exist"):
        LogbookWriter(tmp_path / "no" / "dir.sqlite")
    assert not (tmp_path / "no").exists()


def test_locked_database_is_a_clear_error(tmp_path):
    path = tmp_path / "run.sqlite"
    _newer_ok = write_run(path, synthetic_run(days=0.01, rate_hz=0.1, seed=1)[0])
    assert _newer_ok > 0
    holder = subprocess.Popen([sys.executable, "-c", textwrap.dedent(f"""
        import sqlite3, sys, time
        conn = sqlite3.connect({str(path)!r}, isolation_level=None)
        conn.execute("PRAGMA locking_mode = EXCLUSIVE")
        conn.execute("BEGIN EXCLUSIVE")
        conn.execute("INSERT INTO logbook_info VALUES ('held', 'yes')")
        print("locked", flush=True)
        sys.stdin.read()
    """)], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        with pytest.raises(LogbookError, match="locked by another program"):
            read_run(path)
    finally:
        holder.kill()
        holder.wait()


def test_second_logger_on_the_same_file_is_refused(tmp_path):
    path = tmp_path / "run.sqlite"
    with LogbookWriter(path):
        with pytest.raises(LogbookError, match="another logger is writing"):
            LogbookWriter(path)
    LogbookWriter(path).close()      # released when the first one closed


def test_a_sample_with_nan_is_rejected_with_an_event_and_the_batch_survives(tmp_path):
    path = tmp_path / "run.sqlite"
    with LogbookWriter(path) as writer:
        writer.start_session(IDENTITY, unit_id="u", port="p", rate_hz=1.0, started_unix_s=0.0)
        writer.append(_telemetry(0), host_time_unix_s=0.0)
        writer.append(_telemetry(1, sensor_temp_c=float("nan")), host_time_unix_s=1.0)
        writer.append(_telemetry(2, bias_measured_v=float("nan")), host_time_unix_s=2.0)   # nullable: stored empty
    run = read_run(path)
    assert run.samples == 2 and np.isnan(run.bias_measured_v[1])
    rejected = [e for e in read_events(path) if e.kind is EventKind.SAMPLE_REJECTED]
    assert len(rejected) == 1 and "sensor_temp_c" in rejected[0].detail


def test_locked_logbook_from_the_command_line(cli, tmp_path):
    path = tmp_path / "run.sqlite"
    write_run(path, synthetic_run(days=0.01, rate_hz=0.1, seed=1)[0])
    holder = sqlite3.connect(path, isolation_level=None)
    holder.execute("PRAGMA locking_mode = EXCLUSIVE")
    holder.execute("BEGIN EXCLUSIVE")
    holder.execute("INSERT INTO logbook_info VALUES ('held', 'yes')")
    try:
        for command in (["drift", path], ["export", path, "--csv", tmp_path / "out.csv"]):
            result = cli(*command)
            assert result.status == 2 and "locked by another program" in result.stderr
            assert len(result.stderr.strip().splitlines()) == 1
        assert not (tmp_path / "out.csv").exists()
    finally:
        holder.close()
